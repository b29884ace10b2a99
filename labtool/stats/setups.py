"""The one place that summarises a set-up: which captures' delays count, and their figures.

A set-up is one bench condition of a part: supply ramp × temperature × supply voltage
(:data:`SETUP_KEYS`). Delays at different set-ups differ by design (by decades between a 10 µs and a
100 ms ramp, and they are negative when the output is up before the supply is valid), so every delay
figure (median, p05/p95, mean, standard deviation, fitted law, Cpk, outliers) is computed within one
set-up and never across set-ups. Lot statistics, the comparison with predictions, the Monte Carlo
summaries and the report all take their delay figures from here.

Only captures whose output came up and stayed count (:data:`DELAY_VERDICTS`: started, slow start,
ringing); a re-collapse, a wrong level or an incomplete record has a crossing time but not a startup
delay. A predictions table without verdicts counts its rows that are not stuck.

Quantiles are numpy's default (linear interpolation between order statistics, Hyndman & Fan 1996
definition 7; from memory); the standard deviation has ddof = 1. Outliers: modified z-score
|M| > 3.5 among the set-up's counted delays (Iglewicz & Hoaglin 1993), screened only with at least
:data:`MIN_FOR_OUTLIERS` of them.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Iterator, Mapping, Sequence

import numpy as np
import pandas as pd

from labtool.measure.verdict import VERDICTS
from labtool.stats.distributions import DistributionFit, best_fit
from labtool.stats.outliers import MODIFIED_Z_LIMIT, modified_z_scores
from labtool.stats.table import CELL_KEYS, STUCK, plain

SETUP_KEYS = CELL_KEYS
# The output came up and stayed: these captures' delays are startup delays.
DELAY_VERDICTS = ("started", "slow_start", "ringing")
MIN_FOR_OUTLIERS = 5


def setup_keys(df: pd.DataFrame) -> list[str]:
    """The set-up columns the table has."""
    return [k for k in SETUP_KEYS if k in df.columns]


def delay_mask(rows: pd.DataFrame) -> np.ndarray:
    """True per row whose delay counts: a delay verdict (or, without verdicts, not stuck) and a finite delay."""
    if "delay_s" not in rows.columns:
        return np.zeros(len(rows), bool)
    d = pd.to_numeric(rows["delay_s"], errors="coerce").to_numpy(np.float64)
    if "verdict" in rows.columns:
        ok = rows["verdict"].isin(DELAY_VERDICTS).to_numpy()
    elif "stuck" in rows.columns:
        ok = ~rows["stuck"].astype(bool).to_numpy()
    else:
        ok = np.ones(len(rows), bool)
    return ok & np.isfinite(d)


def counted(rows: pd.DataFrame, column: str = "delay_s") -> np.ndarray:
    """``column`` of the rows whose delay counts (finite values only)."""
    if column not in rows.columns:
        return np.empty(0)
    v = pd.to_numeric(rows[column], errors="coerce").to_numpy(np.float64)[delay_mask(rows)]
    return v[np.isfinite(v)]


def split_setups(df: pd.DataFrame) -> Iterator[tuple[dict, pd.DataFrame]]:
    """({ramp_s, temperature_c, vdd_v}, rows) per set-up, sorted; a key the table lacks is None."""
    keys = setup_keys(df)
    missing = {k: None for k in SETUP_KEYS if k not in keys}
    if not keys:
        yield dict(missing), df
        return
    for values, rows in df.groupby(keys, dropna=False, sort=True):
        values = values if isinstance(values, tuple) else (values,)
        yield {k: plain(v) for k, v in zip(keys, values)} | missing, rows


def setup_tuple(setup: Mapping[str, object]) -> tuple:
    """A set-up as a hashable key, in SETUP_KEYS order (None for a key not known)."""
    return tuple(setup.get(k) for k in SETUP_KEYS)


@dataclass(frozen=True)
class Quantiles:
    """n, median, p05, p95, mean and standard deviation (ddof 1) of a sample; None where not defined."""

    n: int
    median: float | None
    p05: float | None
    p95: float | None
    mean: float | None
    std: float | None


def quantiles(values: np.ndarray) -> Quantiles:
    x = np.asarray(values, dtype=np.float64)
    x = x[np.isfinite(x)]
    if not x.size:
        return Quantiles(0, None, None, None, None, None)
    p05, med, p95 = (float(v) for v in np.percentile(x, [5, 50, 95]))
    return Quantiles(int(x.size), med, p05, p95, float(x.mean()), float(x.std(ddof=1)) if x.size > 1 else None)


def process_capability(mean: float, std: float, *, usl: float | None = None, lsl: float | None = None) -> float | None:
    """Cpk = min(USL − μ, μ − LSL)/(3σ) over the limits given (NIST/SEMATECH e-Handbook §6.1.6);
    with only an upper limit this is the one-sided Cpu."""
    if mean is None or std is None or not std > 0 or (usl is None and lsl is None):
        return None
    sides = [s for s in ((None if usl is None else usl - mean), (None if lsl is None else mean - lsl)) if s is not None]
    return float(min(sides) / (3.0 * std))


def verdict_counts(verdicts: pd.Series) -> dict[str, int]:
    """``n_<verdict>`` for every verdict of the engine, in its order (zero when absent)."""
    counts = verdicts.value_counts()
    return {f"n_{v}": int(counts.get(v, 0)) for v in VERDICTS}


@dataclass(frozen=True)
class SetupSummary:
    """The figures of one set-up. Delay figures are over the captures whose output came up and stayed;
    ``vsupply_at_valid_*_v`` over the same captures (the supply when the output crossed 90 %)."""

    setup: Mapping[str, object] = field(hash=False)
    n_captures: int
    n_parts: int
    n_parts_stuck: int
    counts: Mapping[str, int] = field(hash=False)  # n_<verdict>
    delay: Quantiles
    delay_fit: DistributionFit | None
    spec_max_delay_s: float | None
    cpk: float | None
    outliers: tuple[str, ...]
    vsupply_at_valid: Quantiles

    @property
    def ready_before_supply_valid(self) -> bool | None:
        """The output crossed 90 % before the supply was valid (median delay below zero)."""
        return None if self.delay.median is None else self.delay.median < 0

    def to_json_dict(self) -> dict:
        d, v = self.delay, self.vsupply_at_valid
        return {**{k: plain(x) for k, x in self.setup.items()}, "n_captures": self.n_captures,
                "n_parts": self.n_parts, "n_parts_stuck": self.n_parts_stuck, **self.counts,
                **delay_fields(d), "delay_fit": self.delay_fit.to_json_dict() if self.delay_fit else None,
                "spec_max_delay_s": self.spec_max_delay_s, "cpk": self.cpk, "outliers": list(self.outliers),
                "ready_before_supply_valid": self.ready_before_supply_valid,
                "vsupply_at_valid_median_v": v.median, "vsupply_at_valid_p05_v": v.p05,
                "vsupply_at_valid_p95_v": v.p95}


def delay_fields(q: Quantiles | None) -> dict:
    """The delay_* keys of a JSON row (all None without a summary)."""
    names = ("n", "median", "p05", "p95", "mean", "std")
    return {("delay_n" if n == "n" else f"delay_{n}_s"): (None if q is None else getattr(q, n)) for n in names}


def _by_code(codes: np.ndarray, values: np.ndarray, n_codes: int) -> list[Quantiles]:
    """:class:`Quantiles` of ``values`` per code 0..n_codes−1 (one pass, not one per set-up)."""
    frame = pd.DataFrame({"code": codes, "v": values})
    g = frame.groupby("code")["v"]
    stats = pd.DataFrame({"n": g.count(), "median": g.median(), "p05": g.quantile(0.05), "p95": g.quantile(0.95),
                          "mean": g.mean(), "std": g.std(ddof=1)}).reindex(range(n_codes))
    out = []
    for row in stats.itertuples(index=False):
        n = 0 if pd.isna(row.n) else int(row.n)
        out.append(Quantiles(n, *(plain(getattr(row, k)) if n else None for k in ("median", "p05", "p95", "mean")),
                             plain(row.std) if n > 1 else None))
    return out


def summarise_setups(df: pd.DataFrame, by: Sequence[str], units: pd.Series,
                     spec_max_delay_s: float | None = None) -> dict[tuple, list[SetupSummary]]:
    """Every set-up of every group of ``by`` at once: group key (its values, as ``groups`` gives them) →
    the group's :class:`SetupSummary` list, sorted by set-up. ``units`` names the part of each row."""
    skeys = setup_keys(df)
    cols = list(dict.fromkeys([*by, *skeys]))
    codes = df.groupby(cols, dropna=False, sort=True).ngroup().to_numpy() if cols else np.zeros(len(df), int)
    n_codes = int(codes.max()) + 1 if len(df) else 0
    first = np.unique(codes, return_index=True)[1]
    keyed = df[cols].iloc[first] if cols else pd.DataFrame(index=range(n_codes))
    mask = delay_mask(df)
    d = pd.to_numeric(df["delay_s"], errors="coerce").to_numpy(np.float64)[mask] if mask.any() else np.empty(0)
    dc = codes[mask]
    delay = _by_code(dc, d, n_codes)
    vsup = pd.to_numeric(df.get("vsupply_at_valid_v", pd.Series(np.nan, df.index)), errors="coerce").to_numpy(
        np.float64)[mask]
    supply = _by_code(dc[np.isfinite(vsup)], vsup[np.isfinite(vsup)], n_codes)
    verdicts = pd.crosstab(codes, df["verdict"].to_numpy()).reindex(index=range(n_codes), columns=list(VERDICTS),
                                                                    fill_value=0).to_numpy()
    unit = units.to_numpy()
    n_parts = pd.Series(unit).groupby(codes).nunique().reindex(range(n_codes), fill_value=0).to_numpy()
    stuck = df["verdict"].to_numpy() == STUCK
    n_stuck = pd.Series(unit[stuck]).groupby(codes[stuck]).nunique().reindex(range(n_codes), fill_value=0).to_numpy()
    n_rows = np.bincount(codes, minlength=n_codes)
    count = np.bincount(dc, minlength=n_codes)
    z = np.nan_to_num(modified_z_scores(d, dc), nan=0.0) if d.size else np.empty(0)
    flagged = (np.abs(z) > MODIFIED_Z_LIMIT) & (count[dc] >= MIN_FOR_OUTLIERS)
    ids = df["capture_id"].to_numpy()[mask] if "capture_id" in df.columns else np.arange(d.size).astype(str)
    order = np.argsort(dc, kind="stable")
    bounds = np.searchsorted(dc[order], np.arange(n_codes + 1))
    out: dict[tuple, list[SetupSummary]] = {}
    for code, row in enumerate(keyed.itertuples(index=False)):
        values = dict(zip(cols, (plain(v) for v in row)))
        members = order[bounds[code]:bounds[code + 1]]
        fit = best_fit(d[members])
        q = delay[code]
        summary = SetupSummary(
            setup={k: values.get(k) for k in SETUP_KEYS}, n_captures=int(n_rows[code]),
            n_parts=int(n_parts[code]), n_parts_stuck=int(n_stuck[code]),
            counts={f"n_{v}": int(n) for v, n in zip(VERDICTS, verdicts[code])}, delay=q,
            delay_fit=fit.best if fit else None, spec_max_delay_s=spec_max_delay_s,
            cpk=process_capability(q.mean, q.std, usl=spec_max_delay_s) if spec_max_delay_s is not None else None,
            outliers=tuple(sorted(str(i) for i in ids[members][flagged[members]])), vsupply_at_valid=supply[code])
        out.setdefault(tuple(values.get(k) for k in by), []).append(summary)
    return out
