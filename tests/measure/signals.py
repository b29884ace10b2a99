"""Test signals for the measurement tests: reference step responses, supply ramps, ADC quantisation.

The step responses come from scipy.signal.step (reference library) on the transfer functions of
Ogata, Modern Control Engineering, §5-3; ramps, delays, noise and quantisation are ours (stated
beside each test as the conditions, not as reference values).
"""

from __future__ import annotations

import functools

import numpy as np
from scipy import signal


def second_order_step(t, *, zeta: float, wn: float, delay_s: float) -> np.ndarray:
    """Unit step response of ωn²/(s² + 2ζωn·s + ωn²), delayed, by scipy.signal.step on the samples."""
    return _on_samples(t, delay_s, ("second", zeta, wn))


def first_order_step(t, *, tau_s: float, delay_s: float) -> np.ndarray:
    """Unit step response of 1/(τs + 1), delayed, by scipy.signal.lsim with a unit step input."""
    return _on_samples(t, delay_s, ("first", tau_s))


@functools.lru_cache(maxsize=64)
def _response(system: tuple, dt: float, n: int) -> tuple[np.ndarray, np.ndarray]:
    """The response on a uniform grid that starts at the step (scipy simulates from T[0]); cached,
    because scipy's simulation steps through the grid one sample at a time."""
    grid = np.arange(n) * dt
    if system[0] == "second":
        _, zeta, wn = system
        _, response = signal.step(([wn * wn], [1.0, 2 * zeta * wn, wn * wn]), T=grid)
    else:
        _, response, _ = signal.lsim(([1.0], [system[1], 1.0]), U=np.ones(n), T=grid)
    return grid, response


def _on_samples(t, delay_s, system):
    """The response at the record's samples (they fall on the grid when the delay is on a sample)."""
    late = t > delay_s
    dt = float(np.median(np.diff(t)))
    grid, response = _response(system, dt, int(np.ceil((t[-1] - delay_s) / dt)) + 2)
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
