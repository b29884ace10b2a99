"""Startup metrics and the step-model fit against closed-form step responses.

Reference: Ogata, Modern Control Engineering, §5-3 (formulas from memory; second-order step: ωd = ωn√(1−ζ²),
%OS = 100·exp(−ζπ/√(1−ζ²)), tp = π/ωd; first-order step: 1 − exp(−t/τ)). The waveforms themselves
are produced by scipy.signal.step / scipy.signal.lsim (reference library). Values marked "GUIDE §3"
were computed with SciPy and vetted in /work/shared/GUIDE.md §3. Sample rates, ramps, quantisation
and noise are our own bench-like conditions: 8-bit and 12-bit are the usual scope resolutions
(common practice, no source).
"""

import math

import numpy as np
import pytest

from labtool.measure import Limits, measure_arrays
from tests.measure.signals import adc, first_order_step, second_order_step, supply_ramp

T_UNIT = 10e-6  # one normalised time unit of the textbook responses is 10 µs here
DT = 5e-9  # 200 MS/s
DELAY = 40e-6  # output step starts 40 µs into the record
RAMP = 30e-6  # supply 0 → 1.8 V in 30 µs, so it crosses 90 % at 27 µs
VREF, VDD = 1.2, 1.8

# (bits, noise): an 8-bit scope on a 2 V range with 2 mV rms noise; a 12-bit mode with 0.5 mV.
SCOPES = [(8, 2e-3), (12, 0.5e-3)]


def _record(output_unit_step, *, bits, noise, seed=1):
    t = np.arange(0.0, 200e-6, DT)
    supply = adc(supply_ramp(t, start_s=0.0, ramp_s=RAMP, vdd_v=VDD), bits=bits, full_scale_v=4.0, noise_v=noise,
                 seed=seed)
    output = adc(VREF * output_unit_step(t), bits=bits, full_scale_v=2.0, noise_v=noise, seed=seed + 1)
    return t, supply, output


def _code_pct(bits):
    """One output code in % of the 1.2 V step (2 V range)."""
    return 100.0 * 2.0 / 2 ** bits / VREF


@pytest.mark.parametrize("bits,noise", SCOPES)
def test_second_order_zeta_06_overshoot_rise_ring_damping(bits, noise):
    zeta, wn = 0.6, 5.0 / T_UNIT  # GUIDE §3: ζ = 0.6, ωn = 5 → %OS 9.47802, 10–90 % rise 0.37081
    t, s, o = _record(lambda t: second_order_step(t, zeta=zeta, wn=wn, delay_s=DELAY), bits=bits, noise=noise)
    r = measure_arrays(t, s, o, Limits(band_pct=2))
    # Overshoot: the final level and the peak are each good to about a quarter code after averaging,
    # so ±0.6 code (in % of the step) covers both.
    assert r.overshoot_pct == pytest.approx(9.47802, abs=0.6 * _code_pct(bits) + 0.05)
    # Rise: each crossing instant is off by (quantisation + noise)/slope, a few ns on a 3.7 µs rise: 1 %.
    assert r.rise_s == pytest.approx(0.37081 * T_UNIT, rel=0.01)
    # Damped frequency ωd = ωn√(1−ζ²) (Ogata §5-3) and ζ from the fit on ~2000 averaged points: 0.5 %.
    assert r.ring_hz == pytest.approx(wn * math.sqrt(1 - zeta ** 2) / (2 * math.pi), rel=0.005)
    assert r.damping == pytest.approx(zeta, abs=0.005)
    assert r.fit.order == 2
    # Supply: a linear ramp crosses 90 % at 0.9·RAMP; its 10–90 % slope is VDD/RAMP. The 8-bit supply
    # code is 15.6 mV on 1.8 V, so the level (and thus the slope and the instant) is good to ~1 %.
    assert r.t_supply_s == pytest.approx(0.9 * RAMP, rel=0.01)
    assert r.ramp_v_per_s == pytest.approx(VDD / RAMP, rel=0.01)
    assert r.vout_final_v == pytest.approx(VREF, abs=0.5 * 2.0 / 2 ** bits)
    assert r.vsupply_final_v == pytest.approx(VDD, abs=0.5 * 4.0 / 2 ** bits)
    assert r.verdict == "started"


@pytest.mark.parametrize("bits,noise", SCOPES)
def test_second_order_delay_and_two_percent_settling(bits, noise):
    zeta, wn = 0.6, 5.0 / T_UNIT
    t, s, o = _record(lambda t: second_order_step(t, zeta=zeta, wn=wn, delay_s=DELAY), bits=bits, noise=noise)
    r = measure_arrays(t, s, o, Limits(band_pct=2))
    # 90 % instant of the reference response, from scipy.signal.step on a fine grid (reference library).
    fine = np.linspace(0.0, 1.0, 10001)
    unit = second_order_step(fine, zeta=zeta, wn=5.0, delay_s=-1e-12)
    k = int(np.argmax(unit >= 0.9))
    t90 = np.interp(0.9, unit[k - 1:k + 1], fine[k - 1:k + 1]) * T_UNIT
    t_supply = 0.9 * RAMP
    # delay = output 90 % instant − supply 90 % instant; both are good to ~1 % of their scale (above).
    assert r.delay_s == pytest.approx(DELAY + t90 - t_supply, abs=0.01 * RAMP)
    # GUIDE §3: exact 2 % settling time 1.18860 (from the step). Where the response leaves the 2 % band
    # its slope is shallow; a code of quantisation moves the instant by ~1 % of the settling time.
    assert r.settle_s == pytest.approx(DELAY + 1.18860 * T_UNIT - r.t_supply_s, rel=0.015)


def test_second_order_zeta_05_overshoot_and_settling_12_bit():
    zeta, wn = 0.5, 1.0 / T_UNIT  # GUIDE §3: ζ = 0.5, ωn = 1 → %OS 16.30335, exact 2 % settling 8.07635
    t = np.arange(0.0, 400e-6, 10e-9)
    delay = 20e-6
    s = adc(supply_ramp(t, start_s=0.0, ramp_s=RAMP, vdd_v=VDD), bits=12, full_scale_v=4.0, noise_v=0.5e-3, seed=5)
    o = adc(VREF * second_order_step(t, zeta=zeta, wn=wn, delay_s=delay), bits=12, full_scale_v=2.0,
            noise_v=0.5e-3, seed=6)
    r = measure_arrays(t, s, o, Limits(band_pct=2, max_overshoot_pct=20))
    assert r.overshoot_pct == pytest.approx(16.30335, abs=0.1)  # ±0.1 pct point: 12-bit code is 0.04 %
    assert r.settle_s == pytest.approx(delay + 8.07635 * T_UNIT - r.t_supply_s, rel=0.01)
    # Ogata §5-3: tp = π/ωd; the fit's ωd recovers it to 0.5 %.
    assert 1 / (2 * r.ring_hz) == pytest.approx(math.pi / (wn * math.sqrt(1 - zeta ** 2)), rel=0.005)
    assert r.damping == pytest.approx(zeta, abs=0.005)
    assert r.verdict == "started"


@pytest.mark.parametrize("bits,noise", SCOPES)
def test_first_order_rise_settling_no_ringing(bits, noise):
    tau = 5e-6
    t, s, o = _record(lambda t: first_order_step(t, tau_s=tau, delay_s=DELAY), bits=bits, noise=noise)
    r = measure_arrays(t, s, o)
    # Closed form: 10–90 % rise of 1 − e^(−t/τ) is τ·ln 9; 90 % at τ·ln 10; 1 % band entered at τ·ln 100.
    assert r.rise_s == pytest.approx(tau * math.log(9), rel=0.01)
    assert r.delay_s == pytest.approx(DELAY + tau * math.log(10) - 0.9 * RAMP, abs=0.01 * RAMP)
    # The 1 % band edge (12 mV) is crossed with slope 1.2 V·0.01/τ = 2.4 kV/s; an 8-bit code (7.8 mV) moves
    # the instant by up to ~3 µs on 23 µs (13 %); 12-bit codes (0.5 mV) by ~0.2 µs (1 %).
    tol = 0.15 if bits == 8 else 0.02
    assert r.settle_s + r.t_supply_s == pytest.approx(DELAY + tau * math.log(100), rel=tol)
    # No overshoot: what is left is the largest of ~1000 block means of noise and codes, within two codes.
    assert r.overshoot_pct < 2 * _code_pct(bits)
    assert r.ring_hz is None and r.damping is None
    assert r.fit.order == 1
    assert r.fit.params["tau_s"] == pytest.approx(tau, rel=0.01)
    assert r.fit.params["t_d_s"] == pytest.approx(DELAY, abs=0.005 * tau)


def test_non_uniform_time_base_gives_the_same_numbers():
    """Property: dropping a random third of the samples (an explicit, non-uniform time base) changes
    the measured values only within the sampling error."""
    zeta, wn = 0.6, 5.0 / T_UNIT
    t, s, o = _record(lambda t: second_order_step(t, zeta=zeta, wn=wn, delay_s=DELAY), bits=12, noise=0.5e-3)
    keep = np.random.default_rng(9).random(t.size) > 1 / 3
    keep[[0, -1]] = True
    full = measure_arrays(t, s, o)
    sparse = measure_arrays(t[keep], s[keep], o[keep])
    assert sparse.verdict == full.verdict == "started"
    assert sparse.delay_s == pytest.approx(full.delay_s, abs=20 * DT)
    assert sparse.overshoot_pct == pytest.approx(full.overshoot_pct, abs=0.1)
    assert sparse.ring_hz == pytest.approx(full.ring_hz, rel=0.005)


def test_reference_library_agrees_with_the_closed_forms():
    """scipy.signal.step / lsim (the generators above) against Ogata §5-3's formulas, and the fit
    models in labtool against both: all three must describe the same responses."""
    from labtool.measure.fit import first_order_step as fit_first, second_order_step as fit_second

    t = np.linspace(0.0, 60e-6, 3001)
    zeta, wn, tau = 0.5, 1.0 / T_UNIT, 5e-6
    s = np.clip(t - 10e-6, 0.0, None)
    wd = wn * math.sqrt(1 - zeta ** 2)
    ogata2 = 1 - np.exp(-zeta * wn * s) * (np.cos(wd * s) + zeta / math.sqrt(1 - zeta ** 2) * np.sin(wd * s))
    np.testing.assert_allclose(second_order_step(t, zeta=zeta, wn=wn, delay_s=10e-6), ogata2, atol=1e-9)
    np.testing.assert_allclose(first_order_step(t, tau_s=tau, delay_s=10e-6), 1 - np.exp(-s / tau), atol=1e-9)
    np.testing.assert_allclose(fit_second(t, (0.0, 1.0, 10e-6, zeta, wn)), ogata2, atol=1e-12)
    np.testing.assert_allclose(fit_first(t, (0.0, 1.0, 10e-6, tau)), 1 - np.exp(-s / tau), atol=1e-12)


@pytest.mark.parametrize("time_scale,volt_scale", [(1e3, 1.0), (1e-2, 2.5)])
def test_scaling_time_and_volts_scales_the_results(time_scale, volt_scale):
    """Property (dimensional analysis): the same record on a slower time axis and in other volts gives
    proportional instants, inverse frequencies and unchanged percentages and damping."""
    zeta, wn = 0.4, 5.0 / T_UNIT
    t, s, o = _record(lambda t: second_order_step(t, zeta=zeta, wn=wn, delay_s=DELAY), bits=12, noise=0.5e-3)
    base = measure_arrays(t, s, o)
    scaled = measure_arrays(t * time_scale, s * volt_scale, o * volt_scale)
    for name in ("t_supply_s", "delay_s", "rise_s", "settle_s"):
        assert getattr(scaled, name) == pytest.approx(getattr(base, name) * time_scale, rel=1e-6)
    assert scaled.ring_hz == pytest.approx(base.ring_hz / time_scale, rel=1e-5)
    assert scaled.overshoot_pct == pytest.approx(base.overshoot_pct, rel=1e-6)
    assert scaled.damping == pytest.approx(base.damping, rel=1e-5)
    assert scaled.vout_final_v == pytest.approx(base.vout_final_v * volt_scale, rel=1e-9)
    assert scaled.ramp_v_per_s == pytest.approx(base.ramp_v_per_s * volt_scale / time_scale, rel=1e-6)
