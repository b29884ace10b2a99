"""Monte Carlo throughput: 10,000 startup transients of the demo design at one condition.

The batched backward-Euler integrator (labtool.model.integrator) on two worker processes, against
the plain alternative: a per-sample ``scipy.integrate.solve_ivp`` (BDF) loop on the same node
equations with the same tolerances, run on a subset and extrapolated per sample. Both sides are
measured by the same engine call. Run: ``python -m benchmarks bench_montecarlo``.
"""

from __future__ import annotations

import os
import resource
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

from labtool.execute import Scheduler
from labtool.measure import Limits, measure_outputs
from labtool.model import load_design, monte_carlo
from labtool.model.circuit import OUT, linear_ramp, make_circuit
from labtool.model.design import resolve_params
from labtool.model.montecarlo import draws, sampled_values
from labtool.model.transient import default_stop

DESIGN = Path(__file__).resolve().parents[1] / "sample_runs" / "design.toml"
N = 10_000
BASELINE_N = 12
REFERENCE_N = 4
RAMP_S, TEMP_C = 10e-6, 27.0


def baseline(design, n: int, seed: int = 1, *, method: str = "BDF", rtol: float | None = None,
             atol: float | None = None):
    """Per-sample solve_ivp on the same circuit; returns (wall s, CPU s per sample, delays)."""
    values = {k: v[:n] for k, v in sampled_values(design, draws(n, seed)).items()}
    resolved = resolve_params({**design.values(), **values}, TEMP_C)
    resolved["ramp_s"] = RAMP_S
    circ = make_circuit(resolved, n, linear_ramp(design.vdd_v, RAMP_S), (RAMP_S,))
    t_stop = default_stop(design, RAMP_S)
    grid = np.linspace(0.0, t_stop, design.mc_points)
    supply = circ.supply(grid)
    delays = []
    start, cpu = time.perf_counter(), time.process_time()
    for i in range(n):
        one = circ.take(np.arange(n) == i)
        caps = one.caps[0]
        eps = 1e-12 * t_stop

        def rhs(t, y, one=one, caps=caps):
            tt = np.array([t])
            return one.currents(y[None, :], tt - eps, tt)[0] / caps

        sol = solve_ivp(rhs, (0.0, t_stop), np.zeros(6), method=method, t_eval=grid, rtol=rtol or design.rtol,
                        atol=atol or design.atol_v)
        delays.append(measure_outputs(grid, supply, [sol.y[OUT]], Limits(), fit=False)[0].delay_s)
    return ((time.perf_counter() - start) / n, (time.process_time() - cpu) / n, np.array(delays, dtype=float))


def _cpu_s() -> float:
    """CPU seconds of this process and its finished children (the worker processes)."""
    own, kids = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime


def main() -> None:
    design = load_design(DESIGN)
    workers = min(2, os.cpu_count() or 1)
    t0, c0 = time.perf_counter(), _cpu_s()
    res = monte_carlo(design, conditions=[(RAMP_S, TEMP_C)], n=N, seed=1, scheduler=Scheduler("local", workers))
    wall, cpu = time.perf_counter() - t0, _cpu_s() - c0
    base_wall, base_cpu, base_delays = baseline(design, BASELINE_N)
    # accuracy of both against a tightly converged independent solution (Radau, rtol 1e-8) of 4 parts
    _, _, ref = baseline(design, REFERENCE_N, method="Radau", rtol=1e-8, atol=1e-9)
    ours = res.samples["delay_s"].to_numpy()[:REFERENCE_N]
    err_ours = float(np.max(np.abs(ours - ref) / ref))
    err_base = float(np.max(np.abs(base_delays[:REFERENCE_N] - ref) / ref))
    s = res.summary().iloc[0]
    print(f"Monte Carlo, {N} transients at ramp {RAMP_S:g} s, {TEMP_C:g} °C, {workers} workers: {wall:.1f} s wall, "
          f"{N / wall:.0f} samples/s, {cpu / N * 1e3:.2f} ms CPU per sample "
          f"(mean {res.samples['steps'].mean():.0f} steps per sample, measurement included)")
    print(f"  p_stuck {s.p_stuck:.4g}, delay median {s.delay_median_s * 1e6:.2f} µs, p95 {s.delay_p95_s * 1e6:.2f} µs")
    print(f"baseline solve_ivp BDF loop, {BASELINE_N} samples: {base_wall * 1e3:.0f} ms wall, {base_cpu * 1e3:.0f} ms CPU "
          f"per sample → {base_wall * N:.0f} s for {N} (extrapolated)")
    print(f"ratio: {base_wall * N / wall:.0f}× (wall, {workers} workers vs one loop), "
          f"{base_cpu * N / cpu:.0f}× per core (CPU time)")
    print(f"delay error against Radau rtol 1e-8 on {REFERENCE_N} parts: batched {err_ours * 100:.2f} %, "
          f"solve_ivp BDF {err_base * 100:.2f} % (both at rtol {design.rtol:g}, atol {design.atol_v:g} V)")


if __name__ == "__main__":
    main()
