"""Device laws against outside references."""

import math

import numpy as np
import pytest
from scipy import constants
from scipy.optimize import brentq

from labtool.model import physics


def test_thermal_voltage_at_25_and_27_c():
    # kT/q with k, q exact in the 2019 SI via scipy.constants (CODATA): 25.693 mV at 25 °C,
    # 25.865 mV at 27 °C (values in ../shared/GUIDE.md §3, computed with SciPy).
    assert physics.thermal_voltage(25.0) == pytest.approx(25.693e-3, abs=0.0005e-3)
    assert physics.thermal_voltage(27.0) == pytest.approx(25.865e-3, abs=0.0005e-3)
    assert physics.thermal_voltage(0.0) == pytest.approx(constants.k * 273.15 / constants.e, rel=1e-15)


def test_diode_incremental_resistance_vt_over_i():
    # Diode incremental resistance VT/I, about 25 kΩ at 1 µA (common practice, no source).
    ut = physics.thermal_voltage(25.0)
    is_a = 1e-17
    v = physics.node_voltage(1e-6, is_a, 0.0, ut)
    r = physics.node_resistance(v, is_a, 0.0, ut)
    assert r == pytest.approx(ut / 1e-6, rel=1e-9)
    assert 24e3 < r < 27e3


def test_node_voltage_against_brentq():
    # The leaking diode node inverted by scipy.optimize.brentq (reference root finder).
    ut, is_a, il = physics.thermal_voltage(85.0), 3e-16, 2e-11
    for i in (1e-13, 5e-11, 1e-8, 7e-5):
        ref = brentq(lambda v: is_a * math.expm1(v / ut) + il * math.tanh(v / ut) - i, -0.5, 2.0, xtol=1e-15)
        assert physics.node_voltage(i, is_a, il, ut) == pytest.approx(ref, abs=1e-12)


def test_saturation_current_temperature_law():
    # SPICE IS(T) law (Gray/Hurst/Lewis/Meyer §1.3; section from memory): identity at tnom; at 2·T0 the XTI and Eg factors.
    assert physics.saturation_current(1e-17, 27.0, 27.0, 3.0, 1.12) == pytest.approx(1e-17, rel=1e-15)
    t0 = 300.0
    t1 = 2 * t0
    expected = 1e-17 * 2.0 ** 3 * math.exp(1.12 * constants.e / constants.k * (1 / t0 - 1 / t1))
    got = physics.saturation_current(1e-17, t1 - 273.15, t0 - 273.15, 3.0, 1.12)
    assert got == pytest.approx(expected, rel=1e-12)


def test_ekv_limits():
    # EKV interpolation (Enz, Krummenacher, Vittoz 1995; limits from memory): in weak inversion the current rises by e per
    # n·UT of gate drive; in strong inversion it tends to I_spec·((VGS − VT0)/(2·n·UT))² in saturation.
    ut, n, vt0, ispec = physics.thermal_voltage(27.0), 1.35, 0.45, 0.5e-6
    weak = physics.mos_current(np.array([-0.2, -0.2 + n * ut]), 1.0, vt0, n, ispec, ut)
    assert weak[1] / weak[0] == pytest.approx(math.e, rel=1e-3)
    vsg = 1.8
    strong = physics.mos_current(vsg, 1.8, vt0, n, ispec, ut)
    assert strong / (ispec * ((vsg - vt0) / (2 * n * ut)) ** 2) == pytest.approx(1.0, rel=1e-2)
    # no current without source-drain voltage, and the inverse in saturation
    assert physics.mos_current(0.9, 0.0, vt0, n, ispec, ut) == pytest.approx(0.0, abs=1e-20)
    i = physics.mos_current(0.62, 1.0, vt0, n, ispec, ut)
    assert physics.mos_vsg_for_current(i, vt0, n, ispec, ut) == pytest.approx(0.62, abs=1e-9)
