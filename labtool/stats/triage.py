"""Triage of a returned part: its captures against its lot's baseline, as ranked hypotheses.

Each hypothesis has a score in [0, 1] (how strongly this part's captures show the pattern), the
numbers behind it, and the next bench experiment that would confirm or rule it out. Scores are simple
and stated per hypothesis: fractions of captures, contrasts of stuck fractions between set-ups, a
logistic of the part's median modified z-score against the lot at the same set-up,
1/(1 + exp(−(|z| − 3.5))), so the usual outlier limit |z| = 3.5 (Iglewicz & Hoaglin 1993) scores 0.5,
and for verdict-backed patterns (re-collapse, slow start, ringing, wrong level) at least
0.5 + 0.5 × the fraction of captures with that verdict once one capture has it. Field notes on what each
pattern means: docs and GUIDE §4 (common practice, no source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable, Mapping

import numpy as np
import pandas as pd

from labtool.errors import UsageError
from labtool.stats.outliers import MODIFIED_Z_LIMIT, robust_location_scale
from labtool.stats.table import CAME_UP, FAILED_TO_HOLD, STUCK, cell_keys, plain, require_columns


@dataclass(frozen=True)
class Hypothesis:
    name: str
    title: str
    score: float
    evidence: Mapping[str, object] = field(hash=False)
    next_experiment: str

    def to_json_dict(self) -> dict:
        return {"name": self.name, "title": self.title, "score": self.score,
                "evidence": {k: plain(v) if not isinstance(v, (list, dict)) else v for k, v in self.evidence.items()},
                "next_experiment": self.next_experiment}


@dataclass(frozen=True)
class TriageReport:
    part: str
    lot: str | None
    n_captures: int
    n_baseline: int
    verdicts: Mapping[str, int] = field(hash=False)
    hypotheses: tuple[Hypothesis, ...]

    def to_json_dict(self) -> dict:
        return {"part": self.part, "lot": self.lot, "n_captures": self.n_captures, "n_baseline": self.n_baseline,
                "verdicts": dict(self.verdicts), "hypotheses": [h.to_json_dict() for h in self.hypotheses]}

    def table(self) -> pd.DataFrame:
        return pd.DataFrame([{"rank": i + 1, "name": h.name, "score": h.score, "title": h.title,
                              "next_experiment": h.next_experiment} for i, h in enumerate(self.hypotheses)])


# Smallest spread a lot is credited with, relative to its median: one 8-bit quantisation step on a
# range about the signal's size is 1/256 ≈ 0.4 % (bench scopes are typically 8-bit: common practice,
# no source). Without it a lot recorded at one code would make any part an outlier.
_RESOLUTION = {"vout_final_v": 0.004, "delay_s": 0.01, "overshoot_pct": 0.0}


def _logistic_z(z: float | None) -> float:
    return 0.0 if z is None or not math.isfinite(z) else 1.0 / (1.0 + math.exp(-(abs(z) - MODIFIED_Z_LIMIT)))


@dataclass
class _Evidence:
    """The part's rows (no_supply ones aside), the lot baseline and per-set-up stuck fractions."""

    rows: pd.DataFrame
    powered: pd.DataFrame
    baseline: pd.DataFrame
    cells: list[str]

    def frac(self, verdicts, rows: pd.DataFrame | None = None) -> float:
        rows = self.powered if rows is None else rows
        return float(rows["verdict"].isin(verdicts).mean()) if len(rows) else 0.0

    def stuck_by(self, key: str) -> pd.Series:
        """Fraction of powered captures stuck at zero, per value of ``key`` (ascending)."""
        if key not in self.powered.columns or self.powered[key].notna().sum() == 0:
            return pd.Series(dtype=float)
        return self.powered.groupby(key)["verdict"].apply(lambda v: float((v == STUCK).mean()))

    def z_against_lot(self, column: str) -> float | None:
        """Median over the part's captures of the modified z-score against the lot at the same set-up."""
        if column not in self.powered.columns or column not in self.baseline.columns or self.baseline.empty:
            return None
        zs = []
        base_all = pd.to_numeric(self.baseline[column], errors="coerce").dropna()
        for _, rec in self.powered.iterrows():
            x = pd.to_numeric(pd.Series([rec[column]]), errors="coerce").iloc[0]
            if not np.isfinite(x):
                continue
            same = np.ones(len(self.baseline), bool)
            for k in self.cells:
                same &= (self.baseline[k] == rec[k]).to_numpy()
            base = pd.to_numeric(self.baseline.loc[same, column], errors="coerce").dropna()
            base = base if len(base) >= 5 else base_all
            if len(base) < 5:
                continue
            med, scale = robust_location_scale(base.to_numpy(np.float64))
            scale = max(scale, _RESOLUTION.get(column, 0.0) * abs(med), 1e-30)
            zs.append((x - med) / scale)
        return float(np.median(zs)) if zs else None

    def lot_median(self, column: str, rows: pd.DataFrame | None = None) -> float | None:
        return _median(self.baseline if rows is None else rows, column)

    def part_median(self, column: str, rows: pd.DataFrame | None = None) -> float | None:
        return _median(self.powered if rows is None else rows, column)


def _median(rows: pd.DataFrame, column: str) -> float | None:
    if column not in rows.columns:
        return None
    v = pd.to_numeric(rows[column], errors="coerce").dropna()
    return float(v.median()) if len(v) else None


def _supply(e: _Evidence) -> Hypothesis:
    n_ns = int((e.rows["verdict"] == "no_supply").sum())
    return Hypothesis(
        "fixture_supply_invalid", "supply or fixture never valid", n_ns / len(e.rows),
        {"n_no_supply": n_ns, "n_captures": len(e.rows), "vsupply_final_v": e.part_median("vsupply_final_v"),
         "lot_vsupply_final_v": e.lot_median("vsupply_final_v")},
        "Measure the supply at the device pin with the scope while ramping; check the current limit, the "
        "socket contacts and the sense lines, re-seat the part and repeat one capture before judging the chip.")


def _dead(e: _Evidence) -> Hypothesis:
    per_cell = e.powered.groupby(e.cells, dropna=False)["verdict"].apply(lambda v: float((v == STUCK).mean())) \
        if e.cells and len(e.powered) else pd.Series([e.frac({STUCK})] if len(e.powered) else [], dtype=float)
    score = float(per_cell.min()) if len(per_cell) else 0.0
    stuck_current = e.part_median("isupply_final_a", e.powered[e.powered["verdict"] == STUCK])
    lot_current = e.lot_median("isupply_final_a", e.baseline[e.baseline["verdict"] == "started"])
    return Hypothesis(
        "dead_everywhere", "stuck at every ramp and temperature (startup path open, amplifier dead)", score,
        {"n_stuck": int((e.powered["verdict"] == STUCK).sum()), "n_powered": len(e.powered),
         "n_setups": int(len(per_cell)), "n_setups_all_stuck": int((per_cell == 1.0).sum()),
         "stuck_isupply_a": stuck_current, "lot_isupply_a": lot_current,
         # Below 1 % of the lot's running current the core and its startup draw nothing (leakage level).
         "isupply_at_leakage": None if stuck_current is None or not lot_current
         else bool(stuck_current < 0.01 * lot_current)},
        "With the output stuck, measure the supply current: at leakage level (nA) the core and startup draw "
        "nothing (startup path open or amplifier without bias). Then inject a small current into the "
        "reference node (external kick): starting and staying up means a startup fault, not a dead core.")


def _slow_ramps(e: _Evidence) -> Hypothesis:
    f = e.stuck_by("ramp_s")
    score = float(max(0.0, f.iloc[-1] - f.iloc[0])) if len(f) >= 2 else 0.0
    return Hypothesis(
        "slow_ramp_miss", "stuck only on slow supply ramps (ramp-rate-dependent startup below its threshold)", score,
        {"stuck_fraction_by_ramp_s": {f"{k:g}": v for k, v in f.items()}},
        "Sweep the ramp time between the fastest failing and the slowest passing ramp to find the threshold; "
        "then start it on a slow ramp with an enable edge after the supply settles: a kick or one-shot "
        "startup that needs dV/dt shows exactly this threshold.")


def _temperature(e: _Evidence, cold: bool) -> Hypothesis:
    f = e.stuck_by("temperature_c")
    if len(f) >= 2:
        end, rest = (f.iloc[0], f.iloc[1:]) if cold else (f.iloc[-1], f.iloc[:-1])
        score = float(max(0.0, end - rest.max()))
    else:
        score = 0.0
    evidence = {"stuck_fraction_by_temperature_c": {f"{k:g}": v for k, v in f.items()}}
    if cold:
        return Hypothesis(
            "cold_only_stuck", "stuck only cold (amplifier common-mode or threshold limit)", score, evidence,
            "Step the temperature down from the coldest passing point in 5–10 °C steps at the failing ramp; a "
            "sharp edge points to the amplifier's input common-mode limit or a device threshold at zero current. "
            "Check whether a higher supply moves the edge.")
    return Hypothesis(
        "hot_only_stuck", "stuck only hot (leakage overcoming the startup current)", score, evidence,
        "Step the temperature up from the hottest passing point; leakage roughly doubles every ~10 K, so a "
        "leakage-driven failure appears gradually. Measure the supply current at zero output hot and compare "
        "with a good part from the lot.")


def _any_verdict(e: _Evidence, verdict: str) -> float:
    """0 without a capture of this verdict; else 0.5 + 0.5 × its fraction (one capture is already a finding)."""
    frac = e.frac({verdict})
    return 0.0 if frac == 0 else 0.5 + 0.5 * frac


def _falls_back(e: _Evidence) -> Hypothesis:
    n_rc = int((e.powered["verdict"] == "recollapse").sum())
    return Hypothesis(
        "falls_back", "starts then falls back (startup disengages early, or brown-out with a one-shot startup)",
        _any_verdict(e, "recollapse"), {"n_recollapse": n_rc, "n_powered": len(e.powered)},
        "Capture a longer record with the startup and supply currents; then dip the supply (brown-out) and "
        "recover it: a one-shot startup never re-fires. Compare the disengage threshold with the level at "
        "which the core holds itself.")


def _intermittent(e: _Evidence) -> Hypothesis:
    best, where = 0.0, None
    rows = e.powered[e.powered["verdict"].isin(CAME_UP | FAILED_TO_HOLD)]
    if len(rows):
        grouped = rows.groupby(e.cells, dropna=False) if e.cells else [((), rows)]
        for cell, g in grouped:
            if len(g) >= 2:
                p = float(g["verdict"].isin(FAILED_TO_HOLD).mean())
                if 2 * min(p, 1 - p) > best:
                    best, where = 2 * min(p, 1 - p), dict(zip(e.cells, cell if isinstance(cell, tuple) else (cell,)))
    return Hypothesis(
        "bistable_intermittent", "intermittent across power cycles (bistable, near the escape threshold)", best,
        {"worst_setup": {k: plain(v) for k, v in (where or {}).items()}},
        "Repeat 100 power cycles at the worst set-up with full discharge between them and count the failures; "
        "a fraction between 0 and 1 confirms a bistable start near the escape threshold. An external kick "
        "should then start it every time.")


def _outlier(e: _Evidence, column: str, name: str, title: str, verdict: str, experiment: str,
             two_sided: bool = False) -> Hypothesis:
    """A part whose ``column`` sits far above its lot (or far either way when ``two_sided``)."""
    z = e.z_against_lot(column)
    zs = None if z is None else abs(z) if two_sided else z
    score = max(_logistic_z(zs) if zs is not None and zs > 0 else 0.0, _any_verdict(e, verdict))
    return Hypothesis(name, title, float(score),
                      {f"part_{column}": e.part_median(column), f"lot_{column}": e.lot_median(column),
                       "modified_z_vs_lot": z, f"n_{verdict}": int((e.powered["verdict"] == verdict).sum())},
                      experiment)


HYPOTHESES: tuple[Callable[[_Evidence], Hypothesis], ...] = (
    _supply, _dead, _slow_ramps, lambda e: _temperature(e, True), lambda e: _temperature(e, False), _falls_back,
    _intermittent,
    lambda e: _outlier(e, "delay_s", "weak_startup_slow", "slow start far outside the lot (weak startup current)",
                       "slow_start", "Measure the startup current on this part (or the delay vs supply ramp): "
                       "delay ≈ C·ΔV/I_start, so a delay several times the lot's means a startup current "
                       "several times weaker. Compare with a good part at the same set-up."),
    lambda e: _outlier(e, "overshoot_pct", "excess_ringing", "ringing beyond the lot (excess startup current or "
                       "low phase margin)", "ringing", "Capture the output with a low-capacitance probe at two "
                       "load capacitances and two ramp rates: overshoot growing with faster ramps points to "
                       "excess startup current; ringing that changes with load points to low phase margin."),
    lambda e: _outlier(e, "vout_final_v", "level_fault", "wrong output level (core or trim fault)", "wrong_level",
                       "Measure the settled output with a DMM at three temperatures and read back the trim "
                       "code: a constant shift is a trim fault; a wrong temperature slope is a core fault "
                       "(resistor ratio or diode area).", two_sided=True),
)


def split_part(part: str, lot: str | None = None) -> tuple[str | None, str]:
    if "/" in part and lot is None:
        lot, part = part.split("/", 1)
    if not part:
        raise UsageError("--part: expected LOT/PART, e.g. ZR24A/p07")
    return lot, part


def triage(measurements: pd.DataFrame, part: str, lot: str | None = None, design=None) -> TriageReport:
    """Ranked hypotheses for one part (``LOT/PART`` or ``PART`` with ``lot``). ``design`` (a model
    Design) adds the model's startup margin at the part's set-ups to the evidence."""
    require_columns(measurements, ["verdict", "part"], "triage")
    lot, part = split_part(part, lot)
    mine = measurements["part"].astype("string") == part
    if lot is not None:
        require_columns(measurements, ["lot"], "triage")
        mine &= measurements["lot"].astype("string") == lot
    elif "lot" in measurements.columns:
        lots = sorted(measurements.loc[mine, "lot"].dropna().astype(str).unique())
        if len(lots) > 1:
            raise UsageError(f"--part {part}: in lots {', '.join(lots)}; give LOT/PART")
        lot = lots[0] if lots else None
    rows = measurements[mine.fillna(False).to_numpy(bool)]
    if rows.empty:
        raise UsageError(f"--part {lot + '/' if lot else ''}{part}: no measured captures of that part")
    same_lot = measurements["lot"].astype("string") == lot if lot is not None and "lot" in measurements else True
    others = measurements[(~mine & same_lot).fillna(False).to_numpy(bool)]
    if others.empty:
        others = measurements[(~mine).fillna(False).to_numpy(bool)]
    powered = rows[rows["verdict"] != "no_supply"]
    e = _Evidence(rows=rows, powered=powered, baseline=others[others["verdict"].isin(CAME_UP)], cells=cell_keys(rows))
    hyps = [h(e) for h in HYPOTHESES] if len(powered) else [_supply(e)]
    if design is not None:
        margin = _escape_margin(design, powered)
        hyps = [_with_model(h, design, margin) for h in hyps]
    hyps.sort(key=lambda h: -h.score)
    return TriageReport(part=f"{lot}/{part}" if lot else part, lot=lot, n_captures=len(rows), n_baseline=len(others),
                        verdicts={k: int(v) for k, v in rows["verdict"].value_counts().items()},
                        hypotheses=tuple(hyps))


_MODEL_RELEVANT = {"dead_everywhere", "slow_ramp_miss", "cold_only_stuck", "hot_only_stuck", "bistable_intermittent",
                   "weak_startup_slow"}


def _escape_margin(design, powered: pd.DataFrame) -> dict | None:
    """The model's minimum escape current at each temperature the part was measured at (one DC analysis each)."""
    if "temperature_c" not in powered.columns:
        return None
    from labtool.model import dc_analysis

    temps = sorted(set(pd.to_numeric(powered["temperature_c"], errors="coerce").dropna()))
    return {f"{t:g}": plain(getattr(dc_analysis(design, t), "i_start_min_a", None)) for t in temps}


def _with_model(h: Hypothesis, design, margin: dict | None) -> Hypothesis:
    """Add the model's minimum escape current next to the design's startup current."""
    if h.name not in _MODEL_RELEVANT or margin is None:
        return h
    return Hypothesis(h.name, h.title, h.score,
                      {**h.evidence, "model_i_start_a": plain(design.i_start_a), "model_i_start_min_a_by_temperature_c": margin},
                      h.next_experiment)
