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
    y = np.zeros_like(t)
    late = t > delay_s
    _, y[late] = signal.step(([wn * wn], [1.0, 2 * zeta * wn, wn * wn]), T=t[late] - delay_s)
    return y


def first_order_step(t, *, tau_s: float, delay_s: float) -> np.ndarray:
    """Unit step response of 1/(τs + 1), delayed, by scipy.signal.lsim with a unit step input."""
    y = np.zeros_like(t)
    late = t > delay_s
    s = t[late] - delay_s
    _, y[late], _ = signal.lsim(([1.0], [tau_s, 1.0]), U=np.ones_like(s), T=s)
    return y


def supply_ramp(t, *, start_s: float, ramp_s: float, vdd_v: float) -> np.ndarray:
    """Linear 0 → vdd ramp starting at ``start_s`` lasting ``ramp_s`` (invented conditions)."""
    return vdd_v * np.clip((t - start_s) / ramp_s, 0.0, 1.0)


def adc(v, *, bits: int, full_scale_v: float, noise_v: float, seed: int) -> np.ndarray:
    """What a scope records: Gaussian noise added, then rounded to codes of full_scale / 2**bits."""
    rng = np.random.default_rng(seed)
    q = full_scale_v / 2 ** bits
    return np.round((v + rng.normal(0.0, noise_v, np.shape(v))) / q) * q
