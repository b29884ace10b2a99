"""The batched BDF2 transient against scipy.integrate.solve_ivp (BDF, rtol 1e-8) on the same equations.

Reference: ``scipy.integrate.solve_ivp(method="BDF")``, SciPy's variable-order (1–5) BDF of Shampine &
Reichelt (SIAM J. Sci. Comput. 18, 1997), run here at rtol 1e-8 and atol 1e-10 V on the node equations
C·dV/dt = i(V, t) of ``CoreCircuit.currents``, so it is exact to well under a microvolt on the scale
of these tests. The supply term C·dVDD/dt is taken inside each straight piece of the ramp (the
reference integrates 0 → ramp end and ramp end → stop separately), as the BDF2 does by landing on
the corner.

Tolerances. The BDF2 controls its local error per step to tol = atol + rtol·|v| (the design's
rtol 1e-3 and atol 0.2 mV: about 1.7 mV at 1.2 V). For a damped system with such a controller the
global error stays a small multiple of the per-step tolerance (tolerance proportionality; Hairer,
Nørsett & Wanner, Solving ODEs I, §II.4); on the steep edges (0.2 V/µs) a voltage error is mostly a
time shift of a fraction of a step. Hence: the output within 4·tol, every node within 12·tol (the
diode nodes switch on in nanoseconds), the delay within what 4·tol means in time where the output
enters its band (or one output-grid interval). BDF2 is second
order and its steps scale as tol^(1/3), so its error scales as tol^(2/3): 100× tighter tolerances
should shrink it ~21×; at least 5× is asked, since part of the error is the linear interpolation onto
the output grid (steps are capped at 16 grid intervals), which does not shrink with the tolerance.
"""

from functools import lru_cache

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from labtool.measure import measure_arrays
from labtool.model import load_design
from labtool.model.circuit import NODES, OUT
from labtool.model.scenarios import SCENARIOS
from labtool.model.transient import run_transient

from tests.model.conftest import DEMO

N_POINTS = 3001
# (scenario or None for the demo design, ramp_s, temperature_c, t_stop_s, verdict)
CASES = {
    "start": (None, 10e-6, 27.0, 60e-6, "started"),
    "stuck": ("startup_open", 1e-3, -40.0, 3e-3, "stuck_at_zero"),
    "ringing": ("late_strong_pulldown", 10e-6, 125.0, 180e-6, "ringing"),
}


def _design(case, tighter=1.0):
    name, *_ = CASES[case]
    design = load_design(DEMO)
    if name is not None:
        design = SCENARIOS[name].apply(design)
    return design.replace(rtol=design.rtol * tighter, atol_v=design.atol_v * tighter)


def _reference(circ, ramp_s, t_stop_s, grid):
    """solve_ivp on C·dV/dt = i(V, t), piece by piece of the supply, evaluated on ``grid``."""
    caps = circ.caps[0]
    out = np.zeros((grid.size, len(NODES)))
    y0 = np.zeros(len(NODES))  # unpowered: every node at 0 V
    for lo, hi in ((0.0, ramp_s), (ramp_s, t_stop_s)):
        nudge = 1e-3 * (hi - lo)  # dVDD/dt from two instants inside the same straight piece

        def rhs(t, y, lo=lo, nudge=nudge):
            t_other = np.full(1, t - nudge if t - nudge >= lo else t + nudge)
            return (circ.currents(y.T[:, None, :], t_other, np.full(1, t))[:, 0, :] / caps).T

        sol = solve_ivp(rhs, (lo, hi), y0, method="BDF", rtol=1e-8, atol=1e-10, vectorized=True,
                        dense_output=True)
        assert sol.success, sol.message
        inside = (grid >= lo) & (grid <= hi)
        out[inside] = sol.sol(grid[inside]).T
        y0 = sol.y[:, -1]
    return out


@lru_cache(maxsize=None)
def _compare(case, tighter=1.0):
    """(BDF2 recording, reference on the same grid, supply, tol = atol + rtol·max|v|)."""
    _, ramp_s, temperature_c, t_stop_s, _ = CASES[case]
    design = _design(case, tighter)
    rec, circ = run_transient(design, ramp_s=ramp_s, temperature_c=temperature_c, t_stop_s=t_stop_s,
                              n_points=N_POINTS)
    ref = _reference(circ, ramp_s, t_stop_s, rec.t_s)
    tol = design.atol_v + design.rtol * float(np.abs(ref).max())
    return rec, ref, circ.supply(rec.t_s), tol


@pytest.mark.parametrize("case", sorted(CASES))
def test_waveforms_match_solve_ivp(case):
    rec, ref, _, tol = _compare(case)
    err = np.abs(rec.values[0] - ref).max(axis=0)
    assert err[OUT] <= 4 * tol, f"output differs by {err[OUT]:.3g} V (tol {tol:.3g} V)"
    assert np.all(err <= 12 * tol), dict(zip(NODES, err.round(6)))


@pytest.mark.parametrize("case", sorted(CASES))
def test_measurements_of_both_waveforms_agree(case):
    rec, ref, vdd, tol = _compare(case)
    verdict = CASES[case][-1]
    ours = measure_arrays(rec.t_s, vdd, rec.values[0][:, OUT])
    theirs = measure_arrays(rec.t_s, vdd, ref[:, OUT])
    assert ours.verdict == theirs.verdict == verdict
    if verdict != "stuck_at_zero":
        # a voltage error of 4·tol moves the band entry by 4·tol / slope there, or by one grid interval
        slope = abs(np.interp(theirs.delay_s, rec.t_s, np.gradient(ref[:, OUT], rec.t_s)))
        shift = max(rec.t_s[1] - rec.t_s[0], 4 * tol / slope)
        assert ours.delay_s == pytest.approx(theirs.delay_s, abs=shift)
        assert ours.overshoot_pct == pytest.approx(theirs.overshoot_pct, abs=100 * 4 * tol / ours.vout_final_v)


@pytest.mark.parametrize("case", sorted(CASES))
def test_error_shrinks_with_the_tolerance(case):
    loose = np.abs(_compare(case)[0].values[0] - _compare(case)[1]).max(axis=0)
    tight_rec, tight_ref, _, _ = _compare(case, 0.01)
    tight = np.abs(tight_rec.values[0] - tight_ref).max(axis=0)
    assert tight.max() <= loose.max() / 5, (loose.max(), tight.max())
