"""Calibration: the search and intervals on objectives with known answers, and recovery of a known
parameter from a lot simulated by the model (invented data, stated as such)."""

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from labtool.errors import UsageError
from labtool.stats import calibrate as cal


def test_profile_drop_is_half_the_chi2_quantile():
    # scipy.stats.chi2.ppf(0.95, 1) = 3.841459 (reference library); half of it bounds a 95 % profile interval.
    assert cal.PROFILE_DROP == pytest.approx(3.841459 / 2, abs=1e-6)


def test_line_search_and_profile_interval_on_a_normal_mean_likelihood():
    # −ln L of the mean of n normal observations with known σ is (n/2σ²)(μ − x̄)² + const, so the
    # 95 % profile interval is x̄ ± 1.959964·σ/√n (z quantile: scipy.stats.norm.ppf(0.975)).
    n, sigma, xbar = 40, 0.3, 0.7  # in ln θ
    obj = cal._Objective(lambda u: -(n / (2 * sigma ** 2)) * (u[0] - xbar) ** 2)
    u, curv = cal._line_search(obj, np.zeros(1), 0, np.zeros(1))
    assert u[0] == pytest.approx(xbar, abs=cal._TOL)
    lo, hi = cal._profile_interval(obj, u, curv)
    half = stats.norm.ppf(0.975) * sigma / math.sqrt(n)
    assert (lo, hi) == pytest.approx((xbar - half, xbar + half), abs=2e-3)
    assert len(obj.cache) < 20


def test_wald_intervals_from_the_hessian_of_a_quadratic():
    # −ln L = ½ (u − m)ᵀ A (u − m): the covariance is A⁻¹ (Fisher information of a Gaussian).
    a = np.array([[50.0, 10.0], [10.0, 20.0]])
    m = np.array([0.2, -0.4])
    obj = cal._Objective(lambda u: -0.5 * (u - m) @ a @ (u - m))
    ends = cal._wald_intervals(obj, m)
    sd = np.sqrt(np.diag(np.linalg.inv(a)))
    for (lo, hi), mi, si in zip(ends, m, sd):
        assert (lo, hi) == pytest.approx((mi - 1.959964 * si, mi + 1.959964 * si), rel=1e-6)


def test_synthetic_likelihood_is_the_normal_log_density_plus_binomial():
    # Reference: scipy.stats.norm.logpdf and scipy.stats.binom's kernel k ln p + (n − k) ln(1 − p).
    data = {(1e-5, 25.0): cal.SetupData(np.array([5e-6, 6e-6, 7e-6]), n_stuck=1, n=4)}
    sim = pd.DataFrame({"ramp_s": 1e-5, "temperature_c": 25.0, "stuck": [False] * 9 + [True],
                        "delay_s": [4e-6, 5e-6, 6e-6, 7e-6, 8e-6, 5.5e-6, 6.5e-6, 6e-6, 6e-6, np.nan]})
    d = sim["delay_s"].dropna()
    p = (1 + 0.5) / (10 + 1)
    expected = stats.norm.logpdf([5e-6, 6e-6, 7e-6], d.mean(), d.std(ddof=1)).sum() + math.log(p) + 3 * math.log(1 - p)
    assert cal.synthetic_log_likelihood(data, sim) == pytest.approx(expected, rel=1e-12)


def test_fit_names_are_checked():
    from labtool.model import Design

    with pytest.raises(UsageError, match="--fit nosuch_a: not a design parameter"):
        cal.parameter_value(Design(), "nosuch_a")
    with pytest.raises(UsageError, match="--fit amp_offset_v: needs a positive number"):
        cal.parameter_value(Design(), "amp_offset_v")


def test_design_file_round_trip(tmp_path):
    from labtool.model import Design, load_design

    d = cal.with_parameters(Design(), {"c_scale": 1.25, "i_start_a": 2.5e-6})
    path = tmp_path / "cal.toml"
    cal.write_design(d, path, header="test")
    back = load_design(path)
    assert back.values() == d.values()
    assert back.c_out_f == pytest.approx(1.25 * Design().c_out_f)


def test_default_prediction_setups_are_unmeasured_corners():
    from labtool.model import Design

    d = Design()  # ramp_times_s (1e-6, 1e-4, 1e-2), temperatures_c (-40, 27, 125)
    assert cal.default_prediction_setups(d, [(1e-6, -40.0), (1e-4, 27.0)]) == [(1e-2, -40.0), (1e-2, 125.0), (1e-6, 125.0)]


@pytest.mark.slow
def test_calibration_recovers_a_capacitance_scale_from_a_simulated_lot():
    # Invented data: a lot of 60 parts simulated by the model with every capacitance 1.6× the design
    # (other parts than the calibration's own Monte Carlo: seed 777 vs 1). The fit must find 1.6
    # within its interval, and the interval must be informative.
    from labtool.model import Design, monte_carlo

    design = Design()
    setups = [(1e-6, 27.0), (1e-4, -40.0)]
    truth = cal.with_parameters(design, {"c_scale": 1.6})
    sim = monte_carlo(truth, conditions=setups, n=60, seed=777).samples
    lot = pd.DataFrame({"lot": "ZR24A", "part": [f"p{i:02d}" for i in sim["sample"]], "ramp_s": sim["ramp_s"],
                        "temperature_c": sim["temperature_c"], "verdict": sim["verdict"], "delay_s": sim["delay_s"]})
    res = cal.calibrate(lot, design, fit=("c_scale",), n=40, seed=1, predict_at=[(1e-2, -40.0)], n_predict=40)
    (p,) = res.parameters
    assert p.interval == "profile likelihood"
    assert p.ci95_low < 1.6 < p.ci95_high
    assert p.estimate == pytest.approx(1.6, rel=0.03)
    assert p.ci95_high / p.ci95_low < 1.1
    assert res.log_likelihood > res.log_likelihood_initial
    assert res.design.c_out_f == pytest.approx(p.estimate * design.c_out_f)
    (pred,) = res.predictions
    assert (pred.ramp_s, pred.temperature_c, pred.n_samples) == (1e-2, -40.0, 40)
    # Field ppm by importance sampling: the design sticks there only when its 3 µA startup current
    # (σ 10 %) falls below the ~0.25 nA escape current, about 10 σ down (the rate is ~1e-23): a number
    # with an interval, far below what 40 plain Monte Carlo parts could bound (their exact upper end
    # with zero stuck is 1 − 0.025^(1/40) ≈ 8.8 %; Clopper & Pearson 1934).
    assert pred.beta == pytest.approx(10.0, abs=0.2) and pred.n_stuck > 0
    assert 0 <= pred.stuck_ppm_low < pred.stuck_ppm <= pred.stuck_ppm_high < 1e-9
    assert "importance sampling" in pred.method
