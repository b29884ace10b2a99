"""Small measurement tables and traces built by the tests themselves (invented data for stating
properties of the drawings, not a reference)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from labtool.report.traces import Trace

RAMPS = (20e-6, 200e-6)  # supply ramp times of the campaign fixture (conftest.py)


def measurement_rows(specs) -> pd.DataFrame:
    """``specs``: (lot, wafer, die_x, die_y, verdict, delay_s) tuples → a measurement-table slice."""
    rows = []
    for i, (lot, wafer, x, y, verdict, delay) in enumerate(specs):
        rows.append({"capture_id": f"c{i:03d}", "lot": lot, "wafer": wafer, "die_x": x, "die_y": y,
                     "part": f"p{i:02d}", "ramp_s": 1e-4, "temperature_c": 25.0, "verdict": verdict,
                     "delay_s": delay, "settle_s": None if delay is None else delay * 2})
    return pd.DataFrame(rows)


def ramp_trace(label: str, delay_s: float | None, *, level_v: float = 1.2, verdict: str = "started",
               offset_v: float = 0.0) -> Trace:
    """Output 0 until ``delay_s`` − 9 µs, then a linear 10 µs rise to ``level_v`` (so it crosses 90 %
    exactly at ``delay_s``); supply a 20 µs ramp to 1.8 V ending at t = 0."""
    t = np.linspace(-40e-6, 100e-6, 1401)
    supply = np.clip((t + 20e-6) / 20e-6, 0.0, 1.0) * 1.8
    if delay_s is None:
        out = np.zeros_like(t) + offset_v
    else:
        out = np.clip((t - (delay_s - 9e-6)) / 10e-6, 0.0, 1.0) * level_v + offset_v
    return Trace(label, t, out, supply, verdict=verdict, delay_s=delay_s,
                 settle_s=None if delay_s is None else delay_s + 5e-6)
