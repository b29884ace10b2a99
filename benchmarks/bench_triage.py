"""Triage of returned parts against a large lot (goal: under 1 s per part). Invented table shaped like
``Campaign.measurements()``: a lot of 200 parts × 3 temperatures × 3 ramps × 5 power cycles (9,000
rows), ten returned parts stuck at the cold, slow corner."""

from __future__ import annotations

import time

import numpy as np
import pandas as pd

from labtool.stats.triage import triage

N_PARTS, REPEATS, N_RETURNED = 200, 5, 10
TEMPS, RAMPS = (-40.0, 25.0, 125.0), (10e-6, 1e-3, 0.1)


def lot_rows(seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    grid = [(p, t, r, k) for p in range(N_PARTS) for t in TEMPS for r in RAMPS for k in range(REPEATS)]
    part, temp, ramp, rep = (np.array(c) for c in zip(*grid))
    n = len(grid)
    delay = np.where(ramp < 1e-4, 20e-6, -0.27 * ramp) * rng.lognormal(0, 0.1, n)
    verdict = np.full(n, "started", dtype=object)
    stuck = (part < N_RETURNED) & (temp == TEMPS[0]) & (ramp == RAMPS[-1])
    verdict[stuck] = "stuck_at_zero"
    delay[stuck] = np.nan
    return pd.DataFrame({"capture_id": [f"{i:016x}" for i in range(n)], "lot": "ZR24A",
                         "part": [f"p{i:03d}" for i in part], "temperature_c": temp, "ramp_s": ramp, "vdd_v": 1.8,
                         "repeat": rep, "verdict": verdict, "delay_s": delay,
                         "overshoot_pct": np.abs(rng.normal(0.3, 0.2, n)), "vout_final_v": rng.normal(1.2, 0.003, n),
                         "vsupply_final_v": 1.8, "rise_s": 5e-6, "dt_s": 1e-7, "n_samples": 2000})


def main() -> None:
    table = lot_rows()
    parts = [f"ZR24A/p{i:03d}" for i in range(N_RETURNED)]
    t0 = time.perf_counter()
    tops = [triage(table, p).top.name for p in parts]
    per_part = (time.perf_counter() - t0) / len(parts)
    print(f"triage, lot of {N_PARTS} parts ({len(table):,} rows), {N_RETURNED} returned parts: {per_part:.2f} s per "
          f"part (goal < 1 s); first: {', '.join(sorted(set(tops)))}")


if __name__ == "__main__":
    main()
