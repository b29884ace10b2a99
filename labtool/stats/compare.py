"""Measured lots against predictions: delay distributions and stuck-at-zero fractions.

Within a group, predictions are matched to measured captures by the condition columns both tables
have (e.g. ramp_s, temperature_c). When a group mixes set-ups, the predicted side is rebuilt with the
measured mix: each set-up's predicted samples are represented by evenly spaced order statistics
(stuck samples sorting last, as a start that never came), in proportion to the measured captures at
that set-up. Tests: two-sample Kolmogorov–Smirnov (``scipy.stats.ks_2samp``) and Anderson–Darling
k-sample (Scholz & Stephens, JASA 82, 1987; ``scipy.stats.anderson_ksamp``, midrank variant, p-value
interpolated from tables and clipped to 0.001–0.25) on the delays; Fisher's exact test on the 2×2
table of stuck/not stuck measured vs predicted (it allows for the finite number of predicted
samples). Findings at ALPHA = 0.05: the stuck fraction by Fisher's test; the delays when either
delay test is below ALPHA/2 (Bonferroni over the two). Captures with verdict ``no_supply`` say nothing
about the chip and are left out.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
import pandas as pd
from scipy import stats

from labtool.errors import UsageError
from labtool.stats.predictions import NUMERIC_CONDITIONS, TEXT_CONDITIONS
from labtool.stats.table import CAME_UP, STUCK, groups, plain, require_columns
from labtool.units import format_si

ALPHA = 0.05
# When the delay laws differ, the finding is the spread only if the location shift is small against
# the predicted spread (|shift| < _SHIFT_OF_IQR × the set-up's predicted IQR) and the spreads differ
# beyond _SPREAD_BAND; otherwise the direction of the shift (slower / faster).
_SHIFT_OF_IQR = 0.25
_SPREAD_BAND = (0.8, 1.25)


@dataclass(frozen=True)
class Comparison:
    group: Mapping[str, object] = field(hash=False)
    match_columns: tuple[str, ...]
    n_measured: int
    n_unmatched: int
    n_predicted: int
    measured_delay_median_s: float | None
    predicted_delay_median_s: float | None
    measured_delay_iqr_s: float | None
    predicted_delay_iqr_s: float | None
    delay_shift_s: float | None
    delay_shift_iqr: float | None
    median_ratio: float | None
    spread_ratio: float | None
    ks_stat: float | None
    ks_pvalue: float | None
    ad_stat: float | None
    ad_pvalue: float | None
    measured_n_stuck: int
    measured_p_stuck: float | None
    predicted_n_stuck: int
    predicted_p_stuck: float | None
    stuck_pvalue: float | None
    finding: str
    findings: tuple[str, ...]
    finding_text: str

    def to_json_dict(self) -> dict:
        out = dict(self.group)
        for name in self.__dataclass_fields__:
            if name != "group":
                value = getattr(self, name)
                out[name] = list(value) if isinstance(value, tuple) else plain(value)
        return out


def _key(value):
    """Condition values as matching keys: floats to 9 significant digits (10us read from text vs 1e-05)."""
    if isinstance(value, (float, np.floating)):
        return None if np.isnan(value) else float(f"{value:.9g}")
    return None if value is None or value is pd.NA else str(value)


def match_columns(measurements: pd.DataFrame, predictions: pd.DataFrame, by: Sequence[str]) -> tuple[str, ...]:
    candidates = (*NUMERIC_CONDITIONS, *TEXT_CONDITIONS, *by)
    return tuple(dict.fromkeys(c for c in candidates if c in predictions.columns and c in measurements.columns))


def _cell_index(df: pd.DataFrame, cols: Sequence[str]) -> pd.Series:
    if not cols:
        return pd.Series([()] * len(df), index=df.index, dtype=object)
    return pd.Series([tuple(_key(v) for v in row) for row in df[list(cols)].itertuples(index=False)],
                     index=df.index, dtype=object)


def mixed_prediction(pred_by_cell: Mapping[tuple, pd.DataFrame], measured_counts: Mapping[tuple, int]):
    """Predicted (delays, stuck flags) with the measured mix of set-ups; see the module notes."""
    total_pred = sum(len(pred_by_cell[c]) for c in measured_counts)
    total_meas = sum(measured_counts.values())
    delays, stuck = [], []
    for cell, n_meas in measured_counts.items():
        p = pred_by_cell[cell]
        order = np.where(p["stuck"].to_numpy(bool), np.inf, p["delay_s"].to_numpy(np.float64))
        order = np.sort(np.where(np.isnan(order), np.inf, order))
        m = max(1, int(round(total_pred * n_meas / total_meas)))
        picked = order[np.minimum(((np.arange(m) + 0.5) * order.size / m).astype(int), order.size - 1)]
        delays.append(picked)
        stuck.append(np.isinf(picked))
    d, s = np.concatenate(delays), np.concatenate(stuck)
    return d[~s], s


@dataclass(frozen=True)
class _Location:
    shift_s: float | None  # median of (delay − predicted median at the capture's set-up)
    shift_iqr: float | None  # the same in units of the predicted IQR at that set-up
    spread_ratio: float | None  # IQR of measured vs predicted delays, each standardised per set-up


def _location(rows: pd.DataFrame, cells: pd.Series, pred_by_cell: Mapping[tuple, pd.DataFrame]) -> _Location:
    """Location and spread against the prediction set-up by set-up, so that a group mixing set-ups
    (and negative delays on slow ramps) is judged by its captures' own set-ups, not by the mixture."""
    if "delay_s" not in rows.columns or rows.empty:
        return _Location(None, None, None)
    centre, scale, pred_std = {}, {}, []
    for cell in set(cells):
        p = pred_by_cell[cell]
        d = p.loc[~p["stuck"], "delay_s"].to_numpy(np.float64)
        d = d[np.isfinite(d)]
        centre[cell] = float(np.median(d)) if d.size else np.nan
        scale[cell] = _iqr(d) or np.nan
        if d.size >= 2 and scale[cell] > 0:
            pred_std.append((d - centre[cell]) / scale[cell])
    d = pd.to_numeric(rows["delay_s"], errors="coerce").to_numpy(np.float64)
    diff = d - cells.map(centre).to_numpy(np.float64)
    std = diff / cells.map(scale).to_numpy(np.float64)
    diff, std = diff[np.isfinite(diff)], std[np.isfinite(std)]
    iqr_m = _iqr(std)
    iqr_p = _iqr(np.concatenate(pred_std)) if pred_std else None
    return _Location(shift_s=float(np.median(diff)) if diff.size else None,
                     shift_iqr=float(np.median(std)) if std.size else None,
                     spread_ratio=(iqr_m / iqr_p if iqr_m is not None and iqr_p else None))


def _iqr(x: np.ndarray) -> float | None:
    return float(np.subtract(*np.percentile(x, [75, 25]))) if x.size >= 2 else None


def _delay_tests(a: np.ndarray, b: np.ndarray):
    if a.size < 2 or b.size < 2 or np.unique(np.concatenate([a, b])).size < 2:
        return None, None, None, None
    ks = stats.ks_2samp(a, b)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the table p-value is clipped to 0.001..0.25, said in the notes
        ad = stats.anderson_ksamp([a, b], variant="midrank")
    return float(ks.statistic), float(ks.pvalue), float(ad.statistic), float(ad.pvalue)


def _finding(c: dict) -> tuple[str, tuple[str, ...], str]:
    found: list[str] = []
    words: list[str] = []
    if c["stuck_pvalue"] is not None and c["stuck_pvalue"] < ALPHA:
        more = c["measured_p_stuck"] > c["predicted_p_stuck"]
        found.append("more_stuck" if more else "less_stuck")
        words.append(f"{'more' if more else 'fewer'} stuck than predicted: {c['measured_n_stuck']} of "
                     f"{c['n_measured']} measured ({100 * c['measured_p_stuck']:.3g} %) vs "
                     f"{100 * c['predicted_p_stuck']:.3g} % predicted (Fisher exact p = {c['stuck_pvalue']:.2g})")
    pvals = [p for p in (c["ks_pvalue"], c["ad_pvalue"]) if p is not None]
    if pvals and min(pvals) < ALPHA / len(pvals):  # Bonferroni over the two delay tests
        shift, spread = c["delay_shift_s"], c["spread_ratio"]
        if spread is not None and c["delay_shift_iqr"] is not None and abs(c["delay_shift_iqr"]) < _SHIFT_OF_IQR \
                and not _SPREAD_BAND[0] <= spread <= _SPREAD_BAND[1]:
            code = "wider" if spread > 1 else "narrower"
            words.append(f"delay spread {code} than predicted: ×{spread:.3g} the predicted IQR at the same set-ups")
        else:
            code = "slower" if shift > 0 else "faster"
            ratio = f", ×{c['median_ratio']:.3g}" if c["median_ratio"] is not None else ""
            sign = "+" if shift > 0 else "−"
            words.append(f"{code} than predicted: delays {sign}{format_si(abs(shift), 's')} from the prediction at "
                         f"their set-ups (median {format_si(c['measured_delay_median_s'], 's')} vs "
                         f"{format_si(c['predicted_delay_median_s'], 's')}{ratio})")
        found.append(code)
        words[-1] += f"; KS p = {c['ks_pvalue']:.2g}, AD p = {c['ad_pvalue']:.2g}"
    if not found:
        parts = []
        if c["measured_delay_median_s"] is not None and c["predicted_delay_median_s"] is not None:
            parts.append(f"median delay {format_si(c['measured_delay_median_s'], 's')} vs "
                         f"{format_si(c['predicted_delay_median_s'], 's')}"
                         f" (KS p = {c['ks_pvalue'] if c['ks_pvalue'] is None else round(c['ks_pvalue'], 3)})")
        parts.append(f"stuck {c['measured_n_stuck']} of {c['n_measured']} vs {c['predicted_n_stuck']} of "
                     f"{c['n_predicted']} predicted")
        return "consistent", ("consistent",), "consistent with prediction: " + "; ".join(parts)
    return found[0], tuple(found), "; ".join(words)


def _compare_group(group: dict, rows: pd.DataFrame, pred_by_cell: Mapping[tuple, pd.DataFrame],
                   cols: tuple[str, ...]) -> Comparison:
    rows = rows[rows["verdict"] != "no_supply"]
    cells = _cell_index(rows, cols)
    matched = cells.map(lambda c: c in pred_by_cell).astype(bool)
    used = rows[matched]
    counts = cells[matched].value_counts().to_dict()
    if counts:
        pred_delays, pred_stuck = mixed_prediction(pred_by_cell, counts)
    else:
        pred_delays, pred_stuck = np.empty(0), np.empty(0, bool)
    came_up = used["verdict"].isin(CAME_UP).to_numpy()
    d = pd.to_numeric(used["delay_s"], errors="coerce").to_numpy(np.float64) if "delay_s" in used else np.empty(0)
    meas_delays = d[came_up & np.isfinite(d)] if d.size else d
    k, n = int((used["verdict"] == STUCK).sum()), len(used)
    kp, npred = int(pred_stuck.sum()), int(pred_stuck.size)
    ks_stat, ks_p, ad_stat, ad_p = _delay_tests(meas_delays, pred_delays)
    med_m = float(np.median(meas_delays)) if meas_delays.size else None
    med_p = float(np.median(pred_delays)) if pred_delays.size else None
    iqr_m, iqr_p = _iqr(meas_delays), _iqr(pred_delays)
    loc = _location(used[came_up], cells[matched][came_up], pred_by_cell)
    c = dict(
        delay_shift_s=loc.shift_s, delay_shift_iqr=loc.shift_iqr, spread_ratio=loc.spread_ratio,
        group=group, match_columns=cols, n_measured=n, n_unmatched=int((~matched).sum()), n_predicted=npred,
        measured_delay_median_s=med_m, predicted_delay_median_s=med_p,
        measured_delay_iqr_s=iqr_m, predicted_delay_iqr_s=iqr_p,
        median_ratio=(med_m / med_p if med_m is not None and med_p is not None and med_m > 0 and med_p > 0 else None),
        ks_stat=ks_stat, ks_pvalue=ks_p, ad_stat=ad_stat, ad_pvalue=ad_p,
        measured_n_stuck=k, measured_p_stuck=(k / n if n else None),
        predicted_n_stuck=kp, predicted_p_stuck=(kp / npred if npred else None),
        stuck_pvalue=(float(stats.fisher_exact([[k, n - k], [kp, npred - kp]]).pvalue) if n and npred else None))
    if not n or not npred:
        where = ", ".join(f"{k}={v}" for k, v in group.items())
        finding, findings, text = "no_prediction", ("no_prediction",), f"no prediction matches {where} on {', '.join(cols) or 'any condition'}"
    else:
        finding, findings, text = _finding(c)
    return Comparison(**c, finding=finding, findings=findings, finding_text=text)


def compare(measurements: pd.DataFrame, predictions: pd.DataFrame, by: Sequence[str] = ("lot",)) -> list[Comparison]:
    """One :class:`Comparison` per group of ``by``."""
    if measurements.empty:
        raise UsageError("no measurements: run `labtool measure CAMPAIGN` first")
    require_columns(measurements, ["verdict"], "compare")
    if "delay_s" not in predictions.columns or "stuck" not in predictions.columns:
        raise UsageError("predictions need the columns delay_s and stuck")
    cols = match_columns(measurements, predictions, by)
    pred = predictions.assign(stuck=predictions["stuck"].astype(bool))
    pred_by_cell = {cell: part for cell, part in pred.groupby(_cell_index(pred, cols), sort=False)} if cols \
        else {(): pred}
    return [_compare_group(g, rows, pred_by_cell, cols) for g, rows in groups(measurements, by, "--by")]


def comparison_table(comparisons: Sequence[Comparison]) -> pd.DataFrame:
    return pd.DataFrame.from_records([{**c.to_json_dict(), "findings": ",".join(c.findings),
                                       "match_columns": ",".join(c.match_columns)} for c in comparisons])
