"""Confidence bounds, outlier screens and distribution fits against published values and scipy."""

import numpy as np
import pytest
from scipy import stats

from labtool.errors import UsageError
from labtool.stats.distributions import anderson_darling_statistic, best_fit, fit_distribution, ks_test
from labtool.stats.intervals import clustered_rate, exact_interval, failure_fraction, rule_of_three, upper_bound
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
    # e-Handbook §1.3.5.17.1: G = 2.468765 (GUIDE §3, read in a stored text). The handbook's test is
    # two-sided: G_crit = (N−1)/√N·√(t²/(N−2+t²)) with t the upper α/(2N) point of t(N−2) (§1.3.5.17);
    # α 0.05, N = 8 gives 2.1266 (computed with scipy.stats.t.isf; the one-sided α/N form gives 2.0317).
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
    assert fit.ks_pvalue == pytest.approx(ks.pvalue, abs=0.02)  # Stephens' form of the exact law kstest uses
    assert fit.aic == pytest.approx(2 * 2 - 2 * np.sum(stats.lognorm.logpdf(x, s, 0, scale)), rel=1e-6)


@pytest.mark.parametrize("n", [8, 12, 28, 100, 400])
def test_ks_p_value_follows_the_exact_kolmogorov_law(n):
    # Reference: scipy.stats.kstwo.sf(D, n), the exact law of the two-sided statistic (what kstest uses);
    # Stephens' form (JRSS B 32(1), 1970, from memory) is within 0.005 where p < 0.2, 0.025 elsewhere.
    for d in np.linspace(0.02, 0.6, 30):
        x = np.linspace(0, 1, n, endpoint=False) + 0.5 / n  # a sample whose D against U(0, 1) is ~1/(2n)
        shift = d - 0.5 / n
        if shift < 0:
            continue
        got_d, p = ks_test(x, lambda v: np.clip(v + shift, 0.0, 1.0))
        exact = stats.kstwo.sf(got_d, n)
        assert abs(p - exact) < (0.005 if exact < 0.2 else 0.025), (n, got_d)


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
    # (the Weibull MLE here and scipy's Gumbel fit solve one likelihood equation: equal to 1e-9)
    assert fit_distribution(w, "weibull").ad_pvalue == pytest.approx(
        stats.anderson(np.log(w), "gumbel_l", method="interpolate").pvalue, rel=1e-9)
    assert fit_distribution(w, "weibull").ad_pvalue > 0.05
    ln = rng.lognormal(np.log(5e-6), 0.5, 200)
    assert fit_distribution(ln, "lognormal").ad_pvalue == pytest.approx(
        stats.anderson(np.log(ln), "norm", method="interpolate").pvalue, rel=1e-12)
    for seed in range(40):  # small to large samples, every table segment and both ends
        x = np.random.default_rng(seed).lognormal(-12, 0.4, 8 + 3 * seed)
        for name, y, table in (("normal", x, "norm"), ("lognormal", np.log(x), "norm"), ("weibull", np.log(x), "gumbel_l")):
            assert fit_distribution(x, name).ad_pvalue == pytest.approx(
                stats.anderson(y, table, method="interpolate").pvalue, rel=1e-8, abs=1e-12), (seed, name)
    assert fit_distribution(ln, "normal").ad_pvalue <= 0.01  # a skewed sample is not normal


def test_anderson_darling_p_values_at_a_table_end_are_bounds():
    # scipy.stats.anderson(method="interpolate") reads p from tables whose significance levels end at
    # 0.15 (normal) / 0.25 (Gumbel) and 0.01 (its documentation); a value there is a bound, not a value.
    q = (np.arange(1, 201) - 0.5) / 200
    perfect = stats.norm.ppf(q, loc=5e-6, scale=1e-7)  # normal quantiles: A² far below every table entry
    fit = fit_distribution(perfect, "normal")
    assert (fit.ad_pvalue, fit.ad_pvalue_bound) == (0.15, "lower")
    skewed = fit_distribution(np.random.default_rng(6).lognormal(0, 0.8, 200), "normal")
    assert (skewed.ad_pvalue, skewed.ad_pvalue_bound) == (0.01, "upper")
    w = np.exp(stats.gumbel_l.ppf(q))
    assert fit_distribution(w, "weibull").ad_pvalue_bound == "lower" == fit_distribution(w, "weibull").to_json_dict()[
        "ad_pvalue_bound"]
    assert fit_distribution(w, "weibull").ad_pvalue == 0.25
    mid = fit_distribution(np.random.default_rng(0).lognormal(0, 0.5, 40), "normal")  # inside the table
    assert 0.01 < mid.ad_pvalue < 0.15 and mid.ad_pvalue_bound is None


def test_clustered_rate_is_clopper_pearson_with_one_start_per_part():
    # One start per part: the design effect is 1 and the bound is the exact one
    # (scipy.stats.binomtest(k, n, alternative="less").proportion_ci(method="exact")).
    for k, n in ((3, 10), (1, 40), (7, 50)):
        r = clustered_rate([1] * k + [0] * (n - k), [1] * n)
        ref = stats.binomtest(k, n, alternative="less").proportion_ci(0.95, method="exact").high
        assert r.design_effect == pytest.approx(1.0) and r.upper95 == pytest.approx(ref, rel=1e-9)


def test_clustered_rate_counts_clustered_failures_as_fewer_trials():
    # 4 parts × 10 starts, every failure in one part: the ratio's cluster variance
    # C/(C−1)·Σ(k_i − p n_i)²/n² against p(1−p)/(n−1) (Kish 1965; Cochran 1977; from memory), worked
    # by hand: p = 0.1, Σ = 9 + 3·1 = 12, 4/3·12/1600 = 0.01, p(1−p)/39 = 0.0023077 → deff = 4.3333;
    # effective size n/deff·(t₀.₉₅(39)/t₀.₉₅(3))² (scipy.stats.t.ppf) and the bound
    # scipy.stats.beta.ppf(0.95, p·n* + 1, (1 − p)·n*) (Korn & Graubard 1998, from memory).
    r = clustered_rate([4, 0, 0, 0], [10, 10, 10, 10])
    assert r.rate == pytest.approx(0.1) and r.design_effect == pytest.approx(4.333333, rel=1e-6)
    n_star = 40 / (13 / 3) * (stats.t.ppf(0.95, 39) / stats.t.ppf(0.95, 3)) ** 2
    assert r.n_effective == pytest.approx(n_star, rel=1e-9)
    assert r.upper95 == pytest.approx(stats.beta.ppf(0.95, 0.1 * n_star + 1, 0.9 * n_star), rel=1e-9)
    spread = clustered_rate([1, 1, 1, 1], [10, 10, 10, 10])  # spread evenly: no clustering shows
    assert spread.design_effect == 1.0 and spread.upper95 < r.upper95
    # Nothing failed: deff 1 (Korn & Graubard), but 2 parts are 1 degree of freedom, not 17.
    none = clustered_rate([0, 0], [9, 9])
    n_star = 18 * (stats.t.ppf(0.95, 17) / stats.t.ppf(0.95, 1)) ** 2
    assert none.design_effect == 1.0 and none.upper95 == pytest.approx(1 - 0.05 ** (1 / n_star), rel=1e-12)
    assert none.upper95 > upper_bound(0, 18)
    # One part alone: its own per-start rate, its starts the trials (Clopper–Pearson).
    one = clustered_rate([3], [100])
    assert one.upper95 == pytest.approx(stats.binomtest(3, 100, alternative="less").proportion_ci().high, rel=1e-9)


def test_clustered_bound_covers_a_beta_binomial_rate():
    # Property (stated, not a reference): parts' stuck probabilities drawn from Beta(0.5, 4.5) (mean 0.1,
    # intra-part correlation 1/6), 8 starts each; the one-sided 95 % bound covers the mean 0.1 in
    # about 95 % (here 94 %) of 2000 simulated lots of 12 parts, while counting starts as trials falls short.
    rng = np.random.default_rng(7)
    hits = naive = 0
    for _ in range(2000):
        p = rng.beta(0.5, 4.5, 12)
        k = rng.binomial(8, p)
        hits += clustered_rate(k, [8] * 12).upper95 >= 0.1
        naive += upper_bound(int(k.sum()), 96) >= 0.1
    assert hits / 2000 > 0.93 and naive / 2000 < hits / 2000 - 0.03
