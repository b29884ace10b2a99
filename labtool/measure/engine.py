"""One record in, its :class:`StartupResult` rows out: metrics, step-model fit, verdict.

A record is measured by the kind of its supply (:func:`labtool.measure.supply_events.supply_kind`): a
ramp (the startup from the supply's reference crossing), a steady supply with an enable edge (the
startup from the enable's 50 % crossing), a steady supply with dips (one row per dip: depth, duration,
the output's recovery) or a power-down (the supply at which the output drops out). Definitions:
``docs/measurement.md``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from labtool.capture import SUPPLY_VALID_KEY, Capture
from labtool.errors import MeasurementError
from labtool.measure.fit import StepFit, fit_step, json_value
from labtool.measure.levels import segment_level
from labtool.measure.limits import Limits
from labtool.measure.startup import (TAIL_FRACTION, StartupMetrics, edge_instant, measure_startup, signal_levels,
                                     supply_metrics)
from labtool.measure.supply_events import DipMetrics, dip_windows, dropout_supply_v, measure_dips, supply_kind
from labtool.measure.verdict import POWER_DOWN, decide

MIN_SAMPLES = 32

# The result fields written to JSON and the store, in this order (issue #3 CLI contract).
RESULT_FIELDS = ("verdict", "t_supply_s", "delay_s", "delay_ref", "rise_s", "settle_s", "overshoot_pct", "ring_hz",
                 "damping", "vout_final_v", "vsupply_final_v", "ramp_v_per_s", "supply_at_start_v",
                 "vsupply_at_valid_v", "isupply_final_a",
                 # issue 19: what kind of record the row is from, enable edges, dips and power-downs
                 "capture_kind", "t_enable_s", "dip_index", "t_dip_s", "dip_depth_v", "dip_duration_s", "dip_min_v",
                 "vout_min_during_dip_v", "recovery_s", "vsupply_dropout_v")
# capture_kind: the supply rose through its valid level ("ramp"), the supply was steady and an enable rose
# ("enable"), the supply dipped and came back ("dip", one row per dip), the supply fell ("power_down").
CAPTURE_KINDS = ("ramp", "enable", "dip", "power_down")


@dataclass(frozen=True)
class StartupResult:
    """Startup measurement of one capture. Instants are on the capture's time axis; None: does not apply."""

    verdict: str
    t_supply_s: float | None
    delay_s: float | None
    rise_s: float | None
    settle_s: float | None
    overshoot_pct: float | None
    ring_hz: float | None
    damping: float | None
    vout_final_v: float | None
    vsupply_final_v: float | None
    ramp_v_per_s: float | None
    supply_at_start_v: float | None
    vsupply_at_valid_v: float | None = None  # supply when the output crossed its 90 % level
    isupply_final_a: float | None = None  # settled supply current, when the capture records it
    # What delay_s and settle_s count from: the supply crossing its reference level ("supply"); without a
    # supply channel, a given supply-valid instant ("given"), the enable edge ("enable") or t = 0 ("trigger").
    delay_ref: str = "supply"
    capture_kind: str = "ramp"
    t_enable_s: float | None = None  # the enable's 50 % crossing, when delay_ref is "enable"
    dip_index: int | None = None  # 0, 1, … : which dip of the capture this row is about
    t_dip_s: float | None = None  # supply falls through the dip's 50 % level
    dip_depth_v: float | None = None
    dip_duration_s: float | None = None
    dip_min_v: float | None = None
    vout_min_during_dip_v: float | None = None
    recovery_s: float | None = None  # supply back above its valid level → output back in the band
    vsupply_dropout_v: float | None = None  # power-down: supply when the output falls through its 50 % level
    evidence: dict = field(default_factory=dict, compare=False)
    fit: StepFit | None = field(default=None, compare=False)

    def to_json_dict(self) -> dict:
        """The result fields by name (None → null in JSON), then ``evidence`` and ``fit``."""
        out = {name: json_value(getattr(self, name)) for name in RESULT_FIELDS}
        out["evidence"] = {k: json_value(v) for k, v in self.evidence.items()}
        out["fit"] = self.fit.to_json_dict() if self.fit is not None else None
        return out

    def to_dict(self) -> dict:
        """As :meth:`to_json_dict`: a ``measure --json`` row without ``capture_id`` and ``file``."""
        return self.to_json_dict()




def _checked(t_s, supply_v, output_v, enable_v=None
             ) -> tuple[np.ndarray, np.ndarray | None, np.ndarray, np.ndarray | None]:
    t = np.asarray(t_s, dtype=np.float64)
    s = np.asarray(supply_v, dtype=np.float64) if supply_v is not None else None
    o = np.asarray(output_v, dtype=np.float64)
    e = np.asarray(enable_v, dtype=np.float64) if enable_v is not None else None
    s_size = s.size if s is not None else t.size
    e_size = e.size if e is not None else t.size
    if (not (t.ndim == o.ndim == 1 and (s is None or s.ndim == 1) and (e is None or e.ndim == 1))
            or not (t.size == s_size == o.size == e_size)):
        raise MeasurementError(f"time, supply, output (and enable) must be 1-D of one length (got {t.size}, "
                               f"{s_size}, {o.size}" + (f", {e_size})" if e is not None else ")"))
    finite = np.isfinite(o) & np.isfinite(t) & (np.isfinite(s) if s is not None else True)
    if not finite.all():  # clipped or not-a-number samples carry no level information
        t, o = t[finite], o[finite]
        s = s[finite] if s is not None else None
        e = e[finite] if e is not None else None
    if t.size < MIN_SAMPLES:
        raise MeasurementError(f"only {t.size} usable samples; a startup measurement needs at least {MIN_SAMPLES}")
    if not (np.diff(t) > 0).all():
        raise MeasurementError("sample times do not increase")
    return t, s, o, e


def measure_arrays(t_s, supply_v, output_v, limits: Limits = Limits(), supply_current_a=None, *,
                   t_ref_s: float = 0.0, delay_ref: str = "trigger", enable_v=None) -> StartupResult:
    """The first row of :func:`measure_rows` (the only one, except for a record with several dips)."""
    return measure_rows(t_s, supply_v, output_v, limits, supply_current_a, t_ref_s=t_ref_s, delay_ref=delay_ref,
                        enable_v=enable_v)[0]


def measure_rows(t_s, supply_v, output_v, limits: Limits = Limits(), supply_current_a=None, *,
                 t_ref_s: float = 0.0, delay_ref: str = "trigger", enable_v=None) -> tuple[StartupResult, ...]:
    """Measure one record from numpy arrays (s, V, V; optionally the supply current in A, the enable in V). Pure.

    One row, except for a supply with dips: one row per dip, in time order. ``supply_v`` None (an
    output-only record): delay and settling count from ``t_ref_s``, named by ``delay_ref`` ("given",
    "enable" or "trigger"); with a supply they count from its reference crossing, or from the enable's
    50 % crossing when the supply is steady from the start and ``enable_v`` has an edge.
    """
    t, s, o, e = _checked(t_s, supply_v, output_v, enable_v)
    current = dict(supply_current_a=supply_current_a)
    if s is None:
        m = measure_startup(t, s, o, limits, t_ref_s=t_ref_s)
        return (_result(t, o, m, limits, fit=True, delay_ref=delay_ref, **current),)
    levels = signal_levels(s)
    kind = supply_kind(levels, limits)
    if kind == "power_down":
        return (_power_down(t, s, o, levels, **current),)
    if kind == "steady":
        dips = measure_dips(t, s, o, limits, levels)
        if dips:
            return tuple(_dip_result(d, levels.final_v, **current) for d in dips)
        t_enable = edge_instant(t, e) if e is not None else None
        if t_enable is not None:
            m = measure_startup(t, s, o, limits, t_ref_s=t_enable)
            return (_result(t, o, m, limits, fit=True, delay_ref="enable", **current),)
    return (_result(t, o, measure_startup(t, s, o, limits), limits, fit=True, **current),)


def _dip_result(d: DipMetrics, vsupply_final_v: float, supply_current_a=None) -> StartupResult:
    """A dip row: the recovery counts from the supply's return above its valid level (``t_supply_s``)."""
    return StartupResult(
        verdict=d.verdict, t_supply_s=d.t_return_s, delay_s=None, rise_s=None, settle_s=None, overshoot_pct=None,
        ring_hz=None, damping=None, vout_final_v=d.vout_after_v, vsupply_final_v=vsupply_final_v, ramp_v_per_s=None,
        supply_at_start_v=None, isupply_final_a=_final_level(supply_current_a), delay_ref="supply",
        capture_kind="dip", dip_index=d.index, t_dip_s=d.t_dip_s, dip_depth_v=d.dip_depth_v,
        dip_duration_s=d.dip_duration_s, dip_min_v=d.dip_min_v, vout_min_during_dip_v=d.vout_min_during_dip_v,
        recovery_s=d.recovery_s, evidence=d.evidence())


def _power_down(t, s, o, levels, supply_current_a=None) -> StartupResult:
    t_drop, v_drop = dropout_supply_v(t, s, o)
    return StartupResult(
        verdict=POWER_DOWN, t_supply_s=None, delay_s=None, rise_s=None, settle_s=None, overshoot_pct=None,
        ring_hz=None, damping=None, vout_final_v=signal_levels(o).final_v, vsupply_final_v=levels.final_v,
        ramp_v_per_s=None, supply_at_start_v=None, isupply_final_a=_final_level(supply_current_a),
        delay_ref="supply", capture_kind="power_down", vsupply_dropout_v=v_drop,
        evidence={"t_dropout_s": t_drop, "vsupply_initial_v": levels.initial_v})


def measure_outputs(t_s, supply_v, outputs, limits: Limits = Limits(), *, fit: bool = True) -> list[StartupResult]:
    """Measure many output records against one shared supply record (the samples of a Monte Carlo
    condition): the supply's levels and reference instant are derived once. Each result equals
    ``measure_arrays(t_s, supply_v, output)``; ``fit=False`` skips the step-model fit (ring_hz and
    damping are then None). An output with non-finite samples is measured on its own. A supply that
    dips or powers down: each output's first row of :func:`measure_rows` (its first dip)."""
    t, s, _, _ = _checked(t_s, supply_v, supply_v)
    shared = t.size == np.size(t_s)  # no supply or time sample was dropped
    part = supply_metrics(t, s, limits)
    kind = supply_kind(part.levels, limits)
    if kind == "power_down" or (kind == "steady" and dip_windows(t, s, part.levels)):
        return [measure_arrays(t_s, supply_v, output, limits) for output in outputs]
    results = []
    for output in outputs:
        o = np.asarray(output, dtype=np.float64)
        if not (shared and o.shape == t.shape and np.isfinite(o).all()):
            t_o, s_o, o, _ = _checked(t_s, supply_v, o)
            results.append(_result(t_o, o, measure_startup(t_o, s_o, o, limits), limits, fit=fit))
        else:
            results.append(_result(t, o, measure_startup(t, s, o, limits, supply_part=part), limits, fit=fit))
    return results


def _result(t, o, m: StartupMetrics, limits: Limits, *, fit: bool, supply_current_a=None,
            delay_ref: str = "supply") -> StartupResult:
    step = _fit(t, o, m) if fit else None
    verdict, evidence = decide(m, limits)
    return StartupResult(
        verdict=verdict, t_supply_s=m.t_supply_s, delay_s=m.delay_s, rise_s=m.rise_s, settle_s=m.settle_s,
        overshoot_pct=m.overshoot_pct, ring_hz=step.ring_hz if step else None,
        damping=step.damping if step else None, vout_final_v=m.output.final_v,
        vsupply_final_v=m.supply.final_v if m.supply is not None else None,
        ramp_v_per_s=m.ramp_v_per_s, supply_at_start_v=m.supply_at_start_v,
        vsupply_at_valid_v=m.vsupply_at_valid_v,
        isupply_final_a=_final_level(supply_current_a), delay_ref=delay_ref,
        capture_kind="enable" if delay_ref == "enable" else "ramp",
        t_enable_s=m.t_supply_s if delay_ref == "enable" else None, evidence=evidence, fit=step)


def _final_level(values) -> float | None:
    """State level of the settled end of a record (as for vout_final_v), None without a record.

    A stuck part's supply current at leakage level (nA) against the lot's µA tells a dead core from
    a core that draws current but never reaches its level (common practice, no source).
    """
    if values is None:
        return None
    v = np.asarray(values, dtype=np.float64)
    v = v[np.isfinite(v)]
    if v.size < MIN_SAMPLES:
        return None
    return segment_level(v[v.size - max(MIN_SAMPLES, int(v.size * TAIL_FRACTION)):])


def _fit(t: np.ndarray, o: np.ndarray, m: StartupMetrics) -> StepFit | None:
    if m.window is None or m.rise_s is None or m.t10_at_s is None:
        return None
    return fit_step(t, o, m.window, t10_s=m.t10_at_s, rise_s=m.rise_s, base_v=m.output.initial_v,
                    final_v=m.output.final_v, overshoot_pct=m.overshoot_pct)


def measure_capture(capture: Capture, limits: Limits = Limits()) -> StartupResult:
    """The first row of :func:`measure_capture_rows` (the only one, except for a capture with several dips)."""
    return measure_capture_rows(capture, limits)[0]


def measure_capture_rows(capture: Capture, limits: Limits = Limits()) -> tuple[StartupResult, ...]:
    """Measure a capture's supply, output and enable channels (errors name the capture's source)."""
    output = capture.channel("output").values
    current = capture.channel("supply_current").values if capture.has_role("supply_current") else None
    supply = capture.channel("supply").values if capture.has_role("supply") else None
    enable = capture.channel("enable").values if capture.has_role("enable") and supply is not None else None
    try:
        t_ref, ref = (0.0, "supply") if supply is not None else delay_start_instant(capture)
        return measure_rows(capture.times(), supply, output, limits, current, t_ref_s=t_ref, delay_ref=ref,
                            enable_v=enable)
    except MeasurementError as exc:
        where = capture.provenance.source_path + (f" [{capture.provenance.locator}]" if capture.provenance.locator else "")
        raise MeasurementError(f"{where}: {exc}") from None


def delay_start_instant(capture: Capture) -> tuple[float, str]:
    """(instant, name) the delay of a capture without a supply channel counts from: the supply-valid
    instant the user gave at import, else the enable's 50 % crossing (IEEE Std 181 mid reference
    level), else the trigger instant t = 0 (scopes that trigger on the supply and keep only the output)."""
    given = capture.provenance.metadata.get(SUPPLY_VALID_KEY)
    if given is not None:
        return float(given), "given"
    if capture.has_role("enable"):
        edge = edge_instant(capture.times(), capture.channel("enable").values)
        if edge is not None:
            return edge, "enable"
    return 0.0, "trigger"
