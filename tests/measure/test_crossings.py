"""Reference-level crossings (IEEE Std 181-2011 §5.3.4: crossing instants by linear interpolation
between the samples either side of the level) and their hysteresis against noise."""

import math

import numpy as np
import pytest

from labtool.measure.crossings import crossings, first_crossing, last_crossing, last_entry, value_at


def test_linear_interpolation_is_exact_on_a_straight_line():
    # A sampled straight line crosses 0.9 V at exactly 0.9/slope (closed form).
    t = np.arange(0, 1e-3, 7e-6)
    v = 1000.0 * t  # 1 V/ms
    assert first_crossing(t, v, 0.9, 0.0) == pytest.approx(0.9e-3, rel=1e-12)
    assert value_at(t, v, 0.45e-3) == pytest.approx(0.45, rel=1e-12)


def test_crossings_of_a_sine_at_the_closed_form_instants():
    # sin(2πft) crosses 0.5 rising at (arcsin(0.5)/(2π) + k)/f and falling at (0.5 − arcsin(0.5)/(2π) + k)/f.
    f = 1e3
    t = np.linspace(0, 3e-3, 30001)
    v = np.sin(2 * np.pi * f * t)
    rising = crossings(t, v, 0.5, 0.05, direction="rising")
    falling = crossings(t, v, 0.5, 0.05, direction="falling")
    a = math.asin(0.5) / (2 * math.pi)
    # Interpolation error of a chord over one 0.1 µs step on a 1 kHz sine: < 1 ns.
    np.testing.assert_allclose(rising, (a + np.arange(3)) / f, atol=1e-9)
    np.testing.assert_allclose(falling, (0.5 - a + np.arange(3)) / f, atol=1e-9)
    assert crossings(t, v, 0.5, 0.05, direction="both").size == 6
    assert first_crossing(t, v, 0.5, 0.05, direction="falling") == pytest.approx((0.5 - a) / f, abs=1e-9)
    assert last_crossing(t, v, 0.5, 0.05) == pytest.approx((a + 2) / f, abs=1e-9)
    assert first_crossing(t, v, 1.5, 0.05) is None  # a level never reached


def _noisy_step_with_spikes(seed=0):
    """A step from 0 to 1 V at 5 ms, 10 mV rms noise, and single-sample spikes of ±0.95 V (invented data)."""
    rng = np.random.default_rng(seed)
    t = np.arange(0, 10e-3, 1e-6)
    v = np.where(t >= 5e-3, 1.0, 0.0) + rng.normal(0, 0.01, t.size)
    spikes = rng.choice(t.size, 40, replace=False)
    v[spikes] += np.where(v[spikes] > 0.5, -0.95, 0.95)
    v[spikes[:10] + 1] = v[spikes[:10]]  # some spikes two samples wide
    return t, v


def test_noise_and_spikes_give_no_false_crossings():
    t, v = _noisy_step_with_spikes()
    found = crossings(t, v, 0.5, 0.06, direction="both")
    assert found.size == 1
    assert found[0] == pytest.approx(5e-3, abs=1e-6)
    # The same record without hysteresis and dwell: spikes and noise cross the level many times,
    # which is what the test would catch if the protection were lost.
    assert crossings(t, v, 0.5, 0.0, direction="both", min_dwell=1).size > 40


def test_noise_at_the_level_gives_one_crossing_on_a_slow_edge():
    # A slow ramp through the level with noise bigger than the ramp's change per sample: without
    # hysteresis it crosses back and forth; with 6σ of hysteresis once, at the true instant ± noise/slope.
    rng = np.random.default_rng(1)
    t = np.arange(0, 1.0, 1e-4)
    v = t + rng.normal(0, 0.005, t.size)
    assert crossings(t, v, 0.5, 0.0, direction="both", min_dwell=1).size > 5
    found = crossings(t, v, 0.5, 0.03, direction="both")
    assert found.size == 1 and found[0] == pytest.approx(0.5, abs=0.005)


def test_last_entry_into_a_band_of_an_exponential():
    # 1 − e^(−t/τ) enters ±1 % of 1 for good at τ·ln 100 (closed form); a spike later does not count.
    tau = 1e-3
    t = np.linspace(0, 20e-3, 200001)
    v = 1 - np.exp(-t / tau)
    v[150000] += 0.5
    assert last_entry(t, v, 1.0, 0.01) == pytest.approx(tau * math.log(100), rel=1e-6)
    assert last_entry(t, v, 1.0, 0.01, min_dwell=1) == pytest.approx(t[150001], rel=1e-4)
    assert last_entry(t, v, 0.5, 0.01) is None  # ends outside the band
