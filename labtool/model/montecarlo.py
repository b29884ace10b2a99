"""Monte Carlo of startup: N parts per condition, integrated together, measured like silicon.

Common random numbers: the standard-normal draws depend only on ``seed`` and the sample index (one
fixed column per varied parameter, :data:`VARIED`), never on the conditions or the nominal values, so
differences between conditions or design changes are the physics, not the dice. Each sample is
measured by the same engine as a bench capture (labtool.measure: levels, crossings, verdict).
Behavioural model, not transistor-level sign-off.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pandas as pd

from labtool.execute import Scheduler, run_batch
from labtool.errors import ModelError
from labtool.measure import Limits, measure_arrays
from labtool.measure.startup import measure_startup
from labtool.measure.verdict import decide
from labtool.model.circuit import OUT, linear_ramp, make_circuit
from labtool.model.design import resolve_params
from labtool.model.integrator import integrate
from labtool.model.transient import default_stop

# Varied parameters, in the fixed order of the draw columns (changing it changes every sample).
VARIED = ("amp_offset_v", "is_dev_q1", "is_dev_q2", "is_dev_q3", "r_dev", "c_dev", "i_start_a")
CHUNK = 2500  # samples integrated together in one batch item (bigger batches amortise numpy overhead)


def draws(n: int, seed: int) -> np.ndarray:
    """(n, len(VARIED)) standard-normal draws; sample i's row is the same for any n ≥ i + 1."""
    if n < 1:
        raise ModelError(f"Monte Carlo needs n ≥ 1 samples (got {n})")
    rng = np.random.default_rng(seed)
    return rng.standard_normal((n, len(VARIED)))


def sampled_values(design, z: np.ndarray) -> dict[str, np.ndarray]:
    """Per-sample values of the varied parameters from the draws ``z`` and the design's sigmas."""
    d = design
    rel = lambda nominal, sigma, col: np.maximum(nominal + sigma * z[:, col], -0.9)  # noqa: E731
    return {
        "amp_offset_v": d.amp_offset_v + d.sigma_offset_v * z[:, 0],
        "is_dev_q1": rel(d.is_dev_q1, d.sigma_is_rel, 1),
        "is_dev_q2": rel(d.is_dev_q2, d.sigma_is_rel, 2),
        "is_dev_q3": rel(d.is_dev_q3, d.sigma_is_rel, 3),
        "r_dev": rel(d.r_dev, d.sigma_r_rel, 4),
        "c_dev": rel(d.c_dev, d.sigma_c_rel, 5),
        "i_start_a": d.i_start_a * np.maximum(1.0 + d.sigma_i_start_rel * z[:, 6], 0.0),
    }


def sample_population(design, n: int, seed: int) -> list:
    """``n`` designs with per-part variation (the same parts as :func:`monte_carlo` with this seed)."""
    values = sampled_values(design, draws(n, seed))
    return [design.replace(**{k: float(v[i]) for k, v in values.items()}) for i in range(n)]


@dataclass(frozen=True)
class MonteCarloResult:
    """Per-sample results (``samples``) and per-condition summaries; behavioural model, not sign-off."""

    samples: pd.DataFrame
    seed: int

    def summary(self) -> pd.DataFrame:
        rows = []
        for (ramp, temp), g in self.samples.groupby(["ramp_s", "temperature_c"], sort=True):
            rows.append({"ramp_s": ramp, "temperature_c": temp, **summarise(g)})
        return pd.DataFrame(rows)


def summarise(g: pd.DataFrame) -> dict:
    """n, p_stuck and the delay distribution of one condition's samples: the delays of samples whose
    output came up and stayed, summarised as every set-up is (labtool.stats.setups)."""
    from labtool.stats.setups import counted, quantiles

    q = quantiles(counted(g))
    counts = g["verdict"].value_counts()
    return {
        "n": int(len(g)), "p_stuck": float(g["stuck"].mean()), "n_stuck": int(g["stuck"].sum()),
        "delay_median_s": q.median, "delay_p05_s": q.p05, "delay_p95_s": q.p95,
        "delay_mean_s": q.mean, "delay_std_s": q.std,
        "verdicts": {str(k): int(v) for k, v in counts.items()},
    }


def measure_sample(t_s, supply_v, output_v, limits: Limits, *, fit: bool = False) -> dict:
    """The engine's metrics and verdict for one sample. By default as ``measure_arrays`` computes them
    but without its step-model fit: the fit only adds ring frequency and damping, which the Monte
    Carlo summary does not use, and costs twenty times the rest. ``fit=True`` calls
    ``measure_arrays`` itself and adds ``ring_hz`` and ``damping``."""
    if fit:
        r = measure_arrays(t_s, supply_v, output_v, limits)
        return {"verdict": r.verdict, "delay_s": r.delay_s, "settle_s": r.settle_s, "overshoot_pct": r.overshoot_pct,
                "vout_final_v": r.vout_final_v, "ring_hz": r.ring_hz, "damping": r.damping}
    m = measure_startup(t_s, supply_v, output_v, limits)
    verdict, _ = decide(m, limits)
    return {"verdict": verdict, "delay_s": m.delay_s, "settle_s": m.settle_s, "overshoot_pct": m.overshoot_pct,
            "vout_final_v": m.output.final_v}


def _run_chunk(item) -> pd.DataFrame:
    """Integrate and measure one chunk of samples at one condition (a picklable batch item)."""
    design, ramp_s, temperature_c, start, values, limits, fit = item
    size = len(next(iter(values.values())))
    resolved = resolve_params({**design.values(), **values}, temperature_c)
    resolved["ramp_s"] = ramp_s
    circ = make_circuit(resolved, size, linear_ramp(design.vdd_v, ramp_s), (ramp_s,))
    t_stop = default_stop(design, ramp_s)
    rec = integrate(circ, t_stop, design.mc_points, (OUT,), rtol=design.rtol, atol=design.atol_v)
    supply = circ.supply(rec.t_s)
    rows = []
    for i in range(size):
        rows.append(measure_sample(rec.t_s, supply, rec.values[i, :, 0], limits, fit=fit))
    frame = pd.DataFrame(rows)
    frame.insert(0, "sample", np.arange(start, start + size))
    frame.insert(0, "temperature_c", float(temperature_c))
    frame.insert(0, "ramp_s", float(ramp_s))
    frame.insert(3, "stuck", frame["verdict"] == "stuck_at_zero")
    frame["delay_s"] = frame["delay_s"].astype(float)
    for k, v in values.items():
        frame[k] = v
    frame["steps"] = rec.steps
    return frame


def monte_carlo(design, *, conditions: Sequence[tuple[float, float]], n: int, seed: int,
                limits: Limits | None = None, scheduler: Scheduler | None = None,
                chunk: int = CHUNK, fit: bool = False) -> MonteCarloResult:
    """``n`` samples at each (ramp_s, temperature_c); the same parts (draws) at every condition.
    ``fit=True`` measures each sample with the full ``measure_arrays`` (adds ring_hz, damping; slower)."""
    if not conditions:
        raise ModelError("Monte Carlo needs at least one (ramp_s, temperature_c) condition")
    values = sampled_values(design, draws(n, seed))
    limits = limits or Limits()
    items = [(design, float(r), float(t), s, {k: v[s:s + chunk] for k, v in values.items()}, limits, fit)
             for r, t in conditions for s in range(0, n, chunk)]
    frames = []
    for outcome in run_batch(_run_chunk, items, scheduler, what="monte carlo", unit="batch"):
        if not outcome.ok:
            raise ModelError(f"Monte Carlo at ramp_s={outcome.item[1]:g}, temperature_c={outcome.item[2]:g}: "
                             f"{outcome.error}")
        frames.append(outcome.value)
    return MonteCarloResult(pd.concat(frames, ignore_index=True), seed)
