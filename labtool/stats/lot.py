"""Per-lot (or per any grouping) statistics of the measurement table.

Per group: capture and part counts, counts per verdict, the one-sided 95 % Clopper–Pearson upper bound
on the stuck-at-zero fraction, delay quantiles and moments, the best-fitting delay law, Cpk against an
upper delay spec, delay outliers by modified z-score (within each ramp/temperature/supply cell of the
group, since delays at different set-ups differ by design), and intermittent parts (a part with both
a start and a failure to hold at one set-up: power cycles that disagree).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
import pandas as pd

from labtool.errors import UsageError
from labtool.stats.distributions import DistributionFit, best_fit
from labtool.stats.intervals import upper_bound
from labtool.stats.outliers import MODIFIED_Z_LIMIT, modified_z_scores
from labtool.stats.table import (CAME_UP, FAILED_TO_HOLD, STUCK, cell_keys, delays, groups, part_labels,
                                 plain, require_columns)

VERDICT_COUNTS = {"n_started": "started", "n_stuck": STUCK, "n_slow": "slow_start", "n_ringing": "ringing",
                  "n_recollapse": "recollapse", "n_wrong_level": "wrong_level", "n_incomplete": "incomplete",
                  "n_no_supply": "no_supply"}
MIN_CELL_FOR_OUTLIERS = 5


@dataclass(frozen=True)
class LotStats:
    group: Mapping[str, object] = field(hash=False)
    n: int
    n_parts: int
    n_started: int
    n_stuck: int
    n_slow: int
    n_ringing: int
    n_recollapse: int
    n_wrong_level: int
    n_incomplete: int
    n_no_supply: int
    stuck_ucl95: float
    stuck_ppm_ucl95: float
    delay_n: int
    delay_median_s: float | None
    delay_p05_s: float | None
    delay_p95_s: float | None
    delay_mean_s: float | None
    delay_std_s: float | None
    delay_fit: DistributionFit | None
    spec_max_delay_s: float | None
    cpk: float | None
    outliers: tuple[str, ...]
    intermittent_parts: tuple[str, ...]

    def to_json_dict(self) -> dict:
        out = dict(self.group)
        for name in self.__dataclass_fields__:
            if name == "group":
                continue
            value = getattr(self, name)
            if isinstance(value, DistributionFit):
                value = value.to_json_dict()
            elif isinstance(value, tuple):
                value = list(value)
            out[name] = plain(value) if not isinstance(value, (dict, list)) else value
        return out


def process_capability(mean: float, std: float, *, usl: float | None = None, lsl: float | None = None) -> float | None:
    """Cpk = min(USL − μ, μ − LSL)/(3σ) over the limits given (NIST/SEMATECH e-Handbook §6.1.6);
    with only an upper limit this is the one-sided Cpu."""
    if std is None or not std > 0 or (usl is None and lsl is None):
        return None
    sides = [s for s in ((None if usl is None else usl - mean), (None if lsl is None else mean - lsl)) if s is not None]
    return float(min(sides) / (3.0 * std))


def outlier_flags(df: pd.DataFrame, by: Sequence[str] = ()) -> np.ndarray:
    """True per row whose delay has |modified z| > 3.5 among the captures of its group and set-up cell
    (cells with fewer than MIN_CELL_FOR_OUTLIERS delays are not screened)."""
    if "delay_s" not in df.columns:
        return np.zeros(len(df), bool)
    keys = [*by, *(k for k in cell_keys(df) if k not in by)]
    codes = df.groupby(keys, dropna=False, sort=False).ngroup().to_numpy() if keys else np.zeros(len(df), int)
    d = pd.to_numeric(df["delay_s"], errors="coerce").to_numpy(np.float64)
    count = pd.Series(np.isfinite(d)).groupby(codes).transform("sum").to_numpy()
    z = np.nan_to_num(modified_z_scores(d, codes), nan=0.0)
    return (np.abs(z) > MODIFIED_Z_LIMIT) & (count >= MIN_CELL_FOR_OUTLIERS)


def intermittent_flags(df: pd.DataFrame, labels: pd.Series, by: Sequence[str] = ()) -> np.ndarray:
    """True per row of a part that, within its group and set-up cell, both came up and failed to hold."""
    keys = [*by, *(k for k in cell_keys(df) if k not in by)]
    frame = pd.DataFrame({"label": labels.to_numpy(), "up": df["verdict"].isin(CAME_UP).to_numpy(),
                          "failed": df["verdict"].isin(FAILED_TO_HOLD).to_numpy()})
    for k in keys:
        frame[k] = df[k].to_numpy()
    g = frame.groupby(["label", *keys], dropna=False, sort=False)
    both = g["up"].transform("any") & g["failed"].transform("any")
    return (both & (frame["label"] != "")).to_numpy()


def _one_group(group: dict, rows: pd.DataFrame, spec_max_delay_s: float | None) -> LotStats:
    verdicts = rows["verdict"].value_counts()
    counts = {name: int(verdicts.get(v, 0)) for name, v in VERDICT_COUNTS.items()}
    n = len(rows)
    labels = rows["_part_label"]
    d = delays(rows)
    has = d.size > 0
    mean = float(d.mean()) if has else None
    std = float(d.std(ddof=1)) if d.size > 1 else None
    fit = best_fit(d)
    ucl = upper_bound(counts["n_stuck"], n)
    return LotStats(
        group=group, n=n, n_parts=int(labels[labels != ""].nunique()), **counts,
        stuck_ucl95=ucl, stuck_ppm_ucl95=ucl * 1e6, delay_n=int(d.size),
        delay_median_s=float(np.median(d)) if has else None,
        delay_p05_s=float(np.percentile(d, 5)) if has else None,
        delay_p95_s=float(np.percentile(d, 95)) if has else None,
        delay_mean_s=mean, delay_std_s=std, delay_fit=fit.best if fit else None,
        spec_max_delay_s=spec_max_delay_s,
        cpk=process_capability(mean, std, usl=spec_max_delay_s) if spec_max_delay_s is not None and has else None,
        outliers=tuple(sorted(map(str, rows.loc[rows["_outlier"], "capture_id"]))) if "capture_id" in rows else (),
        intermittent_parts=tuple(sorted(set(labels[rows["_intermittent"]]))))


def lot_statistics(measurements: pd.DataFrame, by: Sequence[str] = ("lot",),
                   spec_max_delay_s: float | None = None) -> list[LotStats]:
    """One :class:`LotStats` per group of ``by`` (any condition or tag columns)."""
    if measurements.empty:
        raise UsageError("no measurements: run `labtool measure CAMPAIGN` first")
    require_columns(measurements, ["verdict"], "lot statistics")
    require_columns(measurements, by, "--by")
    labels = part_labels(measurements)
    table = measurements.assign(_part_label=labels.to_numpy(), _outlier=outlier_flags(measurements, by),
                                _intermittent=intermittent_flags(measurements, labels, by))
    return [_one_group(g, rows, spec_max_delay_s) for g, rows in groups(table, by, "--by")]


def lot_table(stats: Sequence[LotStats]) -> pd.DataFrame:
    """DataFrame form: one row per group; the delay fit flattened to delay_fit_* columns."""
    records = []
    for s in stats:
        rec = s.to_json_dict()
        fit = rec.pop("delay_fit")
        rec["delay_fit_distribution"] = fit["distribution"] if fit else None
        rec["delay_fit_aic"] = fit["aic"] if fit else None
        rec["delay_fit_ks_pvalue"] = fit["ks_pvalue"] if fit else None
        rec["delay_fit_ad_stat"] = fit["ad_stat"] if fit else None
        rec["delay_fit_ad_pvalue"] = fit["ad_pvalue"] if fit else None
        rec["outliers"] = ",".join(rec["outliers"])
        rec["intermittent_parts"] = ",".join(rec["intermittent_parts"])
        records.append(rec)
    return pd.DataFrame.from_records(records)
