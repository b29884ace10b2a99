"""The core, amplifier, mirror, startup circuit and load as node equations C·dV/dt = i(V, t), batched.

Six node voltages per sample (state order :data:`NODES`): Q1 node, top of R1, Q2 node, mirror gate,
reference output, Q3 node. Every parameter is an array over the samples of one batch, so one call
evaluates a whole Monte Carlo population. Capacitors to the supply (gate-source of the mirror, the
kick capacitor) enter as C·ΔVsource/Δt over the integrator's step, which keeps charge exact.
Behavioural model, not transistor-level sign-off.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, Mapping

import numpy as np

from labtool.model import physics
from labtool.model.dc import input_linear_range

NODES = ("v_q1", "v_r1", "v_q2", "v_gate", "v_out", "v_q3")
OUT = NODES.index("v_out")
GATE = NODES.index("v_gate")

_RAIL_V = 0.03  # how close to a rail the amplifier output stage saturates
_EDGE_V = 0.02  # width of the supply thresholds of the amplifier bias and startup circuit
_HEADROOM_V = 0.1  # source-drain voltage the startup devices need


def linear_ramp(vdd_v, ramp_s, t0_s=0.0) -> Callable[[np.ndarray], np.ndarray]:
    """0 V until ``t0_s``, then linear to ``vdd_v`` over ``ramp_s``, then flat."""
    return lambda t: vdd_v * np.clip((t - t0_s) / ramp_s, 0.0, 1.0)


@dataclass(frozen=True)
class CoreCircuit:
    """Node currents of a batch of samples that share one startup kind and one supply waveform."""

    p: Mapping[str, np.ndarray]  # arrays of shape (B,), from :func:`batch_parameters`
    startup_kind: str
    sense_output: bool
    self_biased: bool
    supply: Callable[[np.ndarray], np.ndarray]
    enable: Callable[[np.ndarray], np.ndarray] | None
    breakpoints: tuple[float, ...] = ()

    @property
    def size(self) -> int:
        return int(self.p["ut_v"].shape[0])

    @property
    def caps(self) -> np.ndarray:
        p = self.p
        kick = p["c_kick_f"] if self.startup_kind in ("kick_supply", "kick_enable") else 0.0 * p["c_kick_f"]
        return np.stack([p["c_q1_f"] + kick, p["c_r1_f"], p["c_q2_f"], p["c_gate_f"] + p["c_gs_f"],
                         p["c_out_f"], p["c_q3_f"]], axis=-1)

    def take(self, mask: np.ndarray) -> "CoreCircuit":
        return CoreCircuit({k: v[mask] for k, v in self.p.items()}, self.startup_kind, self.sense_output,
                           self.self_biased, self.supply, self.enable, self.breakpoints)

    def currents(self, y: np.ndarray, t_old: np.ndarray, t_new: np.ndarray, *, detail: bool = False):
        """Net current into each node at state ``y`` (…, B, 6) for the step t_old → t_new (B,)."""
        p = self.p
        v1, v2, v3, vg, vo, v4 = (y[..., k] for k in range(6))
        ut = p["ut_v"]
        vdd = self.supply(t_new)
        dvdd = (vdd - self.supply(t_old)) / (t_new - t_old)
        vsg = vdd - vg
        i1, i2, i3 = physics.mirror_currents(vsg, (vdd - v1, vdd - v2, vdd - vo), p["mos_vt0_v"],
                                             p["mos_slope_n"], p["mos_i_spec_a"], ut)
        i3 = i3 * p["mirror_out_ratio"]
        # amplifier: OTA whose tail is fixed or follows the core; its input pair is off below the
        # common-mode limit, and an amplifier with its input off pulls the gate to the supply (mirror off)
        powered = physics.sigmoid((vdd - p["amp_vdd_min_v"]) / _EDGE_V)
        tail = p["amp_bias_min_a"] + p["amp_bias_ratio"] * np.maximum(i1, 0.0) if self.self_biased else p["amp_bias_a"]
        ib = tail * powered
        alive = physics.sigmoid((0.5 * (v1 + v2) - p["amp_vcm_min_v"]) / p["amp_vcm_soft_v"])
        vlin = p["amp_vlin_v"]
        drive = alive * np.tanh((v2 - v1 - p["amp_offset_v"]) / vlin) + (1.0 - alive) * np.tanh(vsg / vlin)
        rail = np.where(drive > 0, physics.sigmoid(vsg / _RAIL_V), physics.sigmoid(vg / _RAIL_V))
        i_amp_out = ib * drive * rail
        i_amp = i_amp_out + ib / (p["amp_dc_gain"] * vlin) * (0.5 * vdd - vg)
        # startup circuit
        sense = vo if self.sense_output else vsg
        engaged = (physics.sigmoid((p["startup_v_off_v"] - sense) / p["startup_v_width_v"])
                   * physics.sigmoid((vdd - p["startup_vdd_min_v"]) / _EDGE_V))
        zero = 0.0 * v1
        i_inject = i_pull = i_kick = zero
        if self.startup_kind == "inject":
            i_inject = p["i_start_a"] * engaged * physics.sigmoid((vdd - v1 - _HEADROOM_V) / _EDGE_V)
        elif self.startup_kind == "pulldown":
            i_pull = p["i_start_a"] * engaged * np.tanh(np.maximum(vg, 0.0) / _HEADROOM_V)
        elif self.startup_kind == "kick_supply":
            i_kick = p["c_kick_f"] * dvdd
        elif self.startup_kind == "kick_enable":
            i_kick = p["c_kick_f"] * (self.enable(t_new) - self.enable(t_old)) / (t_new - t_old)
        i_r1 = (v2 - v3) / p["r1_ohm"]
        i_r2 = (vo - v4) / p["r2_ohm"]
        f = np.stack([
            i1 - physics.diode_current(v1, p["is_q1_a"], ut) - physics.leakage_current(v1, p["leak_q1_a"], ut)
            + i_inject + i_kick,
            i2 - i_r1,
            i_r1 - physics.diode_current(v3, p["is_q2_a"], ut) - physics.leakage_current(v3, p["leak_q2_a"], ut),
            i_amp - i_pull + p["c_gs_f"] * dvdd,
            i3 - i_r2 - vo / p["r_load_ohm"] - physics.leakage_current(vo, p["leak_out_a"], ut),
            i_r2 - physics.diode_current(v4, p["is_q3_a"], ut),
        ], axis=-1)
        if not detail:
            return f
        # what the devices draw from the supply (the capacitive part is added by the caller)
        drawn = i1 + i2 + i3 + ib + np.maximum(i_amp_out, 0.0) + i_inject
        return f, {"i_supply_dc_a": drawn, "vdd_v": vdd}


def batch_parameters(resolved: Mapping[str, Any], size: int) -> dict[str, np.ndarray]:
    """Numeric resolved parameters broadcast to arrays of ``size`` samples, plus the derived ones."""
    p = {k: np.broadcast_to(np.asarray(v, dtype=float), (size,)).copy()
         for k, v in resolved.items() if isinstance(v, (int, float, np.ndarray, np.floating)) and not isinstance(v, bool)
         and np.ndim(v) <= 1 and (np.ndim(v) == 0 or np.shape(v)[0] == size)}
    p["is_q1_a"] = p["is_a"] * (1.0 + p["is_dev_q1"])
    p["is_q2_a"] = p["is_a"] * p["area_ratio"] * (1.0 + p["is_dev_q2"])
    p["is_q3_a"] = p["is_a"] * (1.0 + p["is_dev_q3"])
    p["amp_vlin_v"] = np.asarray(input_linear_range({**p, "amp_bias": resolved["amp_bias"]}), dtype=float)
    return p


def make_circuit(resolved: Mapping[str, Any], size: int, supply, breakpoints=()) -> CoreCircuit:
    """A batch of ``size`` samples with (possibly per-sample) parameters ``resolved`` and one supply."""
    p = batch_parameters(resolved, size)
    ramp_end = float(np.max(p["ramp_s"]))
    t_en = ramp_end + float(np.max(p["enable_delay_s"]))
    edge = float(np.max(p["enable_edge_s"]))
    enable = linear_ramp(p["vdd_v"], edge, t_en)
    bps = tuple(sorted({*breakpoints, t_en, t_en + edge} if resolved["startup_kind"] == "kick_enable"
                       else set(breakpoints)))
    return CoreCircuit(p, resolved["startup_kind"], resolved["startup_sense"] == "output",
                       resolved["amp_bias"] == "self", supply, enable, bps)
