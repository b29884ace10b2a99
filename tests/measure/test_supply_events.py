"""Enable edges, supply dips (brown-outs) and power-downs on closed-form invented traces.

The traces are invented (1.8 V supply, 1.2 V reference, piecewise-linear supply edges, first-order
output returns). The expected figures are closed forms of those traces: a linear edge crosses a level
at the instant linear interpolation finds exactly (IEEE Std 181-2011 §5.3.4 crossing by linear
interpolation, clause from memory), and a first-order return v(t) = V − (V − v0)·exp(−t/τ) enters the
band V ± b·V at t = τ·ln(|V − v0| / (b·V)) (solve the exponential; for v0 = 0: τ·ln(1/b)).
"""

import math

import numpy as np
import pytest

from labtool.measure import Limits, measure_arrays, measure_rows
from tests.measure.signals import adc

DT = 10e-9
T = np.arange(0.0, 400e-6, DT)  # 40,000 samples
VDD, VREF, TAU = 1.8, 1.2, 2e-6


def trapezoid_dip(t, *, start, fall, flat, rise, depth, level=VDD):
    """level, then down to level − depth in ``fall``, ``flat`` at the bottom, back up in ``rise``."""
    knots_t = [start, start + fall, start + fall + flat, start + fall + flat + rise]
    return np.interp(t, knots_t, [level, level - depth, level - depth, level])


def return_instant(*, start, fall, flat, rise, depth, valid=0.9 * VDD):
    """Where the supply's linear rising edge crosses the valid level (90 % of 1.8 V)."""
    return start + fall + flat + rise * (valid - (VDD - depth)) / depth


def first_order_return(t, t0, v0, *, tau=TAU, final=VREF):
    """final − (final − v0)·exp(−(t − t0)/τ) from t0 on."""
    return final - (final - v0) * np.exp(-np.clip(t - t0, 0.0, None) / tau)


DIP = dict(start=50e-6, fall=1e-6, flat=20e-6, rise=2e-6, depth=0.9)


def test_dip_depth_duration_minimum_and_the_recovery_of_a_collapsed_output():
    supply = trapezoid_dip(T, **DIP)
    t_ret = return_instant(**DIP)
    # the output collapses to 0 V while the supply is down and comes back first-order from 0 V
    output = np.where(T < DIP["start"], VREF, np.where(T < t_ret, 0.0, first_order_return(T, t_ret, 0.0)))
    (row,) = measure_rows(T, supply, output, Limits(band_pct=1))
    assert row.capture_kind == "dip" and row.dip_index == 0 and row.verdict == "recovered"
    assert row.dip_depth_v == pytest.approx(0.9, abs=1e-9)
    assert row.dip_min_v == pytest.approx(0.9, abs=1e-9)
    # pulse duration at the mesial level (1.8 − 0.45 V): flat + fall/2 + rise/2 on linear edges
    assert row.dip_duration_s == pytest.approx(20e-6 + 0.5e-6 + 1e-6, abs=1e-12)
    assert row.t_dip_s == pytest.approx(50e-6 + 0.5e-6, abs=1e-12)
    assert row.t_supply_s == pytest.approx(t_ret, abs=1e-12) and row.delay_ref == "supply"
    assert row.vout_min_during_dip_v == 0.0
    # first-order return from 0 V into ±1 %: τ·ln(1/0.01); linear interpolation between 10 ns samples
    # of the exponential is off by less than dt²/(8τ)·ln-slope ≈ 1e-11 s
    assert row.recovery_s == pytest.approx(TAU * math.log(1 / 0.01), rel=1e-4)
    assert row.delay_s is None and row.settle_s is None  # the startup figures do not apply to a dip row
    assert row.to_json_dict()["dip_index"] == 0


def test_recovery_of_an_output_that_only_sagged_and_its_minimum_during_the_dip():
    supply = trapezoid_dip(T, **DIP)
    t_ret = return_instant(**DIP)
    sag = np.clip(supply - 0.5, 0.0, VREF)  # the output follows the supply 0.5 V below it while it is low
    v0 = 0.9 * VDD - 0.5  # 1.12 V at the return
    output = np.where(T < t_ret, sag, first_order_return(T, t_ret, v0))
    (row,) = measure_rows(T, supply, output, Limits(band_pct=1))
    assert row.vout_min_during_dip_v == pytest.approx(VDD - 0.9 - 0.5, abs=1e-9)
    assert row.recovery_s == pytest.approx(TAU * math.log((VREF - v0) / (0.01 * VREF)), rel=1e-4)
    assert row.verdict == "recovered"


def test_no_recovery_when_the_output_stays_at_zero_after_the_supply_is_back():
    supply = trapezoid_dip(T, **DIP)
    output = np.where(T < DIP["start"] + 1e-6, VREF, 0.0)
    (row,) = measure_rows(T, supply, output)
    assert row.verdict == "no_recovery" and row.recovery_s is None
    assert row.vout_min_during_dip_v == 0.0 and row.vout_final_v == 0.0
    assert row.dip_depth_v == pytest.approx(0.9, abs=1e-9)


def test_several_dips_give_one_row_each_in_time_order():
    dips = [dict(start=40e-6, fall=1e-6, flat=10e-6, rise=1e-6, depth=0.3),
            dict(start=140e-6, fall=0.5e-6, flat=30e-6, rise=3e-6, depth=1.0),
            dict(start=260e-6, fall=2e-6, flat=5e-6, rise=2e-6, depth=0.6)]
    supply = np.minimum.reduce([trapezoid_dip(T, **d) for d in dips])
    returns = [return_instant(**d) for d in dips]
    output = np.full_like(T, VREF)
    for d, t_ret in zip(dips[:2], returns[:2]):  # the first two: down to 0 V and back first-order
        down = (T >= d["start"] + d["fall"] / 2) & (T < t_ret)  # down once the supply is half-way down
        output[down] = 0.0
        after = (T >= t_ret) & (T < t_ret + 40e-6)
        output[after] = first_order_return(T[after], t_ret, 0.0)
    output[T >= dips[2]["start"] + dips[2]["fall"] / 2] = 0.0  # the third: down for good
    rows = measure_rows(T, supply, output)
    assert [r.dip_index for r in rows] == [0, 1, 2]
    assert [r.verdict for r in rows] == ["recovered", "recovered", "no_recovery"]
    for r, d in zip(rows, dips):
        assert r.dip_depth_v == pytest.approx(d["depth"], abs=1e-9)
        assert r.dip_min_v == pytest.approx(VDD - d["depth"], abs=1e-9)
        assert r.dip_duration_s == pytest.approx(d["flat"] + (d["fall"] + d["rise"]) / 2, abs=1e-12)
    for r in rows[:2]:
        assert r.recovery_s == pytest.approx(TAU * math.log(100), rel=1e-4)
    # measure_arrays gives the first row
    assert measure_arrays(T, supply, output).dip_index == 0


def test_a_shallow_dip_above_the_valid_level_returns_at_its_mesial_crossing():
    shallow = dict(start=50e-6, fall=1e-6, flat=10e-6, rise=1e-6, depth=0.1)  # 1.7 V: still valid (> 1.62 V)
    (row,) = measure_rows(T, trapezoid_dip(T, **shallow), np.full_like(T, VREF))
    assert row.dip_depth_v == pytest.approx(0.1, abs=1e-9)
    assert row.t_supply_s == pytest.approx(50e-6 + 1e-6 + 10e-6 + 0.5e-6, abs=1e-12)
    assert row.recovery_s == 0.0 and row.verdict == "recovered"  # the output never left its band
    assert row.vout_min_during_dip_v == VREF


def test_dip_figures_through_a_12_bit_scope_with_noise():
    # 12-bit codes of 4 V / 4096 ≈ 0.98 mV with 1 mV rms noise: the levels are histogram modes, good to
    # a fraction of a code; the crossings of edges of 0.9 V/µs are off by (noise/slope) ≈ 1 ns.
    supply = adc(trapezoid_dip(T, **DIP), bits=12, full_scale_v=4.0, noise_v=1e-3, seed=3)
    t_ret = return_instant(**DIP)
    clean = np.where(T < DIP["start"], VREF, np.where(T < t_ret, 0.0, first_order_return(T, t_ret, 0.0)))
    output = adc(clean, bits=12, full_scale_v=4.0, noise_v=1e-3, seed=4)
    (row,) = measure_rows(T, supply, output, Limits(band_pct=1))
    assert row.dip_depth_v == pytest.approx(0.9, abs=1e-3)
    assert row.dip_duration_s == pytest.approx(21.5e-6, abs=20e-9)
    # the band edge (12 mV from 1.2 V) is crossed with a slope of 12 mV/τ: 1 mV of noise and codes
    # move the last entry by about τ/12 per mV; allow 5 %
    assert row.recovery_s == pytest.approx(TAU * math.log(100), rel=0.05)
    assert row.verdict == "recovered"


def test_enable_edge_delay_rise_and_settling_from_the_enable_crossing():
    enable = np.interp(T, [20e-6, 20.02e-6], [0.0, VDD])  # 20 ns edge: 50 % at 20.01 µs
    t_en, td = 20.01e-6, 3e-6
    output = np.where(T < t_en + td, 0.0, first_order_return(T, t_en + td, 0.0))
    r = measure_arrays(T, np.full_like(T, VDD), output, Limits(band_pct=1), enable_v=enable)
    assert r.capture_kind == "enable" and r.delay_ref == "enable" and r.verdict == "started"
    assert r.t_enable_s == pytest.approx(t_en, abs=1e-13) and r.t_supply_s == r.t_enable_s
    # first order: 90 % at td + τ·ln 10, 10–90 % in τ·ln 9, ±1 % at td + τ·ln 100
    assert r.delay_s == pytest.approx(td + TAU * math.log(10), rel=1e-4)
    assert r.rise_s == pytest.approx(TAU * math.log(9), rel=1e-4)
    assert r.settle_s == pytest.approx(td + TAU * math.log(100), rel=1e-4)
    assert r.dip_index is None and r.recovery_s is None
    stuck = measure_arrays(T, np.full_like(T, VDD), np.zeros_like(T), enable_v=enable)
    assert stuck.verdict == "stuck_at_zero" and stuck.delay_ref == "enable"


def test_power_down_dropout_supply_level_on_a_linear_falling_ramp():
    supply = np.interp(T, [50e-6, 150e-6], [VDD, 0.0])
    output = np.clip(supply - 0.3, 0.0, VREF)  # drops out 0.3 V below the supply
    r = measure_arrays(T, supply, output)
    # the output's 50 % level (0.6 V) is passed when the supply is at 0.9 V
    assert r.capture_kind == "power_down" and r.verdict == "power_down"
    assert r.vsupply_dropout_v == pytest.approx(0.9, abs=1e-9)
    assert r.delay_s is None and r.dip_index is None


def test_a_ramp_capture_has_the_new_keys_null():
    supply = np.interp(T, [10e-6, 60e-6], [0.0, VDD])
    output = np.where(T < 70e-6, 0.0, first_order_return(T, 70e-6, 0.0))
    d = measure_arrays(T, supply, output).to_json_dict()
    assert d["capture_kind"] == "ramp" and d["delay_ref"] == "supply" and d["verdict"] == "started"
    for key in ("t_enable_s", "dip_index", "t_dip_s", "dip_depth_v", "dip_duration_s", "dip_min_v",
                "vout_min_during_dip_v", "recovery_s", "vsupply_dropout_v"):
        assert d[key] is None


def test_many_outputs_against_one_dipping_supply_as_each_alone():
    # the Monte Carlo entry: one shared supply record, many outputs; equal to measuring each alone
    from labtool.measure import measure_outputs

    supply = trapezoid_dip(T, **DIP)
    t_ret = return_instant(**DIP)
    recovers = np.where(T < DIP["start"], VREF, np.where(T < t_ret, 0.0, first_order_return(T, t_ret, 0.0)))
    stays_down = np.where(T < DIP["start"] + 1e-6, VREF, 0.0)
    results = measure_outputs(T, supply, [recovers, stays_down], fit=False)
    assert [r.verdict for r in results] == ["recovered", "no_recovery"]
    assert results == [measure_arrays(T, supply, o) for o in (recovers, stays_down)]
