"""Every verdict class from a synthetic capture built to produce it (invented data: ZR-4410-like
records, 1.8 V supply, 1.2 V reference, stating the classification rules of issue #3)."""

import numpy as np
import pytest

from labtool.errors import MeasurementError
from labtool.measure import VERDICTS, Limits, measure_arrays, measure_capture
from tests.builders import make_capture
from tests.measure.signals import adc, first_order_step, second_order_step, supply_ramp

DT = 20e-9
T = np.arange(0.0, 400e-6, DT)  # 20,000 samples
SUPPLY = supply_ramp(T, start_s=10e-6, ramp_s=50e-6, vdd_v=1.8)


def _scope(v, seed):
    return adc(v, bits=12, full_scale_v=4.0, noise_v=1e-3, seed=seed)


def _measure(output, supply=SUPPLY, **limits):
    return measure_capture(make_capture(_scope(supply, 1), _scope(output, 2), DT), Limits(**limits))


def test_verdict_order_is_the_issue_order():
    assert VERDICTS == ("no_supply", "stuck_at_zero", "recollapse", "incomplete", "wrong_level", "slow_start",
                        "ringing", "started")


def test_no_supply_when_the_supply_never_reaches_supply_min():
    weak = supply_ramp(T, start_s=10e-6, ramp_s=50e-6, vdd_v=1.0)
    r = _measure(np.zeros_like(T), supply=weak, supply_min_v=1.6)
    assert r.verdict == "no_supply"
    assert r.evidence["supply_min_v"] == 1.6 and r.evidence["supply_peak_v"] == pytest.approx(1.0, abs=0.01)


@pytest.mark.parametrize("expect", [None, 1.2])
def test_stuck_at_zero_with_and_without_expect(expect):
    leak = 0.005 * SUPPLY / 1.8  # a few mV following the supply: still the zero state
    r = _measure(leak, expect_v=expect)
    assert r.verdict == "stuck_at_zero"
    assert r.delay_s is None and r.rise_s is None and r.settle_s is None and r.ring_hz is None
    assert r.evidence["output_peak_v"] < r.evidence["zero_threshold_v"]


def test_stuck_at_zero_with_expect_even_if_it_moves_a_little():
    r = _measure(0.08 * first_order_step(T, tau_s=5e-6, delay_s=80e-6), expect_v=1.2)  # 80 mV < 10 % of 1.2 V
    assert r.verdict == "stuck_at_zero"
    assert r.evidence["zero_threshold_v"] == pytest.approx(0.12, abs=0.002)


def test_recollapse_when_it_reaches_its_level_then_falls_back():
    up = first_order_step(T, tau_s=3e-6, delay_s=80e-6)
    down = first_order_step(T, tau_s=3e-6, delay_s=200e-6)
    r = _measure(1.2 * (up - down))
    assert r.verdict == "recollapse"
    assert r.evidence["output_peak_v"] == pytest.approx(1.2, abs=0.01)
    assert r.vout_final_v == pytest.approx(0.0, abs=0.005)
    assert r.delay_s is not None  # the failed start still has a delay (to its plateau)


def test_incomplete_when_the_record_ends_before_settling():
    r = _measure(1.2 * first_order_step(T, tau_s=150e-6, delay_s=80e-6))
    assert r.verdict == "incomplete"
    assert r.evidence["settle_at_s"] is None or r.evidence["settle_at_s"] > r.evidence["tail_start_s"]


def test_wrong_level_outside_the_tolerance_of_expect():
    r = _measure(1.0 * first_order_step(T, tau_s=5e-6, delay_s=80e-6), expect_v=1.2, level_tol_pct=5)
    assert r.verdict == "wrong_level"
    assert r.evidence["error_pct"] == pytest.approx(-16.67, abs=0.2)
    assert _measure(1.19 * first_order_step(T, tau_s=5e-6, delay_s=80e-6), expect_v=1.2).verdict == "started"


def test_slow_start_above_max_delay():
    r = _measure(1.2 * first_order_step(T, tau_s=5e-6, delay_s=200e-6), max_delay_s=100e-6)
    assert r.verdict == "slow_start"
    # delay = (200 µs + τ·ln 10) − supply 90 % instant (10 µs + 0.9·50 µs)
    assert r.evidence["delay_s"] == pytest.approx(200e-6 + 5e-6 * np.log(10) - 55e-6, rel=0.01)


def test_ringing_above_max_overshoot():
    r = _measure(1.2 * second_order_step(T, zeta=0.3, wn=2 * np.pi * 100e3, delay_s=80e-6))
    assert r.verdict == "ringing"
    # Ogata §5-3 (formula from memory): %OS = 100·exp(−ζπ/√(1−ζ²)) = 37.23 % for ζ = 0.3
    assert r.evidence["overshoot_pct"] == pytest.approx(37.23, abs=0.3)
    assert r.evidence["max_overshoot_pct"] == 10.0
    assert _measure(1.2 * second_order_step(T, zeta=0.3, wn=2 * np.pi * 100e3, delay_s=80e-6),
                    max_overshoot_pct=50).verdict == "started"


def test_started():
    r = _measure(1.2 * first_order_step(T, tau_s=5e-6, delay_s=80e-6), expect_v=1.2, max_delay_s=100e-6,
                 supply_min_v=1.6)
    assert r.verdict == "started"
    assert set(r.evidence) == {"delay_s", "settle_s", "overshoot_pct", "vout_final_v"}


def test_reference_before_supply_is_valid_gives_a_negative_delay():
    # common on slow ramps: the reference is up before the supply reaches 90 %
    slow = supply_ramp(T, start_s=10e-6, ramp_s=300e-6, vdd_v=1.8)
    r = _measure(1.2 * first_order_step(T, tau_s=5e-6, delay_s=80e-6), supply=slow)
    assert r.delay_s < 0 and r.verdict == "started"
    # supply at the output's 10 % instant (80 µs + τ·ln(10/9)) on the 6 kV/s ramp
    assert r.supply_at_start_v == pytest.approx(1.8 * (80e-6 + 5e-6 * np.log(10 / 9) - 10e-6) / 300e-6, abs=0.01)
    # and at its 90 % instant, 80 µs + τ·ln 10 (first-order step, Ogata §5-2, from memory): the supply
    # at which the output became valid, the useful figure when the delay is set by a slow ramp
    t90 = 80e-6 + 5e-6 * np.log(10)
    assert r.vsupply_at_valid_v == pytest.approx(1.8 * (t90 - 10e-6) / 300e-6, abs=0.01)
    assert r.delay_s == pytest.approx(t90 - (10e-6 + 0.9 * 300e-6), abs=0.2e-6)


def test_unusable_records_are_one_clear_error():
    with pytest.raises(MeasurementError, match="at least 32"):
        measure_arrays(T[:10], SUPPLY[:10], SUPPLY[:10])
    with pytest.raises(MeasurementError, match="do not increase"):
        measure_arrays(T[::-1], SUPPLY, SUPPLY)
    cap = make_capture(SUPPLY[:10], SUPPLY[:10], DT, source="runs/short.csv")
    with pytest.raises(MeasurementError, match=r"^runs/short.csv: only 10 usable samples"):
        measure_capture(cap)


def test_not_a_number_samples_are_left_out():
    out = _scope(1.2 * first_order_step(T, tau_s=5e-6, delay_s=80e-6), 2)
    clean = measure_arrays(T, _scope(SUPPLY, 1), out)
    out[5000:5010] = np.nan  # SCPI 9.91E37 becomes NaN on import
    holed = measure_arrays(T, _scope(SUPPLY, 1), out)
    assert holed.verdict == clean.verdict == "started"
    assert holed.delay_s == pytest.approx(clean.delay_s, rel=1e-6)


def test_a_start_at_the_very_end_of_the_record_is_incomplete_not_a_recollapse():
    late = 1.2 * first_order_step(T, tau_s=2e-6, delay_s=T[-1] - 5e-6)  # rises in the last 5 µs
    r = _measure(late, expect_v=1.2)
    assert r.verdict == "incomplete"


def test_an_ideal_two_level_output_is_not_taken_for_codes():
    # An exact 0 → 1.2 V step has two values only; its "code step" would be the whole amplitude,
    # which would make every start look like noise (stuck at zero).
    ideal = np.where(T > 80e-6, 1.2, 0.0)
    r = measure_arrays(T, SUPPLY, ideal)
    assert r.verdict == "started" and r.vout_final_v == 1.2
    assert r.rise_s == pytest.approx(0.8 * DT, rel=1e-6)  # one sample: 10 % → 90 % by interpolation


def test_no_supply_when_the_supply_never_reaches_a_reference_given_in_volts():
    r = _measure(1.2 * first_order_step(T, tau_s=5e-6, delay_s=80e-6), supply_ref="1.9")
    assert r.verdict == "no_supply" and r.t_supply_s is None and r.delay_s is None
    assert r.evidence["supply_ref_v"] == 1.9


def test_settled_supply_current_is_reported_when_recorded():
    # Invented capture: 8 µA settled supply current after the start; without the channel it is null.
    t = np.arange(4000) * 1e-7
    vdd = 1.8 * np.clip(t / 50e-6, 0, 1)
    vref = 1.2 * (1 - np.exp(-np.clip(t - 80e-6, 0, None) / 10e-6))
    idd = 8e-6 * (vref / 1.2) + np.random.default_rng(0).normal(0, 5e-9, t.size)
    with_current = measure_capture(make_capture(vdd, vref, 1e-7, extra={"idd": idd}))
    assert with_current.isupply_final_a == pytest.approx(8e-6, rel=0.01)
    assert measure_capture(make_capture(vdd, vref, 1e-7)).isupply_final_a is None
