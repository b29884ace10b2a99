"""Confidence bounds, outlier screens and distribution fits against published values and scipy."""

import numpy as np
import pytest
from scipy import stats

from labtool.errors import UsageError
from labtool.stats.distributions import anderson_darling_statistic, best_fit, fit_distribution
from labtool.stats.intervals import exact_interval, failure_fraction, rule_of_three, upper_bound
from labtool.stats.outliers import grubbs, modified_z_scores, outlier_mask

# NIST/SEMATECH e-Handbook §1.3.5.17.1, Grubbs' test example data.
GRUBBS_DATA = [199.31, 199.53, 200.19, 200.82, 201.92, 201.95, 202.18, 245.57]


def test_exact_interval_matches_guide_value_and_scipy():
    # Clopper & Pearson 1934; reference: scipy.stats.binomtest(7, 50).proportion_ci(method="exact")
    # gives 0.05819170, 0.26739600 (GUIDE §3, read in a stored text).
    lo, hi = exact_interval(7, 50)
    assert lo == pytest.approx(0.05819170, abs=1e-8)
    assert hi == pytest.approx(0.26739600, abs=1e-8)
    ref = stats.binomtest(7, 50).proportion_ci(confidence_level=0.95, method="exact")
    assert (lo, hi) == pytest.approx((ref.low, ref.high), abs=1e-12)


@pytest.mark.parametrize("k,n", [(0, 10), (1, 30), (5, 200), (12, 12)])
def test_one_sided_upper_bound_is_the_beta_quantile(k, n):
    # Reference: scipy.stats.beta.ppf(0.95, k+1, n-k) (Clopper–Pearson one-sided form), and
    # binomtest(alternative="less").proportion_ci(method="exact").high.
    expected = 1.0 if k == n else stats.beta.ppf(0.95, k + 1, n - k)
    assert upper_bound(k, n) == pytest.approx(expected, rel=1e-12)
    ref = stats.binomtest(k, n, alternative="less").proportion_ci(0.95, method="exact").high
    assert upper_bound(k, n) == pytest.approx(ref, rel=1e-10)


def test_zero_failures_in_100_gives_the_rule_of_three_bound():
    # Hanley & Lippman-Hand, JAMA 249(13) 1983: 1 − 0.05^(1/n) ≈ 3/n; n=100 → 0.029513 (GUIDE §3, C).
    assert upper_bound(0, 100) == pytest.approx(0.029513, abs=5e-7)
    assert upper_bound(0, 100) == pytest.approx(1 - 0.05 ** (1 / 100), rel=1e-12)
    assert rule_of_three(100) == 0.03
    ff = failure_fraction(0, 100)
    assert ff.ppm_ucl95 == pytest.approx(29513, abs=1) and ff.fraction == 0.0 and ff.ci95_low == 0.0


def test_bad_counts_are_refused():
    with pytest.raises(UsageError, match="0 ≤ k ≤ n"):
        upper_bound(5, 3)


def test_modified_z_scores_follow_the_handbook_formula():
    # Iglewicz & Hoaglin 1993; NIST/SEMATECH e-Handbook §1.3.5.17: M = 0.6745 (x − median)/MAD,
    # |M| > 3.5 is a potential outlier (from memory). Median of GRUBBS_DATA = (200.82 + 201.92)/2 = 201.37,
    # MAD = (0.81 + 1.18)/2 = 0.995 (worked by hand).
    x = np.array(GRUBBS_DATA)
    med = 201.37
    mad = np.median(np.abs(x - med))
    assert mad == pytest.approx(0.995, abs=1e-9)
    np.testing.assert_allclose(modified_z_scores(x), 0.6745 * (x - med) / mad, rtol=1e-12)
    assert outlier_mask(x).tolist() == [False] * 7 + [True]
    # M of 245.57 = 0.6745 * 44.2 / 0.995 = 29.963
    assert modified_z_scores(x)[-1] == pytest.approx(29.963, abs=1e-3)


def test_grubbs_statistic_matches_the_handbook_example():
    # e-Handbook §1.3.5.17.1: G = 2.468765 (GUIDE §3, read in a stored text); the two-sided
    # critical value at alpha 0.05 for n = 8 is 2.1266 (from memory of the same page).
    res = grubbs(GRUBBS_DATA)
    assert res.statistic == pytest.approx(2.468765, abs=1e-6)
    assert res.index == 7 and res.outlier
    assert res.critical == pytest.approx(2.1266, abs=1e-4)


def test_anderson_darling_statistic_matches_scipy_anderson():
    # Reference: scipy.stats.anderson(x, "norm", method="interpolate").statistic, which uses mean and std with ddof=1.
    x = np.random.default_rng(3).normal(2.0, 0.5, 60)  # invented sample, states a property
    cdf = stats.norm(x.mean(), x.std(ddof=1)).cdf
    assert anderson_darling_statistic(x, cdf) == pytest.approx(stats.anderson(x, "norm", method="interpolate").statistic, rel=1e-9)


def test_fit_goodness_matches_scipy_kstest():
    # Reference: scipy.stats.kstest against the fitted lognormal (scipy.stats.lognorm.fit with floc=0).
    x = np.random.default_rng(4).lognormal(np.log(8e-6), 0.25, 300)  # invented sample
    fit = fit_distribution(x, "lognormal")
    s, _, scale = stats.lognorm.fit(x, floc=0)
    assert fit.params["sigma_ln"] == pytest.approx(s, rel=1e-4)
    assert np.exp(fit.params["mu_ln"]) == pytest.approx(scale, rel=1e-4)
    ks = stats.kstest(x, stats.lognorm(s, 0, scale).cdf)
    assert fit.ks_stat == pytest.approx(ks.statistic, rel=1e-3)
    assert fit.aic == pytest.approx(2 * 2 - 2 * np.sum(stats.lognorm.logpdf(x, s, 0, scale)), rel=1e-6)


def test_weibull_fit_agrees_with_scipy_on_microsecond_data():
    # Reference: scipy.stats.weibull_min.fit(x, floc=0) on data in seconds.
    x = np.random.default_rng(5).weibull(1.7, 400) * 12e-6  # invented sample
    fit = fit_distribution(x, "weibull")
    c, _, scale = stats.weibull_min.fit(x / 1e-6, floc=0)
    assert fit.params["shape"] == pytest.approx(c, rel=1e-3)
    assert fit.params["scale_s"] == pytest.approx(scale * 1e-6, rel=1e-3)


@pytest.mark.parametrize("name,draw", [
    ("lognormal", lambda r: r.lognormal(np.log(5e-6), 0.6, 800)),
    ("weibull", lambda r: r.weibull(1.3, 800) * 1e-5),
    ("normal", lambda r: r.normal(-2e-6, 3e-7, 800)),  # negative delays: only the normal applies
])
def test_best_fit_picks_the_generating_law(name, draw):
    # Property with invented samples: the lowest-AIC law is the one that generated the data.
    fit = best_fit(draw(np.random.default_rng(11)))
    assert fit.best.distribution == name
    assert fit.best.ks_pvalue > 0.01


def test_anderson_darling_p_values_use_the_matching_scipy_tables():
    # Reference: scipy.stats.anderson(..., method="interpolate") on x (normal), ln x (lognormal) and
    # ln x against the smallest-extreme-value law (two-parameter Weibull; Stephens, Biometrika 1977).
    rng = np.random.default_rng(6)  # invented samples
    w = rng.weibull(2.0, 200) * 1e-5
    assert fit_distribution(w, "weibull").ad_pvalue == stats.anderson(np.log(w), "gumbel_l", method="interpolate").pvalue
    assert fit_distribution(w, "weibull").ad_pvalue > 0.05
    ln = rng.lognormal(np.log(5e-6), 0.5, 200)
    assert fit_distribution(ln, "lognormal").ad_pvalue == stats.anderson(np.log(ln), "norm", method="interpolate").pvalue
    assert fit_distribution(ln, "normal").ad_pvalue <= 0.01  # a skewed sample is not normal
