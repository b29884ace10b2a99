"""Stuck-at-zero probability at the ppm level (issue #18): importance sampling against plain Monte Carlo.

1. The demo design (sample_runs/design.toml) at every field corner (ramp_times_s × temperatures_c):
   where is it most likely to stick, and how likely? (a short estimate per corner)
2. The same for a variant whose worst corner is in the ppm range: the demo with an input pair that
   conducts only above 0.35 V common mode (instead of 0.25 V) and a 20 µA startup current.
3. At the worst corner of each: the estimate to a relative 95 % half-width of 30 % on two workers,
   its transients and wall time, and plain Monte Carlo's cost for the same precision: the samples
   n = z²·(1 − p)/(h²·p) that a binomial count needs for half-width h (normal approximation), timed
   at the plain Monte Carlo throughput measured here at the same corner.

Run: ``python -m benchmarks bench_rare``.
"""

from __future__ import annotations

import os
import time
from pathlib import Path

from labtool.execute import Scheduler
from labtool.model import load_design, monte_carlo
from labtool.model.rare import stuck_probability

DESIGN = Path(__file__).resolve().parents[1] / "sample_runs" / "design.toml"
VARIANT = {"amp_vcm_min_v": 0.35, "i_start_a": 20e-6}
Z95 = 1.959963984540054
SWEEP_SAMPLES = 100
GOAL_HALFWIDTH = 0.3
MAX_TRANSIENTS = 20_000
THROUGHPUT_SAMPLES = 2000


def sweep(design, scheduler) -> list:
    """A short estimate at every field corner, worst first."""
    runs = [stuck_probability(design, ramp_s=r, temperature_c=t, n=SWEEP_SAMPLES, seed=1, scheduler=scheduler,
                              explore=32, rel_halfwidth=None)
            for r in design.ramp_times_s for t in design.temperatures_c]
    return sorted(runs, key=lambda x: (x.beta is None, x.beta if x.beta is not None else 0.0))


def show_sweep(label: str, runs) -> None:
    print(f"{label}: field corners, {SWEEP_SAMPLES} importance samples each (worst first)")
    for x in runs:
        beta = f"β {x.beta:5.2f}, p_stuck {x.p_stuck:.3g} (95 % {x.p_stuck_ci95[0]:.3g} to {x.p_stuck_ci95[1]:.3g})" \
            if x.beta is not None else f"no stuck region within β ≤ 12 (p_stuck < {x.p_stuck_ci95[1]:.2g} by the zero count)"
        print(f"  ramp {x.ramp_s:g} s, {x.temperature_c:+g} °C: {beta}; {x.cause() or '-'}")


def precise(design, worst, scheduler) -> None:
    t0 = time.perf_counter()
    x = stuck_probability(design, ramp_s=worst.ramp_s, temperature_c=worst.temperature_c, n=MAX_TRANSIENTS,
                          seed=2, scheduler=scheduler, rel_halfwidth=GOAL_HALFWIDTH)
    wall = time.perf_counter() - t0
    print(f"  worst corner ramp {x.ramp_s:g} s, {x.temperature_c:+g} °C: p_stuck {x.p_stuck:.3g} "
          f"(95 % {x.p_stuck_ci95[0]:.3g} to {x.p_stuck_ci95[1]:.3g}, ±{100 * x.rel_halfwidth:.0f} %), "
          f"β {x.beta:.2f}, first order {x.p_form:.3g}, ESS {x.ess:.0f}")
    print(f"    {x.n_transients} transients ({x.n_samples} importance samples), {wall:.1f} s wall on "
          f"{scheduler.workers} workers; cause: {x.cause()}")
    for w in x.warnings:
        print(f"    warning: {w}")
    t0 = time.perf_counter()
    monte_carlo(design, conditions=[(x.ramp_s, x.temperature_c)], n=THROUGHPUT_SAMPLES, seed=3, scheduler=scheduler)
    per_s = THROUGHPUT_SAMPLES / (time.perf_counter() - t0)
    for h, what in ((x.rel_halfwidth, "the same"), (GOAL_HALFWIDTH, "the goal's")):
        n_plain = Z95 ** 2 * (1 - x.p_stuck) / (h * h * x.p_stuck)
        print(f"    plain Monte Carlo for {what} ±{100 * h:.0f} %: {n_plain:.3g} transients, at the {per_s:.0f} "
              f"transients/s measured here {n_plain / per_s / 3600:.3g} h ({n_plain / x.n_transients:.3g}× the "
              f"transients)")


def main() -> None:
    scheduler = Scheduler("local", min(2, os.cpu_count() or 1))
    demo = load_design(DESIGN)
    for label, design in (("demo design", demo),
                          ("variant " + ", ".join(f"{k}={v:g}" for k, v in VARIANT.items()), demo.replace(**VARIANT))):
        t0 = time.perf_counter()
        runs = sweep(design, scheduler)
        show_sweep(label, runs)
        print(f"  sweep: {sum(x.n_transients for x in runs)} transients, {time.perf_counter() - t0:.0f} s")
        if runs[0].beta is not None:
            precise(design, runs[0], scheduler)


if __name__ == "__main__":
    main()
