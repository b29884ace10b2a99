"""What the supply does after a steady start: dips (brown-outs) with the output's recovery, and a power-down.

Definitions (labtool's, built on the IEEE Std 181-2011 state levels, reference levels and crossings of
:mod:`labtool.measure.startup`; clause numbers from memory). The formulas are in ``docs/measurement.md``.

* **Kind of supply record**: ``steady`` when the supply's starting state level is already valid
  (at least its valid level, see :func:`valid_level`), ``power_down`` when it starts valid and ends below
  half its starting level, else ``ramp`` (the startup measurement of :mod:`labtool.measure.startup`).
* **Valid level** of a supply at level L: ``supply_ref`` of L from 0 V (90 % → 0.9·L; a record that
  starts at its level has no low state of its own, so the low state is 0 V), or the volts given.
* **A dip** is a stretch where the supply falls below ``L − offset`` and comes back above it,
  ``offset = max(10σ, 3 codes, 2 % of L)`` (σ: the supply's noise); a dip that has not come back by the
  end of the record is not reported. Per dip:
  - ``level before`` L_b: the supply's level (median) from the previous dip's return (or the record
    start) to this dip; ``dip_min_v``: the dip's low state level, the median of its samples in the
    lower half of the dip when most of them are on a plateau (a flat-bottomed dip, as a bench supply
    programs it), else the lowest level held for 3 samples (a V-shaped dip);
    ``dip_depth_v`` = L_b − ``dip_min_v``;
  - ``dip_duration_s``: the dip as a negative-going pulse from L_b to its minimum, its duration at the
    mesial (50 %) reference level L_b − depth/2: first falling to last rising mesial crossing
    (IEEE Std 181 pulse duration); ``t_dip_s`` is the falling one;
  - ``t_return_s``: the supply's last rising crossing of its valid level before the next dip (or the
    record end); a dip that stays above the valid level returns at its rising mesial crossing;
  - the output's level before the dip V_b: the median of the second half of the stretch before it;
    ``recovery_s``: from ``t_return_s`` to the output's last entry into V_b ± band % before the supply
    leaves its level for the next dip (its last sample above L − offset/2) or the record ends, counted
    only when the output stays in the band over the last 10 % of that stretch (as a settled ramp);
  - ``vout_min_during_dip_v``: the lowest output level held for 3 samples from ``t_dip_s`` to the
    recovery instant (without recovery: to the next dip or the record end);
  - verdict: ``stuck_at_zero`` when V_b is in the zero state (nothing to recover), ``recovered``,
    ``no_recovery`` when the output's level at the end of the stretch is below V_b − band (near zero
    or low), else ``incomplete`` (above the band or never settled).
* **Power-down**: ``vsupply_dropout_v``, the supply when the output crosses its 50 % reference level
  falling (IEEE Std 181 mesial crossing between its starting and final state levels).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from labtool.measure.crossings import crossings, last_entry, value_at
from labtool.measure.levels import StateLevels
from labtool.measure.limits import Limits
from labtool.measure.startup import (HYSTERESIS_SIGMAS, MIN_SEGMENT, TAIL_FRACTION, ZERO_FLOOR_OF_SUPPLY,
                                     EXPECT_ZERO_FRACTION, ZERO_SIGMAS, SignalLevels, signal_levels,
                                     sustained_min)

DIP_MIN_FRACTION = 0.02  # a supply 2 % below its level is dipping, not rippling (labtool's choice)
POWER_DOWN_FRACTION = 0.5  # a supply that ends below half its starting level was switched off (labtool's choice)
MESIAL = 0.5


@dataclass(frozen=True)
class DipMetrics:
    """One supply dip and the output's answer to it; instants on the record's time axis."""

    index: int
    t_dip_s: float  # supply falls through the dip's mesial level
    dip_depth_v: float
    dip_duration_s: float
    dip_min_v: float
    level_before_v: float
    valid_v: float
    t_return_s: float  # supply back above its valid level
    vout_before_v: float
    vout_after_v: float  # output level at the end of the stretch after the return
    vout_min_during_dip_v: float
    recovery_at_s: float | None
    recovery_s: float | None
    zero_threshold_v: float
    verdict: str

    def evidence(self) -> dict:
        return {"level_before_v": self.level_before_v, "valid_v": self.valid_v, "t_return_s": self.t_return_s,
                "vout_before_v": self.vout_before_v, "vout_after_v": self.vout_after_v,
                "zero_threshold_v": self.zero_threshold_v, "recovery_at_s": self.recovery_at_s}


def valid_level(level_v: float, limits: Limits) -> float:
    """The valid level of a supply at ``level_v`` (its low state taken as 0 V)."""
    kind, value = limits.supply_ref_level()
    return value * level_v if kind == "fraction" else value


def supply_kind(levels: SignalLevels, limits: Limits) -> str:
    """``ramp``, ``steady`` or ``power_down`` from the supply's starting and final state levels."""
    start, end = levels.initial_v, levels.final_v
    if start <= 0 or start < valid_level(max(start, end), limits):
        return "ramp"
    return "power_down" if end < POWER_DOWN_FRACTION * start else "steady"


def _hysteresis(levels: SignalLevels, cap_v: float) -> float:
    return min(max(HYSTERESIS_SIGMAS * levels.noise_v, 2.0 * levels.step_v), cap_v)


def _at(t: np.ndarray, instant: float) -> int:
    return int(np.searchsorted(t, instant))


def _level(v: np.ndarray, fallback: float) -> float:
    """The level of a stretch in one state with maybe a few samples of an edge at its ends: the median
    (robust to those samples and to noise, where a histogram bin would take in an edge's neighbours)."""
    return float(np.median(v)) if v.size else fallback


def dip_windows(t: np.ndarray, supply: np.ndarray, levels: SignalLevels) -> list[tuple[float, float, float]]:
    """(leave, fall, rise) per dip that returns: ``fall``/``rise`` cross the dip-detection level
    ``L − offset``; ``leave`` is the last sample before ``fall`` still above ``L − offset/2``, where the
    supply starts to leave its level (the stretch after the previous dip ends there)."""
    level = levels.initial_v
    offset = max(ZERO_SIGMAS * levels.noise_v, 3.0 * levels.step_v, DIP_MIN_FRACTION * abs(level))
    h = _hysteresis(levels, offset)
    falls = crossings(t, supply, level - offset, h, direction="falling")
    rises = crossings(t, supply, level - offset, h, direction="rising")
    windows: list[tuple[float, float, float]] = []
    for fall in falls:
        later = rises[rises > fall]
        if not later.size or (windows and fall <= windows[-1][2]):
            continue
        start = _at(t, windows[-1][2]) if windows else 0
        above = np.flatnonzero(supply[start:_at(t, fall)] >= level - offset / 2)
        leave = float(t[start + above[-1]]) if above.size else float(fall)
        windows.append((leave, float(fall), float(later[0])))
    return windows


def _crossing(t, v, level, h, direction, a, b, *, last=False) -> float | None:
    found = crossings(t[a:b], v[a:b], level, h, direction=direction)
    return (float(found[-1]) if last else float(found[0])) if found.size else None


def _dip_low(v: np.ndarray, level_before: float, sl: SignalLevels) -> tuple[float, int]:
    """(the dip's low level, index of its lowest held sample): the level (median) of the samples in the
    lower half of the dip when most of them are on a plateau, else the lowest level held for 3 samples."""
    held_min, k = sustained_min(v)
    low = v[v <= (level_before + held_min) / 2]
    if low.size >= MIN_SEGMENT:
        bottom = _level(low, held_min)
        near = np.abs(low - bottom) <= max(HYSTERESIS_SIGMAS * sl.noise_v, 2.0 * sl.step_v)
        if np.count_nonzero(near) >= max(MIN_SEGMENT, low.size // 2):
            return bottom, k
    return held_min, k


def _either(found: float | None, fallback: float) -> float:
    return fallback if found is None else found


def measure_dips(t: np.ndarray, supply: np.ndarray, output: np.ndarray, limits: Limits,
                 supply_levels: SignalLevels | None = None) -> list[DipMetrics]:
    """Every dip of a steady supply record and the output's recovery after each (definitions above)."""
    sl = signal_levels(supply) if supply_levels is None else supply_levels
    out = signal_levels(output)
    windows = dip_windows(t, supply, sl)
    n = t.size
    dips = []
    level_before = sl.initial_v
    for k, (_, fall, rise) in enumerate(windows):
        lo = windows[k - 1][2] if k else float(t[0])
        hi = windows[k + 1][0] if k + 1 < len(windows) else float(t[-1])
        i_lo, i_fall, i_rise, i_hi = _at(t, lo), _at(t, fall), _at(t, rise), min(n, _at(t, hi) + 1)
        level_before = _level(supply[i_lo:i_fall], level_before)
        dip_min, k_min = _dip_low(supply[i_fall:i_rise + 1], level_before, sl)
        depth = level_before - dip_min
        if depth <= 0:
            continue
        mesial = level_before - MESIAL * depth
        h = _hysteresis(sl, 0.1 * depth)
        t_min = float(t[i_fall + k_min])
        t_dip = _either(_crossing(t, supply, mesial, h, "falling", i_lo, _at(t, t_min) + 1), fall)
        t_end = _either(_crossing(t, supply, mesial, h, "rising", _at(t, t_min), i_hi, last=True), rise)
        valid = valid_level(level_before, limits)
        t_return = t_end
        if dip_min < valid:
            t_return = _either(_crossing(t, supply, valid, h, "rising", _at(t, t_min), i_hi, last=True), t_end)
        dips.append(_recovery(t, output, out, limits, index=len(dips), t_dip=t_dip, duration=t_end - t_dip,
                              dip_min=dip_min, level_before=level_before, valid=valid, t_return=t_return,
                              i_lo=i_lo, i_hi=i_hi))
    return dips


def _zero_threshold(out: SignalLevels, supply_level_v: float, limits: Limits) -> float:
    """The output's zero state, counted from 0 V: a steady record's output starts at its running level."""
    if limits.expect_v is not None:
        return EXPECT_ZERO_FRACTION * limits.expect_v
    return max(ZERO_SIGMAS * out.noise_v, 3.0 * out.step_v, ZERO_FLOOR_OF_SUPPLY * abs(supply_level_v))


def _recovery(t, output, out: SignalLevels, limits: Limits, *, index, t_dip, duration, dip_min, level_before,
              valid, t_return, i_lo, i_hi) -> DipMetrics:
    i_dip, i_ret = _at(t, t_dip), _at(t, t_return)
    before = output[i_lo:i_dip]
    before = before[before.size // 2:] if before.size >= 2 * MIN_SEGMENT else before
    vout_before = _level(before, float(output[max(0, i_dip - 1)]))
    zero_v = _zero_threshold(out, level_before, limits)
    band = abs(vout_before) * limits.band_pct / 100.0
    ts, vs = t[i_ret:i_hi], output[i_ret:i_hi]
    tail = vs[vs.size - max(MIN_SEGMENT, int(vs.size * TAIL_FRACTION)):] if vs.size else output[-1:]
    vout_after = _level(tail, float(tail[-1]))
    recovery_at = None
    if vs.size >= MIN_SEGMENT and vout_before >= zero_v:
        entry = last_entry(ts, vs, vout_before, band)
        tail_start = float(ts[vs.size - max(MIN_SEGMENT, int(vs.size * TAIL_FRACTION))])
        recovery_at = entry if entry is not None and entry <= tail_start else None
    i_end = _at(t, recovery_at) + 1 if recovery_at is not None else i_hi
    vout_min, _ = sustained_min(output[i_dip:max(i_end, i_dip + 1)])
    if vout_before < zero_v:
        verdict = "stuck_at_zero"
    elif recovery_at is not None:
        verdict = "recovered"
    elif vout_after < vout_before - band:
        verdict = "no_recovery"
    else:
        verdict = "incomplete"
    return DipMetrics(index=index, t_dip_s=t_dip, dip_depth_v=level_before - dip_min, dip_duration_s=duration,
                      dip_min_v=dip_min, level_before_v=level_before, valid_v=valid, t_return_s=t_return,
                      vout_before_v=vout_before, vout_after_v=vout_after, vout_min_during_dip_v=vout_min,
                      recovery_at_s=recovery_at, recovery_s=recovery_at - t_return if recovery_at is not None else None,
                      zero_threshold_v=zero_v, verdict=verdict)


def dropout_supply_v(t: np.ndarray, supply: np.ndarray, output: np.ndarray) -> tuple[float | None, float | None]:
    """(instant, supply voltage) at which the output crosses its 50 % reference level falling, or
    (None, None) when the output does not fall from one state level to a lower one."""
    out = signal_levels(output)
    sl = StateLevels(out.final_v, out.initial_v)
    if sl.amplitude_v <= max(ZERO_SIGMAS * out.noise_v, 3.0 * out.step_v):
        return None, None
    found = crossings(t, output, sl.reference(MESIAL), out.hysteresis(sl.amplitude_v), direction="falling")
    if not found.size:
        return None, None
    return float(found[0]), value_at(t, supply, float(found[0]))
