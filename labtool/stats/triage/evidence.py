"""A part's captures against its lot, set-up by set-up: the numbers every story's likelihood is built from.

Set-up = the values of :data:`labtool.stats.table.CELL_KEYS` the table has (ramp, temperature,
supply). The baseline of a set-up is the other parts of the same lot at exactly that set-up; a part
alone in its lot is compared with the other lots at the same set-ups. Baselines are never pooled
over set-ups: a small one is named ("baseline too small at …") and its rates and spreads widened.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from labtool.stats.table import cell_keys, plain, require_columns
from labtool.stats.triage.densities import log_healthy, log_shifted, log_t
from labtool.stats.triage.hypotheses import CATEGORIES, FLAG_METRIC, category_index
from labtool.stats.triage.metrics import (METRICS, MIN_BASELINE, CaptureResolution, Spread, baseline_spread,
                                          total_scale)
from labtool.stats.triage.parts import current_versions, select_part
from labtool.units import format_si

_UNITS = {"ramp_s": "s", "temperature_c": "°C", "vdd_v": "V"}
# What a capture's resolution floor and its assumed resolution are computed from.
_FLOOR_COLUMNS = ("capture_id", "vout_final_v", "vsupply_final_v", "rise_s", "dt_s", "n_samples")


def setup_text(keys, values) -> str:
    """``ramp 100 ms, −40 °C, 1.8 V`` (what is unknown is said so)."""
    parts = []
    for k, v in zip(keys, values):
        if v is None:
            parts.append(f"{k} unknown")
        elif k == "ramp_s":
            parts.append(f"ramp {format_si(v, 's')}")
        elif k == "temperature_c":
            parts.append(f"{v:g} °C")
        else:
            parts.append(format_si(v, _UNITS.get(k, "")).strip())
    return ", ".join(parts) or "one set-up"


def _order(setup: tuple) -> tuple:
    return tuple((v is None, v or 0.0) for v in setup)


def _keys(rows: pd.DataFrame, keys: list[str]) -> list[tuple]:
    """Each row's set-up: the values of ``keys`` as floats, None where missing."""
    values = rows[keys].apply(pd.to_numeric, errors="coerce").to_numpy(dtype=np.float64) if keys else \
        np.zeros((len(rows), 0))
    return [tuple(None if math.isnan(v) else float(v) for v in row) for row in values.tolist()]


@dataclass
class MetricEvidence:
    """One continuous value over the part's captures (arrays aligned with the captures)."""

    column: str
    eligible: np.ndarray  # bool: the capture has the value and its set-up a baseline
    x: np.ndarray
    median: np.ndarray
    tau: np.ndarray
    dof: np.ndarray
    z: np.ndarray
    log_healthy: np.ndarray  # ln density of x under the lot's spread (0 where not eligible)
    log_up: np.ndarray  # ... shifted upward by an unknown amount
    log_down: np.ndarray

    def log_shift(self, sign: int) -> np.ndarray:
        if sign > 0:
            return self.log_up
        if sign < 0:
            return self.log_down
        return np.where(self.eligible, np.logaddexp(self.log_up, self.log_down) - math.log(2.0), 0.0)


@dataclass
class PartEvidence:
    label: str
    lot: str | None
    rows: pd.DataFrame  # the part's captures (current versions), in table order
    lot_rows: pd.DataFrame  # the baseline parts' captures
    keys: list[str]
    setups: list[tuple]  # the part's set-ups
    setup_of: np.ndarray  # per capture: index into setups
    category: np.ndarray  # per capture: index into CATEGORIES
    temps: list[float]  # distinct tested temperatures, ascending
    ramps: list[float]
    part_counts: np.ndarray  # (set-up, category)
    baseline_counts: np.ndarray
    log_healthy_setup: np.ndarray  # ln P(part's verdicts at the set-up | healthy)
    metrics: dict[str, MetricEvidence]
    lot_setups: dict[tuple, np.ndarray] = field(default_factory=dict)  # every set-up of the lot: its counts
    notes: list[str] = field(default_factory=list)

    @property
    def n(self) -> int:
        return len(self.rows)

    def axis_index(self, setups: list[tuple]) -> tuple[np.ndarray, np.ndarray]:
        """Index of each set-up's temperature and ramp among the tested ones (−1: unknown or untested)."""
        def index(axis, key):
            if key not in self.keys:
                return np.full(len(setups), -1)
            col = self.keys.index(key)
            return np.array([axis.index(s[col]) if s[col] in axis else -1 for s in setups], dtype=int)
        return index(self.temps, "temperature_c"), index(self.ramps, "ramp_s")

    def describe(self, setup: tuple) -> str:
        return setup_text(self.keys, setup)

    def setup_dict(self, setup: tuple) -> dict:
        return {k: v for k, v in zip(self.keys, setup)}


def _counts(categories: np.ndarray) -> np.ndarray:
    return np.bincount(categories, minlength=len(CATEGORIES)).astype(np.float64)


def _categories(verdicts: pd.Series) -> np.ndarray:
    return np.array([category_index(v) for v in verdicts], dtype=int)


def _carries(verdicts: pd.Series, metric) -> np.ndarray:
    """Captures whose verdict carries the metric's value, except the flag that stands for it."""
    return np.array([v in metric.verdicts and FLAG_METRIC.get(v) != metric.column for v in verdicts.astype(str)],
                    dtype=bool)


def collect(measurements: pd.DataFrame, part: str, lot: str | None = None,
            resolution: pd.DataFrame | None = None) -> PartEvidence:
    """Everything the stories need about ``part`` (``LOT/PART`` or ``PART`` with ``lot``).

    ``resolution``: per ``capture_id`` the columns of :class:`CaptureResolution` (measured on the
    waveforms, :func:`labtool.stats.triage.inputs.load_resolution`); captures without one get the
    assumed 8-bit resolution.
    """
    require_columns(measurements, ["verdict", "part"], "triage")
    table = current_versions(measurements)
    lot, name, mine = select_part(table, part, lot)
    rows = table[mine.to_numpy()]
    others = table[~mine.to_numpy()]
    notes: list[str] = []
    if lot is not None and "lot" in others.columns:
        same = (others["lot"].astype("string") == lot).fillna(False).to_numpy(bool)
        if same.any():
            others = others[same]
        elif len(others):
            notes.append(f"{lot}/{name} is the only part of lot {lot}: its baseline is the other lots at the same "
                         "set-ups")
    # a condition nobody recorded (all blank) does not split set-ups
    keys = [k for k in cell_keys(table) if table[k].notna().any()]
    setup_keys = _keys(rows, keys)
    other_keys = _keys(others, keys)
    setups = sorted(set(setup_keys), key=_order)
    setup_of = np.array([setups.index(k) for k in setup_keys], dtype=int)
    category = _categories(rows["verdict"])
    other_category = _categories(others["verdict"])
    lot_keys = sorted(set(other_keys), key=_order)
    position = {k: i for i, k in enumerate(lot_keys)}
    other_at = np.array([position[k] for k in other_keys], dtype=int)  # each baseline row's set-up
    lot_setups = {k: _counts(other_category[other_at == i]) for i, k in enumerate(lot_keys)}
    lot_index = np.array([position.get(s, -1) for s in setups], dtype=int)[setup_of]
    part_counts = np.array([_counts(category[setup_of == i]) for i in range(len(setups))])
    baseline_counts = np.array([lot_setups.get(s, np.zeros(len(CATEGORIES))) for s in setups])
    log_h = np.array([log_healthy(part_counts[i], baseline_counts[i]) for i in range(len(setups))])
    empty = [setup_text(keys, s) for i, s in enumerate(setups) if baseline_counts[i].sum() == 0]
    small = [f"{setup_text(keys, s)} ({int(baseline_counts[i].sum())})" for i, s in enumerate(setups)
             if 0 < baseline_counts[i].sum() < MIN_BASELINE]
    if empty:
        notes.append(f"no baseline at {'; '.join(empty)}: no other part was measured there; those captures count "
                     "against the healthy prior only")
    if small:
        notes.append(f"baseline too small at {'; '.join(small)}: fewer than {MIN_BASELINE} captures of other parts "
                     "(in brackets); rates and spreads there are widened, not pooled")

    temps = sorted({s[keys.index("temperature_c")] for s in setups} - {None}) if "temperature_c" in keys else []
    ramps = sorted({s[keys.index("ramp_s")] for s in setups} - {None}) if "ramp_s" in keys else []
    res = _resolutions(rows, resolution)
    recs = rows[[c for c in _FLOOR_COLUMNS if c in rows.columns]].to_dict("records")
    ramp_col = keys.index("ramp_s") if "ramp_s" in keys else None
    ramps_of = [s[ramp_col] if ramp_col is not None else None for s in setups]
    metrics = {m.column: _metric(m, rows, recs, others, other_at, lot_index, [ramps_of[i] for i in setup_of], res)
               for m in METRICS if m.column in rows.columns}
    label = f"{lot}/{name}" if lot else name
    return PartEvidence(label, lot, rows, others, keys, setups, setup_of, category, temps, ramps, part_counts,
                        baseline_counts, log_h, metrics, lot_setups, notes)


def _resolutions(rows: pd.DataFrame, resolution: pd.DataFrame | None) -> list[CaptureResolution]:
    measured = {}
    if resolution is not None and len(resolution):
        fields = CaptureResolution.__dataclass_fields__
        mine = resolution[resolution["capture_id"].isin(rows["capture_id"])] if "capture_id" in rows else resolution
        for rec in mine.to_dict("records"):
            measured[rec["capture_id"]] = CaptureResolution(**{k: rec[k] for k in fields})
    out = []
    for rec in rows[[c for c in _FLOOR_COLUMNS if c in rows.columns]].to_dict("records"):
        r = measured.get(rec.get("capture_id"))
        out.append(r if r is not None else CaptureResolution.assumed(
            _float(rec.get("vout_final_v")), _float(rec.get("vsupply_final_v")), _float(rec.get("dt_s")),
            rec.get("n_samples")))
    return out


def _float(v) -> float | None:
    v = plain(v)
    try:
        return None if v is None else float(v)
    except (TypeError, ValueError):
        return None


def _values(rows: pd.DataFrame, column: str) -> np.ndarray:
    return pd.to_numeric(rows[column], errors="coerce").to_numpy(dtype=np.float64)


def _metric(metric, rows, recs, others, other_at, lot_index, ramps, res) -> MetricEvidence:
    """``other_at``: each baseline row's lot set-up; ``lot_index``: each capture's lot set-up (−1: none)."""
    n = len(rows)
    x = _values(rows, metric.column)
    usable = _carries(rows["verdict"], metric) & np.isfinite(x)
    base_ok = others["verdict"].isin(metric.verdicts).to_numpy(bool) if len(others) else np.zeros(0, bool)
    base_x = _values(others, metric.column) if metric.column in others.columns else np.full(len(others), np.nan)
    spreads: dict[int, Spread | None] = {}
    median, tau, dof, contamination = np.zeros(n), np.ones(n), np.ones(n), np.zeros(n)
    eligible = np.zeros(n, bool)
    for i in range(n):
        at = int(lot_index[i])
        if at not in spreads:
            spreads[at] = baseline_spread(base_x[(other_at == at) & base_ok], metric, ramps[i]) if at >= 0 else None
        sp = spreads[at]
        if usable[i] and sp is not None:
            eligible[i] = True
            median[i], dof[i], contamination[i] = sp.median, sp.dof, sp.contamination
            tau[i] = total_scale(sp, res[i].floor(metric.column, recs[i]))
    z = np.where(eligible, (np.nan_to_num(x) - median) / tau, 0.0)
    zero = np.zeros(n)
    if not eligible.any():
        return MetricEvidence(metric.column, eligible, x, median, tau, dof, z, zero, zero, zero.copy())
    log_tau = np.log(tau)
    log_up = np.where(eligible, log_shifted(z, dof, +1) - log_tau, 0.0)
    log_down = np.where(eligible, log_shifted(z, dof, -1) - log_tau, 0.0)
    log_either = np.logaddexp(log_up, log_down) - np.log(2.0)
    with np.errstate(divide="ignore"):  # log(0) of an uncontaminated baseline's mixture weight
        log_h = np.logaddexp(np.log1p(-contamination) + log_t(z, 0.0, 1.0, dof) - log_tau,
                             np.log(contamination) + log_either)
    log_h = np.where(eligible, log_h, 0.0)
    return MetricEvidence(metric.column, eligible, x, median, tau, dof, z, log_h, log_up, log_down)
