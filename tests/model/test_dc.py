"""DC analysis of the core against the textbook equations and an independent root finder."""

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from labtool.model import dc_analysis
from labtool.model.dc import loop_slope


def _textbook_drive(i, ut, is_a, n, r1):
    """V1 − V2 of the ideal core with the full diode law (Razavi ch. 12; Gray/Hurst/Lewis/Meyer §4.4)."""
    return ut * math.log1p(i / is_a) - ut * math.log1p(i / (n * is_a)) - i * r1


def test_dvbe_and_ptat_current_in_the_high_current_limit(ideal):
    # ΔVBE = VT·ln N and I = VT·ln N / R1 when I ≫ N·IS (Razavi, Design of Analog CMOS ICs, ch. 12).
    d = ideal.replace(is_a=1e-22)
    r = dc_analysis(d, 27.0)
    ut = r.ut_v
    assert r.dvbe_v == pytest.approx(ut * math.log(8.0), rel=1e-6)
    assert r.i_op_a == pytest.approx(ut * math.log(8.0) / d.r1_ohm, rel=1e-6)
    assert r.i_ptat_ideal_a == pytest.approx(ut * math.log(8.0) / d.r1_ohm, rel=1e-12)


@pytest.mark.parametrize("temperature_c", [-40.0, 27.0, 125.0])
def test_operating_point_against_brentq(ideal, temperature_c):
    # The exact wanted point of the full diode law, found independently by scipy.optimize.brentq.
    p = ideal.resolved(temperature_c)
    r = dc_analysis(ideal, temperature_c)
    ref = brentq(_textbook_drive, 1e-3 * p["ut_v"] / p["r1_ohm"], 1e-3,
                 args=(p["ut_v"], p["is_a"], p["area_ratio"], p["r1_ohm"]), xtol=1e-20, rtol=1e-14)
    assert r.i_op_a == pytest.approx(ref, rel=1e-8)
    # VREF = VBE + (R2/R1)·ΔVBE (Razavi ch. 12), with the output branch mirroring I_op into R2 and Q3
    vbe3 = p["ut_v"] * math.log1p(ref / p["is_a"])
    assert r.vref_v == pytest.approx(vbe3 + ref * p["r2_ohm"], rel=1e-8)
    assert 1.15 < r.vref_v < 1.25  # VREF ≈ 1.2–1.25 V near the zero-TC point (Razavi ch. 12)


def test_switch_over_current_against_its_closed_form(ideal):
    # VT/(IS + I) − VT/(N·IS + I) = R1 is the quadratic I² + (N+1)·IS·I + N·IS² − VT·(N−1)·IS/R1 = 0.
    for temperature_c in (-40.0, 27.0, 125.0):
        p = ideal.resolved(temperature_c)
        ut, is_a, n, r1 = p["ut_v"], p["is_a"], p["area_ratio"], p["r1_ohm"]
        b, c = (n + 1) * is_a, n * is_a ** 2 - ut * (n - 1) * is_a / r1
        closed = (-b + math.sqrt(b * b - 4 * c)) / 2
        assert dc_analysis(ideal, temperature_c).i_switch_a == pytest.approx(closed, rel=1e-7)


def test_feedback_polarity_map(demo):
    # Positive feedback near zero current (VT/I large), negative at the operating point (GUIDE §4).
    r = dc_analysis(demo, 27.0)
    assert [s.polarity for s in r.feedback] == ["positive", "negative"]
    assert r.feedback[0].to_a == pytest.approx(r.i_switch_a, rel=0.1)
    p = demo.resolved(27.0)
    assert loop_slope(p, np.array([r.i_switch_a / 10]))[0] > 0 > loop_slope(p, np.array([r.i_op_a]))[0]


def test_offset_beyond_vt_ln_n_leaves_no_wanted_point(ideal):
    # The wanted point vanishes only if the offset exceeds VT·ln N (GUIDE §4; Razavi ch. 12).
    ut_ln_n = dc_analysis(ideal, 27.0).ut_v * math.log(8.0)
    r = dc_analysis(ideal, 27.0)
    assert r.offset_limit_v == pytest.approx(-ut_ln_n, rel=0.02)
    assert dc_analysis(ideal.replace(amp_offset_v=-1.05 * ut_ln_n), 27.0).i_op_a is None
    assert dc_analysis(ideal.replace(amp_offset_v=-0.9 * ut_ln_n), 27.0).i_op_a is not None
    # an offset of the helpful sign only raises the current (Razavi ch. 12: it adds to ΔVBE)
    assert dc_analysis(ideal.replace(amp_offset_v=0.01), 27.0).i_op_a > r.i_op_a


def test_minimum_startup_current_follows_the_common_mode_limit(demo):
    # Property (stated, invented design): with the core at zero current the injection alone must lift
    # the amplifier's input common mode (V1 + V2)/2 ≈ V1/2 to its limit: I ≈ IS·exp(2·Vcm,min/VT).
    d = demo.replace(amp_vcm_min_v=0.35, amp_vcm_min_tc_v_per_c=0.0, leak_q1_a=0.0, leak_q2_a=0.0)
    p = d.resolved(27.0)
    r = dc_analysis(d, 27.0)
    expected = p["is_a"] * math.expm1(0.7 / p["ut_v"])
    assert r.i_start_min_a == pytest.approx(expected, rel=0.05)
    assert dc_analysis(d.replace(amp_vcm_min_v=0.40), 27.0).i_start_min_a > 5 * r.i_start_min_a
    # an amplifier whose inputs never conduct cannot be started by injection
    assert dc_analysis(d.replace(amp_vcm_min_v=1.5), 27.0).i_start_min_a is None
