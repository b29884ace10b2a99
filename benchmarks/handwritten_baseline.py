"""The way startup delays are measured today without labtool: a straightforward pandas + scipy script.

Written as an engineer would write it in a notebook: read the CSV with pandas, find threshold
crossings with boolean masks, fit a delayed first-order step to the whole record with curve_fit.
Used only as the baseline of the scale benchmark.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.optimize import curve_fit


def _step(t, t0, tau, vfinal):
    return vfinal * (1.0 - np.exp(-np.maximum(t - t0, 0.0) / tau))


def measure_file(path: str) -> dict:
    df = pd.read_csv(path, comment="#")
    t = df.iloc[:, 0].to_numpy(float) * 1e6  # µs, so curve_fit sees numbers near 1
    vdd = df.iloc[:, 1].to_numpy(float)
    vref = df.iloc[:, 2].to_numpy(float)
    vdd_final = np.median(vdd[-len(vdd) // 10:])
    vref_final = np.median(vref[-len(vref) // 10:])
    t_supply = t[np.argmax(vdd >= 0.9 * vdd_final)]
    t_10 = t[np.argmax(vref >= 0.1 * vref_final)]
    t_out = t[np.argmax(vref >= 0.9 * vref_final)]
    p0 = (t_10, (t_out - t_10) / 2.2, vref_final)
    p, _ = curve_fit(_step, t, vref, p0=p0, maxfev=2000)
    return {"delay_s": (t_out - t_supply) * 1e-6, "tau_s": p[1] * 1e-6, "vout_final_v": p[2]}
