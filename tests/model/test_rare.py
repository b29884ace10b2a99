"""Stuck-at-zero probability by importance sampling, checked against an exact case and plain Monte Carlo.

Every verdict here is a full transient measured by labtool.measure (the same as a lot's stuck rate).
Designs are invented variants of the demo (stating properties; the references are the closed form
and scipy's exact binomial interval).
"""

import numpy as np
import pytest
from scipy import special, stats

from labtool.model import dc_analysis, monte_carlo
from labtool.model.rare import stuck_probability

_ONLY_STARTUP_CURRENT = dict(sigma_offset_v=0.0, sigma_is_rel=0.0, sigma_r_rel=0.0, sigma_c_rel=0.0,
                             sigma_i_start_rel=0.21)
_SLOW_COLD = (1e-2, -40.0)  # a 10 ms ramp at −40 °C: the DC escape condition decides (no slow-start margin)


@pytest.fixture(scope="module")
def one_parameter(demo):
    """Only the startup current varies (σ 21 %): stuck ⇔ I_start < I_min, one Gaussian past a threshold."""
    return demo.replace(**_ONLY_STARTUP_CURRENT)


@pytest.mark.slow
def test_exact_case_one_gaussian_past_the_dc_threshold(one_parameter):
    # Exact answer: I_start = I0·(1 + σ·z) with z ~ N(0, 1) is below the DC analysis's minimum escape
    # current I_min exactly when z < (I_min/I0 − 1)/σ, so p = Φ((I_min/I0 − 1)/σ) (scipy.special.ndtr).
    # At a 10 ms ramp the transient's own threshold is within ±0.05 nA of I_min (0.25 nA), a shift of
    # 1e-4 σ: the closed form is exact to well below the interval.
    ramp, temp = _SLOW_COLD
    i_min = dc_analysis(one_parameter, temp).i_start_min_a
    z_star = (i_min / one_parameter.i_start_a - 1.0) / one_parameter.sigma_i_start_rel
    exact = special.ndtr(z_star)
    assert 5e-7 < exact < 2e-6  # the ppm level
    r = stuck_probability(one_parameter, ramp_s=ramp, temperature_c=temp, n=600, seed=1, explore=32,
                          rel_halfwidth=None)
    low, high = r.p_stuck_ci95
    assert low <= exact <= high
    assert r.rel_halfwidth < 0.3
    assert r.beta == pytest.approx(-z_star, abs=0.05)
    assert r.p_form == pytest.approx(exact, rel=0.3)
    assert [c.parameter for c in r.mpp] == ["i_start_a"] and r.mpp[0].sigma == pytest.approx(z_star, abs=0.05)
    assert r.cause() == "startup current −4.8 σ"
    assert r.n_transients < 1000 and r.n_failed == 0 and r.ess > 30


@pytest.mark.slow
def test_agrees_with_plain_monte_carlo_where_stuck_is_common(demo):
    # An input pair that needs its common mode at 0.35 V and a startup current of 4.7 µA: at 27 °C on a
    # 1 µs ramp about 3 % stick, through the startup current, the Q1 mismatch and the capacitances (a
    # transient effect: the start is slow), so many parameters matter and the DC guide is only a guide.
    d = demo.replace(amp_vcm_min_v=0.35, i_start_a=4.7e-6)
    plain = monte_carlo(d, conditions=[(1e-6, 27.0)], n=2000, seed=7).samples
    k, n = int(plain["stuck"].sum()), len(plain)
    ci = stats.binomtest(k, n).proportion_ci(method="exact")  # Clopper–Pearson (scipy)
    assert 0.01 < k / n < 0.05
    r = stuck_probability(d, ramp_s=1e-6, temperature_c=27.0, n=800, seed=3, explore=64, rel_halfwidth=None)
    # agreement within the intervals: the estimate inside the plain count's exact interval, the two
    # intervals overlapping, the difference within the combined standard errors (binomial and weighted)
    assert ci.low <= r.p_stuck <= ci.high
    assert r.p_stuck_ci95[0] <= ci.high and ci.low <= r.p_stuck_ci95[1]
    assert abs(r.p_stuck - k / n) <= 1.96 * np.hypot(r.se, np.sqrt(k / n * (1 - k / n) / n))
    assert r.rel_halfwidth < 0.5 * (ci.high - ci.low) / (k / n)  # and it is the tighter of the two
    assert r.mpp[0].parameter == "i_start_a" and r.mpp[0].sigma < 0


def test_reproducible_by_seed_with_common_random_numbers_across_corners(one_parameter):
    # (different seeds give different draws: tests/model/test_reliability.py)
    ramp, temp = _SLOW_COLD
    kw = dict(n=60, explore=8, rel_halfwidth=None, seed=4)
    a = stuck_probability(one_parameter, ramp_s=ramp, temperature_c=temp, **kw)
    again = stuck_probability(one_parameter, ramp_s=ramp, temperature_c=temp, **kw)
    assert a.p_stuck == again.p_stuck and a.samples.equals(again.samples)
    # another corner, the same seed: the same base draws, each shifted to that corner's stuck point
    warm = stuck_probability(one_parameter, ramp_s=1e-4, temperature_c=27.0, **kw)

    def base(r):
        centre = np.array([0.0] + [reg["mpp"][0]["sigma"] for reg in r.regions])
        return r.samples["z_i_start_a"].to_numpy() - centre[r.samples["component"].to_numpy()]

    assert warm.beta != a.beta
    assert np.allclose(base(a), base(warm))
    out = a.to_json_dict()
    assert {"method", "p_stuck", "p_stuck_ci95", "n_transients", "beta", "ess", "mpp"} <= set(out)
    assert out["mpp"][0]["parameter"] == "i_start_a" and out["mpp"][0]["value"] < one_parameter.i_start_a
    assert out["n_transients"] > out["n"] == 60
