"""DC analysis of the self-biased core: both equilibria, feedback polarity, offset and startup limits.

The core (Razavi, Design of Analog CMOS ICs, 2nd ed., ch. 12; Gray/Hurst/Lewis/Meyer §4.4): equal
mirror currents I feed diode Q1 (node 1) and R1 in series with diode Q2 of N times the area (nodes 2
and 3). The amplifier drives the mirror gate so that V1 = V2. With the full diode law and leakage,

    vd(I) = V1(I) − V2(I) + Vos + (VG(I) − VDD/2)/A0,   V2 = I·R1 + V3(I)

is the amplifier's input at core current I (the last term is the input that holds the output at VG
with finite DC gain A0). Both I = 0 and the wanted I_op satisfy vd = 0. dvd/dI > 0 is net positive
feedback (near zero current, where VT/I is large), < 0 net negative (at the operating point); the sign
changes at i_switch where VT/(IS + I) − VT/(N·IS + I) = R1 (without leakage).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from labtool.errors import ModelError
from labtool.model import physics

_I_GRID = np.logspace(-16, -2, 561)  # core currents scanned, A (fA to 10 mA)


@dataclass(frozen=True)
class FeedbackSegment:
    from_a: float
    to_a: float
    polarity: str  # "positive" or "negative"


@dataclass(frozen=True)
class DcResult:
    """The DC picture of one design at one temperature (behavioural model, not sign-off)."""

    temperature_c: float
    ut_v: float
    i_op_a: float | None  # wanted operating point; None when it does not exist
    dvbe_v: float | None  # V(Q1) − V(Q2) at i_op_a
    vref_v: float | None  # reference output at i_op_a
    vg_op_v: float | None  # mirror gate at i_op_a
    i_ptat_ideal_a: float  # VT·ln N / R1, the high-current limit
    i_switch_a: float | None  # where the net feedback changes sign
    offset_limit_v: float  # an input offset at or below this removes the wanted point (signed)
    i_zero_a: float  # core current of the zero state (mirror off-state current)
    i_start_min_a: float | None  # minimum startup current that escapes the zero state; None: cannot
    startup_kind: str
    feedback: tuple[FeedbackSegment, ...] = field(default=())

    def to_json_dict(self) -> dict[str, Any]:
        d = {k: getattr(self, k) for k in self.__dataclass_fields__ if k != "feedback"}
        d["feedback"] = [vars(s) for s in self.feedback]
        return d


def core_voltages(p: Mapping[str, Any], i_core, i_inject=0.0):
    """V1, V2, V3 with core current ``i_core`` in both branches and ``i_inject`` added into node 1."""
    is1 = p["is_a"] * (1.0 + p["is_dev_q1"])
    v1 = physics.node_voltage(np.asarray(i_core) + i_inject, is1, p["leak_q1_a"], p["ut_v"])
    return (v1, *r1_branch_voltages(p, i_core))


def r1_branch_voltages(p: Mapping[str, Any], i_core):
    """V2 (top of R1) and V3 (diode Q2) with core current ``i_core``."""
    is2 = p["is_a"] * p["area_ratio"] * (1.0 + p["is_dev_q2"])
    v3 = physics.node_voltage(i_core, is2, p["leak_q2_a"], p["ut_v"])
    return np.asarray(i_core) * p["r1_ohm"] + v3, v3


def gate_voltage(p: Mapping[str, Any], i_core):
    """Mirror gate that carries ``i_core`` (saturated EKV), limited to the supply rails."""
    vsg = physics.mos_vsg_for_current(i_core, p["mos_vt0_v"], p["mos_slope_n"], p["mos_i_spec_a"], p["ut_v"])
    return np.clip(p["vdd_v"] - vsg, 0.0, p["vdd_v"])


def loop_drive(p: Mapping[str, Any], i_core, i_inject=0.0, *, offset: bool = True):
    """The amplifier's effective input vd(I) (see the module docstring)."""
    v1, v2, _ = core_voltages(p, i_core, i_inject)
    gain_term = (gate_voltage(p, i_core) - 0.5 * p["vdd_v"]) / p["amp_dc_gain"]
    return v1 - v2 + gain_term + (p["amp_offset_v"] if offset else 0.0)


def loop_slope(p: Mapping[str, Any], i_core):
    """dvd/dI without the small gain term: r(node 1) − R1 − r(node 3); its sign is the net feedback."""
    v1, _, v3 = core_voltages(p, i_core)
    ut = p["ut_v"]
    r1 = physics.node_resistance(v1, p["is_a"] * (1.0 + p["is_dev_q1"]), p["leak_q1_a"], ut)
    r3 = physics.node_resistance(v3, p["is_a"] * p["area_ratio"] * (1.0 + p["is_dev_q2"]), p["leak_q2_a"], ut)
    return r1 - p["r1_ohm"] - r3


def amplifier_alive(p: Mapping[str, Any], i_core, i_inject=0.0):
    """Fraction of the input pair that conducts at the common-mode voltage of this current."""
    v1, v2, _ = core_voltages(p, i_core, i_inject)
    return physics.sigmoid((0.5 * (v1 + v2) - p["amp_vcm_min_v"]) / p["amp_vcm_soft_v"])


def amplifier_bias(p: Mapping[str, Any], i_core):
    if p["amp_bias"] == "fixed":
        return np.full(np.shape(i_core), p["amp_bias_a"], dtype=float)
    return p["amp_bias_min_a"] + p["amp_bias_ratio"] * np.asarray(i_core, dtype=float)


def _bisect_log(fn, lo, hi, iterations: int = 80):
    """Root of ``fn`` between ``lo`` and ``hi`` (fn(lo) and fn(hi) of opposite sign), in log current.
    Elementwise when ``lo`` and ``hi`` are arrays (one bracket per sample)."""
    a, b = np.log(lo), np.log(hi)
    fa = fn(lo) > 0
    for _ in range(iterations):
        m = 0.5 * (a + b)
        same = (fn(np.exp(m)) > 0) == fa
        a, b = np.where(same, m, a), np.where(same, b, m)
    root = np.exp(0.5 * (a + b))
    return float(root) if np.ndim(root) == 0 else root


def batched(p: Mapping[str, Any]) -> dict[str, Any]:
    """Parameters with per-sample values (1-D arrays, from ``resolve_params`` of Monte Carlo values) as
    columns (B, 1), so that they broadcast against a grid of core currents (B, G)."""
    return {k: (v[:, None] if isinstance(v, np.ndarray) and v.ndim == 1 else v) for k, v in p.items()}


def _batch_size(p: Mapping[str, Any]) -> int:
    sizes = {v.shape[0] for v in p.values() if isinstance(v, np.ndarray) and v.ndim >= 1}
    return sizes.pop() if sizes else 1


def operating_points(p: Mapping[str, Any], grid: np.ndarray = _I_GRID, iterations: int = 80) -> np.ndarray:
    """The wanted current of every sample: the highest stable zero of vd(I) (vd falls through zero) on
    ``grid``, refined by ``iterations`` bisections; NaN where there is none."""
    q = batched(p)
    vd = np.broadcast_to(loop_drive(q, grid), (_batch_size(p), grid.size))
    down = (vd[:, :-1] > 0) & (vd[:, 1:] <= 0)
    k = grid.size - 2 - np.argmax(down[:, ::-1], axis=1)  # the last down-crossing
    root = np.atleast_1d(_bisect_log(lambda i: loop_drive(q, i[:, None])[:, 0], grid[k], grid[k + 1], iterations))
    return np.where(down.any(axis=1), root, np.nan)


def operating_point(p: Mapping[str, Any]) -> float | None:
    """The wanted current: the highest stable zero of vd(I) (vd falls through zero), or None."""
    i_op = float(operating_points(p)[0])
    return None if np.isnan(i_op) else i_op


def switch_current(p: Mapping[str, Any]) -> float | None:
    """The current where the net feedback changes from positive to negative (dvd/dI = 0)."""
    slope = loop_slope(p, _I_GRID)
    idx = np.nonzero((slope[:-1] > 0) & (slope[1:] <= 0))[0]
    if not idx.size:
        return None
    k = int(idx[0])
    return _bisect_log(lambda i: loop_slope(p, i), _I_GRID[k], _I_GRID[k + 1])


def feedback_map(p: Mapping[str, Any]) -> tuple[FeedbackSegment, ...]:
    """Net feedback polarity of the loop versus core current, as contiguous segments."""
    positive = loop_slope(p, _I_GRID) > 0
    edges = np.nonzero(positive[1:] != positive[:-1])[0]
    starts = np.concatenate([[0], edges + 1])
    ends = np.concatenate([edges + 1, [len(_I_GRID) - 1]])
    return tuple(FeedbackSegment(float(_I_GRID[a]), float(_I_GRID[b]), "positive" if positive[a] else "negative")
                 for a, b in zip(starts, ends))


def _escape_grid(i_target: np.ndarray, grid: np.ndarray) -> np.ndarray:
    """Core currents from the zero state itself (I = 0) up to ``i_target`` (B,): the log ``grid`` from
    1 fA and the target itself; grid points above a sample's target repeat its target (B, G + 2)."""
    target = np.asarray(i_target, dtype=float)[:, None]
    return np.concatenate([np.zeros_like(target), np.minimum(grid[None, :], target), target], axis=1)


def injection_needed(p: Mapping[str, Any], i_target, grid: np.ndarray = _I_GRID) -> np.ndarray:
    """Smallest current into node 1 for which, at every core current I below ``i_target``, the amplifier
    is alive (input common mode (V1 + V2)/2 above its limit: a > ½) and drives upward (vd > 0), so the
    zero state is no longer an equilibrium. Closed form per grid current: V1 must exceed
    max(V2 − gain term − Vos, 2·Vcm,min − V2), and node 1 carries IS·(e^{V1/VT} − 1) + IL·tanh(V1/VT)
    at that V1. Per sample (B,); ``p`` as from :func:`batched` or scalar."""
    q = batched(p)
    grid = _escape_grid(np.broadcast_to(i_target, (_batch_size(p),)), grid)
    v2, _ = r1_branch_voltages(q, grid)
    gain_term = (gate_voltage(q, grid) - 0.5 * q["vdd_v"]) / q["amp_dc_gain"]
    v1_needed = np.maximum(v2 - gain_term - q["amp_offset_v"], 2.0 * q["amp_vcm_min_v"] - v2)
    ut = q["ut_v"]
    node1 = (physics.diode_current(v1_needed, q["is_a"] * (1.0 + q["is_dev_q1"]), ut)
             + physics.leakage_current(v1_needed, q["leak_q1_a"], ut))
    return np.max(np.maximum(node1 - grid, 0.0), axis=1)


def pulldown_needed(p: Mapping[str, Any], i_target, grid: np.ndarray = _I_GRID) -> np.ndarray:
    """Largest current with which the amplifier holds the gate up at any core current below the target:
    its full tail when the input pair is off, otherwise its drive when the input is of the wrong sign.
    Per sample (B,)."""
    q = batched(p)
    target = np.broadcast_to(i_target, (_batch_size(p),))
    grid = _escape_grid(target, grid)
    alive = amplifier_alive(q, grid)
    ib = amplifier_bias(q, grid)
    wrong = np.clip(-np.tanh(loop_drive(q, grid) / _input_linear_range(q, target[:, None])), 0.0, None)
    return np.max(ib * ((1.0 - alive) + alive * wrong), axis=1)


def _input_linear_range(p: Mapping[str, Any], i_op: float) -> float:
    """Input voltage over which the OTA is linear: bias/gm with gm = 2π·GBW·C at the operating bias."""
    ib = np.maximum(amplifier_bias(p, np.asarray(i_op)), 1e-15)
    return ib / (2.0 * np.pi * p["amp_gbw_hz"] * (p["c_gate_f"] + p["c_gs_f"]))


def input_linear_range(p: Mapping[str, Any]) -> float:
    """As used by the transient: at the high-current estimate of the operating point."""
    return _input_linear_range(p, ideal_ptat_current(p))


def ideal_ptat_current(p: Mapping[str, Any]):
    """VT·ln N / R1 (Razavi ch. 12), the operating current in the high-current limit."""
    return p["ut_v"] * np.log(p["area_ratio"]) / p["r1_ohm"]


_ESCAPE_FLOOR_A = 1e-16  # a need below this is reported as this (nothing measurable is needed)
_ESCAPE_CEILING_A = 1e-2  # no startup circuit of this core injects more: beyond it, none can


def startup_needed(p: Mapping[str, Any], i_op, grid: np.ndarray = _I_GRID) -> np.ndarray:
    """The startup current the design's kind needs to escape the zero state, per sample (B,).

    Injection and kick kinds inject into node 1: :func:`injection_needed` up to 0.9·i_op. The pull-down
    must beat the amplifier's hold on the gate (:func:`pulldown_needed`). NaN without a wanted point,
    inf where no current up to 10 mA escapes. The DC criterion ignores how slowly a starved amplifier
    moves; the transient shows that."""
    i_op = np.atleast_1d(np.asarray(i_op, dtype=float))
    target = np.where(np.isnan(i_op), 1e-6, 0.9 * i_op)  # any finite target; the result is NaN there
    fn = pulldown_needed if p["startup_kind"] == "pulldown" else injection_needed
    need = np.maximum(fn(p, target, grid), _ESCAPE_FLOOR_A)
    return np.where(np.isnan(i_op), np.nan, np.where(need > _ESCAPE_CEILING_A, np.inf, need))


def minimum_startup_current(p: Mapping[str, Any], i_op: float | None) -> float | None:
    """Smallest startup current of the design's kind that escapes the zero state (None: none can)."""
    if i_op is None:
        return None
    need = float(startup_needed(p, i_op)[0])
    return need if np.isfinite(need) else None


def startup_offered(p: Mapping[str, Any]):
    """The current the startup circuit offers (per sample when ``p`` has arrays): the injection or
    pull-down ``i_start_a``; a kick C·dV/dt while it lasts (the supply ramp ``ramp_s``, or the enable
    edge); zero without a startup circuit."""
    kind = p["startup_kind"]
    if kind in ("inject", "pulldown"):
        return p["i_start_a"]
    if kind == "kick_supply":
        return p["c_kick_f"] * p["vdd_v"] / p["ramp_s"]
    if kind == "kick_enable":
        return p["c_kick_f"] * p["vdd_v"] / p["enable_edge_s"]
    return 0.0 * p["i_start_a"]


def startup_margin(p: Mapping[str, Any]) -> np.ndarray:
    """ln(offered / needed startup current) per sample (B,): negative where the DC analysis says the part
    cannot leave the zero state; NaN without a wanted point. ``p``: resolved parameters with ``ramp_s``,
    per-sample values as 1-D arrays. A cheap guide to where parts stick, not the verdict (the
    transient decides: a weak current may escape too slowly for the record). Computed on coarser
    current grids than :func:`dc_analysis` (10 and 5 points per decade; within about 1 % of it): it
    is called for thousands of parameter points."""
    need = startup_needed(p, operating_points(p, _I_GRID[::8], iterations=24), _I_GRID[::4])
    offered = np.broadcast_to(startup_offered(p), need.shape)
    return np.log(np.maximum(offered, _ESCAPE_FLOOR_A) / need)


def dc_analysis(design, temperature_c: float | None = None) -> DcResult:
    """Both equilibria, the feedback map and the startup limits of ``design`` at ``temperature_c``."""
    p = design.resolved(temperature_c)
    if p["amp_offset_v"] != p["amp_offset_v"]:
        raise ModelError("amp_offset_v is not a number")
    i_op = operating_point(p)
    i_sw = switch_current(p)
    peak = float(loop_drive(p, i_sw, offset=False)) if i_sw is not None else 0.0
    ut = p["ut_v"]
    dvbe = vref = vg = None
    if i_op is not None:
        v1, _, v3 = core_voltages(p, i_op)
        dvbe = float(v1 - v3)
        i_out = p["mirror_out_ratio"] * i_op
        v_q3 = physics.node_voltage(i_out, p["is_a"] * (1.0 + p["is_dev_q3"]), 0.0, ut)
        vref = float(v_q3 + i_out * p["r2_ohm"])
        vg = float(gate_voltage(p, i_op))
    i_zero = float(physics.mos_current(0.0, p["vdd_v"], p["mos_vt0_v"], p["mos_slope_n"], p["mos_i_spec_a"], ut))
    return DcResult(
        temperature_c=float(p["temperature_c"]), ut_v=float(ut), i_op_a=i_op, dvbe_v=dvbe, vref_v=vref,
        vg_op_v=vg, i_ptat_ideal_a=float(ideal_ptat_current(p)), i_switch_a=i_sw, offset_limit_v=-peak,
        i_zero_a=i_zero, i_start_min_a=minimum_startup_current(p, i_op), startup_kind=p["startup_kind"],
        feedback=feedback_map(p))
