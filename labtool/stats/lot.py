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
from labtool.stats.outliers import outlier_mask
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


def delay_outliers(rows: pd.DataFrame) -> tuple[str, ...]:
    """capture_ids whose delay has |modified z| > 3.5 among the captures of its set-up cell."""
    if "delay_s" not in rows.columns or "capture_id" not in rows.columns:
        return ()
    d = pd.to_numeric(rows["delay_s"], errors="coerce")
    keys = cell_keys(rows)
    found: list[str] = []
    cells = rows.groupby(keys, dropna=False).indices.values() if keys else [np.arange(len(rows))]
    values = d.to_numpy(dtype=np.float64)
    ids = rows["capture_id"].to_numpy()
    for idx in cells:
        v = values[idx]
        if np.count_nonzero(np.isfinite(v)) >= MIN_CELL_FOR_OUTLIERS:
            found.extend(ids[idx][outlier_mask(v)])
    return tuple(sorted(map(str, found)))


def intermittent_parts(rows: pd.DataFrame) -> tuple[str, ...]:
    """Parts (``LOT/PART``) with at least one capture that came up and one that did not hold at one set-up."""
    if "part" not in rows.columns:
        return ()
    labels = part_labels(rows)
    came_up = rows["verdict"].isin(CAME_UP)
    failed = rows["verdict"].isin(FAILED_TO_HOLD)
    frame = pd.DataFrame({"label": labels, "up": came_up, "failed": failed})
    for k in cell_keys(rows):
        frame[k] = rows[k]
    frame = frame[frame["label"] != ""]
    agg = frame.groupby(["label", *cell_keys(rows)], dropna=False)[["up", "failed"]].any()
    both = agg[agg["up"] & agg["failed"]]
    return tuple(sorted(set(both.index.get_level_values("label"))))


def _one_group(group: dict, rows: pd.DataFrame, spec_max_delay_s: float | None) -> LotStats:
    verdicts = rows["verdict"].value_counts()
    counts = {name: int(verdicts.get(v, 0)) for name, v in VERDICT_COUNTS.items()}
    n = len(rows)
    labels = part_labels(rows)
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
        outliers=delay_outliers(rows), intermittent_parts=intermittent_parts(rows))


def lot_statistics(measurements: pd.DataFrame, by: Sequence[str] = ("lot",),
                   spec_max_delay_s: float | None = None) -> list[LotStats]:
    """One :class:`LotStats` per group of ``by`` (any condition or tag columns)."""
    if measurements.empty:
        raise UsageError("no measurements: run `labtool measure CAMPAIGN` first")
    require_columns(measurements, ["verdict"], "lot statistics")
    return [_one_group(g, rows, spec_max_delay_s) for g, rows in groups(measurements, by, "--by")]


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
        rec["outliers"] = ",".join(rec["outliers"])
        rec["intermittent_parts"] = ",".join(rec["intermittent_parts"])
        records.append(rec)
    return pd.DataFrame.from_records(records)
