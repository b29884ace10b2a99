"""One startup transient from a truly unpowered state, returned as an ordinary :class:`Capture`.

Everything downstream (measurement, store, reports, the simulated bench) treats it like silicon.
Behavioural model, not transistor-level sign-off.
"""

from __future__ import annotations

import hashlib
from datetime import datetime, timezone
from typing import Callable

import numpy as np

from labtool.capture import Capture, Channel, Conditions, Provenance, TimeBase
from labtool.errors import ModelError
from labtool.model import circuit as circuit_mod
from labtool.model.circuit import GATE, NODES, OUT, linear_ramp, make_circuit
from labtool.model.integrator import Recording, integrate

DISCLAIMER = "behavioural model, not transistor-level sign-off"


def default_stop(design, ramp_s: float) -> float:
    """Record length: the ramp, an enable delay for the enable-edge kick, then the design's window."""
    extra = design.enable_delay_s if design.startup_kind == "kick_enable" else 0.0
    return ramp_s + extra + design.window_s


def _profile_array(profile: Callable) -> Callable[[np.ndarray], np.ndarray]:
    """Accept a supply profile written for arrays, or else for scalars (called point by point)."""
    def supply(t):
        t = np.asarray(t, dtype=float)
        try:
            v = np.asarray(profile(t), dtype=float)
            if v.shape == t.shape:
                return v
        except (TypeError, ValueError):  # a scalar-only profile (``if t < …``)
            pass
        return np.array([float(profile(float(x))) for x in t.ravel()]).reshape(t.shape)
    return supply


def run_transient(design, *, ramp_s: float, temperature_c: float, t_stop_s: float, n_points: int,
                  supply_profile: Callable | None = None, record=tuple(range(len(NODES)))):
    """Integrate one design; returns (Recording of the chosen nodes, the circuit)."""
    if not (ramp_s > 0 and t_stop_s > 0 and n_points >= 2):
        raise ModelError(f"transient: ramp_s, t_stop_s must be > 0 and n_samples ≥ 2 "
                         f"(got {ramp_s}, {t_stop_s}, {n_points})")
    p = design.resolved(temperature_c)
    p["ramp_s"] = ramp_s
    if supply_profile is None:
        supply, bps = linear_ramp(p["vdd_v"], ramp_s), (ramp_s,)
    else:
        supply, bps = _profile_array(supply_profile), (ramp_s,)  # a ramp's corner is the likely kink
    circ = make_circuit(p, 1, supply, bps)
    rec = integrate(circ, t_stop_s, n_points, tuple(record), rtol=p["rtol"], atol=p["atol_v"])
    return rec, circ


def supply_current(circ: circuit_mod.CoreCircuit, rec: Recording) -> np.ndarray:
    """Supply current of sample 0 on the grid: device currents plus the capacitors to the supply."""
    t = rec.t_s
    states = rec.values[0][:, None, :]  # (n_points, 1, 6)
    dt = 1e-6 * (t[1] - t[0])
    _, parts = circ.currents(states, (t - dt)[:, None], t[:, None], detail=True)
    vdd = parts["vdd_v"][:, 0]
    drawn = parts["i_supply_dc_a"][:, 0]
    p = circ.p
    cap = p["c_gs_f"][0] * np.gradient(vdd - rec.values[0][:, GATE], t)
    if circ.startup_kind == "kick_supply":
        cap = cap + p["c_kick_f"][0] * np.gradient(vdd - rec.values[0][:, 0], t)
    return drawn + cap


def simulate(design, *, ramp_s: float, temperature_c: float, t_stop_s: float | None = None,
             n_samples: int = 4000, conditions: Conditions | None = None,
             supply_profile: Callable | None = None) -> Capture:
    """One transient from an unpowered state: supply, reference output and supply current channels.

    ``supply_profile`` (t → V) replaces the linear ramp 0 → vdd_v over ``ramp_s`` (for brown-outs or
    the simulated bench); ``ramp_s`` is still recorded as the condition.
    """
    t_stop = default_stop(design, ramp_s) if t_stop_s is None else float(t_stop_s)
    rec, circ = run_transient(design, ramp_s=ramp_s, temperature_c=temperature_c, t_stop_s=t_stop,
                              n_points=int(n_samples), supply_profile=supply_profile)
    t = rec.t_s
    vdd = circ.supply(t)
    vout = rec.values[0][:, OUT].copy()
    idd = supply_current(circ, rec)
    channels = [Channel("vdd", "V", "supply", vdd), Channel("vref", "V", "output", vout),
                Channel("idd", "A", "supply_current", idd)]
    if circ.startup_kind == "kick_enable":
        channels.append(Channel("en", "V", "enable", circ.enable(t)))
    digest = hashlib.sha256(design.content_hash().encode() + repr((ramp_s, temperature_c, t_stop)).encode()
                            + vdd.tobytes() + vout.tobytes()).hexdigest()
    cond = Conditions(temperature_c=float(temperature_c), ramp_s=float(ramp_s), vdd_v=float(design.vdd_v))
    if conditions is not None:
        cond = cond.merged(conditions)
    prov = Provenance(
        source_path=design.source or f"model:{design.name}", sha256=digest, importer="model",
        imported_at=datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        locator=f"ramp_s={ramp_s:g};temperature_c={temperature_c:g}",
        metadata={"model": DISCLAIMER, "design": design.name, "design_hash": design.content_hash()[:16],
                  "startup_kind": design.startup_kind, "steps": str(int(rec.steps[0]))})
    return Capture(time=TimeBase(n=t.size, t0_s=0.0, dt_s=float(t[1] - t[0])), channels=tuple(channels),
                   conditions=cond, provenance=prov)
