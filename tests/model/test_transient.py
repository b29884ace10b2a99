"""The transient from an unpowered state: analytic cases, the DC point, and startup-circuit physics."""

import numpy as np
import pytest

from labtool.capture import ROLES, Conditions
from labtool.measure import measure_capture
from labtool.model import dc_analysis, simulate
from labtool.model.circuit import GATE
from labtool.model.transient import run_transient


def test_unpowered_start_reaches_the_dc_operating_point(demo):
    # Property: the integrator, started from all nodes at 0 V and no supply, ends at the DC solution.
    cap = simulate(demo, ramp_s=10e-6, temperature_c=27.0, n_samples=2000)
    dc = dc_analysis(demo, 27.0)
    vout = cap.channel("output").values
    assert vout[0] == 0.0
    assert vout[-1] == pytest.approx(dc.vref_v, abs=1e-3)
    # supply current at the end: three mirror branches plus the self-biased amplifier tail
    idd = cap.channel("supply_current").values[-1]
    expected = (2 + demo.mirror_out_ratio + demo.amp_bias_ratio) * dc.i_op_a + demo.amp_bias_min_a
    assert idd == pytest.approx(expected, rel=0.01)


def test_capture_is_an_ordinary_capture(demo):
    cap = simulate(demo, ramp_s=10e-6, temperature_c=27.0, n_samples=500,
                   conditions=Conditions(lot="ZR24A", part="p01"))
    roles = {c.role for c in cap.channels}
    assert {"supply", "output", "supply_current"} <= roles <= set(ROLES)
    assert cap.channel("supply").values[-1] == pytest.approx(1.8)
    assert (cap.conditions.ramp_s, cap.conditions.temperature_c, cap.conditions.vdd_v) == (10e-6, 27.0, 1.8)
    assert cap.conditions.lot == "ZR24A" and cap.conditions.part == "p01"
    assert cap.provenance.importer == "model" and len(cap.provenance.sha256) == 64
    assert "not transistor-level sign-off" in cap.provenance.metadata["model"]
    again = simulate(demo, ramp_s=10e-6, temperature_c=27.0, n_samples=500)
    assert again.capture_id == cap.capture_id  # content hash: same design and condition, same id
    other = simulate(demo.replace(i_start_a=2e-6), ramp_s=10e-6, temperature_c=27.0, n_samples=500)
    assert other.capture_id != cap.capture_id


def test_gate_discharge_by_constant_current(demo):
    # Analytic case: a constant current I discharging a capacitance C takes t = C·ΔV/I
    # (charge conservation, Q = C·V). The pull-down startup drains the mirror gate (c_gate + c_gs)
    # while the amplifier has no bias and the supply is flat.
    d = demo.replace(startup_kind="pulldown", amp_bias="fixed", amp_bias_a=0.0, startup_v_off_v=10.0,
                     startup_vdd_min_v=0.0, i_start_a=1e-6)
    ramp = 0.1e-6
    rec, _ = run_transient(d, ramp_s=ramp, temperature_c=27.0, t_stop_s=4e-6, n_points=4001, record=(GATE,))
    t, vg = rec.t_s, rec.values[0, :, 0]
    after = t > ramp
    cross = lambda level: np.interp(-level, -vg[after], t[after])  # noqa: E731 (vg falls)
    c = d.c_gate_f + d.c_gs_f
    assert cross(0.6) - cross(1.4) == pytest.approx(c * 0.8 / 1e-6, rel=1e-3)


def test_kick_startup_fails_on_slow_ramps(demo):
    # A kick through a capacitor gives I = C·dVDD/dt, tiny on slow ramps (GUIDE §4).
    d = demo.replace(startup_kind="kick_supply")
    fast = measure_capture(simulate(d, ramp_s=1e-6, temperature_c=27.0, n_samples=1500))
    slow = measure_capture(simulate(d, ramp_s=10e-3, temperature_c=27.0, n_samples=1500))
    assert fast.verdict == "started"
    assert slow.verdict == "stuck_at_zero"


def test_no_startup_circuit_stays_stuck_on_a_slow_ramp(demo):
    # Both equilibria satisfy the loop (Razavi ch. 12): without a startup circuit the core stays at zero.
    cap = simulate(demo.replace(startup_kind="none"), ramp_s=100e-6, temperature_c=27.0, n_samples=1500)
    assert measure_capture(cap).verdict == "stuck_at_zero"
    assert cap.channel("supply_current").values[-1] < 1e-7  # supply current at leakage/bias level


def test_supply_profile_brown_out(demo):
    # A brown-out from the simulated bench, with a supply that drops in one instant: the output
    # follows the supply down and starts again (continuous injection re-engages).
    def profile(t):
        if t < 10e-6:
            return 1.8 * t / 10e-6
        if t < 60e-6:
            return 1.8
        if t < 61e-6:
            return 0.0
        return min(1.8, 1.8 * (t - 61e-6) / 10e-6)

    cap = simulate(demo, ramp_s=10e-6, temperature_c=27.0, t_stop_s=150e-6, n_samples=1500,
                   supply_profile=profile)
    t, v = cap.times(), cap.channel("output").values
    vref = dc_analysis(demo, 27.0).vref_v  # the wanted operating point, before and after the dip
    assert v[np.searchsorted(t, 58e-6)] == pytest.approx(vref, abs=0.01)
    assert v[-1] == pytest.approx(vref, abs=0.01)
    assert v[np.searchsorted(t, 64e-6)] < 0.6
