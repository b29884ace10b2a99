"""Test signals for the measurement tests: reference step responses, supply ramps, ADC quantisation.

The step responses come from scipy.signal.step (reference library) on the transfer functions of
Ogata, Modern Control Engineering, §5-3; ramps, delays, noise and quantisation are ours (stated
beside each test as the conditions, not as reference values).
"""

from __future__ import annotations

import numpy as np
from scipy import signal


def second_order_step(t, *, zeta: float, wn: float, delay_s: float) -> np.ndarray:
    """Unit step response of ωn²/(s² + 2ζωn·s + ωn²), delayed, by scipy.signal.step on the samples."""
    grid, late = _grid_from_step(t, delay_s)
    _, response = signal.step(([wn * wn], [1.0, 2 * zeta * wn, wn * wn]), T=grid)
    return _on_samples(t, delay_s, late, grid, response)


def first_order_step(t, *, tau_s: float, delay_s: float) -> np.ndarray:
    """Unit step response of 1/(τs + 1), delayed, by scipy.signal.lsim with a unit step input."""
    grid, late = _grid_from_step(t, delay_s)
    _, response, _ = signal.lsim(([1.0], [tau_s, 1.0]), U=np.ones_like(grid), T=grid)
    return _on_samples(t, delay_s, late, grid, response)


def _grid_from_step(t, delay_s):
    """scipy simulates on a uniform grid that starts at the step; ours is the record's own step size."""
    late = t > delay_s
    dt = float(np.median(np.diff(t)))
    return np.arange(0.0, t[-1] - delay_s + 2 * dt, dt), late


def _on_samples(t, delay_s, late, grid, response):
    """The response at the record's samples (they fall on the grid when the delay is on a sample)."""
    y = np.zeros_like(t)
    y[late] = np.interp(t[late] - delay_s, grid, response)
    return y


def supply_ramp(t, *, start_s: float, ramp_s: float, vdd_v: float) -> np.ndarray:
    """Linear 0 → vdd ramp starting at ``start_s`` lasting ``ramp_s`` (invented conditions)."""
    return vdd_v * np.clip((t - start_s) / ramp_s, 0.0, 1.0)


def adc(v, *, bits: int, full_scale_v: float, noise_v: float, seed: int) -> np.ndarray:
    """What a scope records: Gaussian noise added, then rounded to codes of full_scale / 2**bits."""
    rng = np.random.default_rng(seed)
    q = full_scale_v / 2 ** bits
    return np.round((v + rng.normal(0.0, noise_v, np.shape(v))) / q) * q
