"""Monte Carlo throughput: 10,000 startup transients of the demo design at one condition.

The batched backward-Euler integrator (labtool.model.integrator) on two worker processes, against
the plain alternative: a per-sample ``scipy.integrate.solve_ivp`` (BDF) loop on the same node
equations with the same tolerances, run on a subset and extrapolated per sample. Both sides are
measured by the same engine call. Run: ``python -m benchmarks bench_montecarlo``.
"""

from __future__ import annotations

import os
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

from labtool.execute import Scheduler
from labtool.measure import Limits
from labtool.model import load_design, monte_carlo
from labtool.model.circuit import OUT, linear_ramp, make_circuit
from labtool.model.design import resolve_params
from labtool.model.montecarlo import draws, measure_sample, sampled_values
from labtool.model.transient import default_stop

DESIGN = Path(__file__).resolve().parents[1] / "sample_runs" / "design.toml"
N = 10_000
BASELINE_N = 12
RAMP_S, TEMP_C = 10e-6, 27.0


def baseline(design, n: int, seed: int = 1):
    """Per-sample solve_ivp (BDF) on the same circuit; returns (seconds per sample, delays)."""
    values = {k: v[:n] for k, v in sampled_values(design, draws(n, seed)).items()}
    resolved = resolve_params({**design.values(), **values}, TEMP_C)
    resolved["ramp_s"] = RAMP_S
    circ = make_circuit(resolved, n, linear_ramp(design.vdd_v, RAMP_S), (RAMP_S,))
    t_stop = default_stop(design, RAMP_S)
    grid = np.linspace(0.0, t_stop, design.mc_points)
    supply = circ.supply(grid)
    delays = []
    start = time.perf_counter()
    for i in range(n):
        one = circ.take(np.arange(n) == i)
        caps = one.caps[0]
        eps = 1e-12 * t_stop

        def rhs(t, y, one=one, caps=caps):
            tt = np.array([t])
            return one.currents(y[None, :], tt - eps, tt)[0] / caps

        sol = solve_ivp(rhs, (0.0, t_stop), np.zeros(6), method="BDF", t_eval=grid, rtol=design.rtol,
                        atol=design.atol_v)
        delays.append(measure_sample(grid, supply, sol.y[OUT], Limits())["delay_s"])
    return (time.perf_counter() - start) / n, np.array(delays, dtype=float)


def main() -> None:
    design = load_design(DESIGN)
    workers = min(2, os.cpu_count() or 1)
    t0 = time.perf_counter()
    res = monte_carlo(design, conditions=[(RAMP_S, TEMP_C)], n=N, seed=1, scheduler=Scheduler("local", workers))
    batched_s = time.perf_counter() - t0
    per_sample = batched_s / N
    base_per_sample, base_delays = baseline(design, BASELINE_N)
    ours = res.samples["delay_s"].to_numpy()[:BASELINE_N]
    agree = float(np.max(np.abs(ours - base_delays) / base_delays))
    s = res.summary().iloc[0]
    print(f"Monte Carlo, {N} transients at ramp {RAMP_S:g} s, {TEMP_C:g} °C, {workers} workers: {batched_s:.1f} s, "
          f"{N / batched_s:.0f} samples/s (mean {res.samples['steps'].mean():.0f} steps per sample)")
    print(f"  p_stuck {s.p_stuck:.4g}, delay median {s.delay_median_s * 1e6:.2f} µs, p95 {s.delay_p95_s * 1e6:.2f} µs")
    print(f"baseline solve_ivp BDF loop, {BASELINE_N} samples: {base_per_sample:.3f} s per sample "
          f"→ {base_per_sample * N:.0f} s for {N} (extrapolated)")
    print(f"ratio: {base_per_sample / per_sample:.0f}× faster; delays agree within {agree * 100:.2f} % on the subset")


if __name__ == "__main__":
    main()
