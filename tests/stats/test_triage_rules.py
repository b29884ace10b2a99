"""The pieces of triage's likelihood and next-experiment rule against outside references."""

import math

import numpy as np
import pytest
from scipy import integrate, stats
from scipy.special import gammaln

from labtool.stats.triage import STORIES, cycles_to_see_a_failure, model_setup, repeat_count
from labtool.stats.triage.densities import (SHIFT_MAX, SHIFT_MIN, healthy_probabilities, log_dm, log_healthy,
                                            log_shifted, logsumexp)
from labtool.stats.triage.hypotheses import CATEGORIES
from labtool.stats.triage.likelihood import regions
from labtool.stats.triage.next_experiment import MAX_CYCLES
from labtool.stats.triage.metrics import METRIC, MIN_BASELINE, PRIOR_DOF, CaptureResolution, baseline_spread, \
    code_step, total_scale


# -- the repeat-count rule ----------------------------------------------------------------------
@pytest.mark.parametrize("p", [0.5, 0.2, 0.1, 0.05, 0.01, 0.003, 1e-4])
def test_power_cycles_to_see_a_failure_follow_the_binomial_formula(p):
    # n ≥ ln 0.05 / ln(1 − p): zero failures in n starts has probability (1 − p)^n ≤ 5 % (common
    # practice, no source: the rule of three's generalisation); checked with scipy.stats.binom.pmf.
    n = cycles_to_see_a_failure(p)
    assert n == math.ceil(math.log(0.05) / math.log(1 - p))
    assert stats.binom.pmf(0, n, p) <= 0.05 < stats.binom.pmf(0, n - 1, p)
    # against a part that never fails one failure decides; beyond the cap no count is proposed
    assert repeat_count(p, 0.0) == ((n, 1) if n <= MAX_CYCLES else None)


def test_one_percent_per_start_takes_299_cycles_and_the_rule_of_three():
    # GUIDE §3 (C): p = 0.01 → 299; rule of three, Hanley & Lippman-Hand, JAMA 249(13) 1983: n ≈ 3/p.
    assert cycles_to_see_a_failure(0.01) == 299
    assert cycles_to_see_a_failure(1e-3) == pytest.approx(3 / 1e-3, rel=0.002)


@pytest.mark.parametrize("p_hi, p_lo", [(0.5, 0.001), (0.3, 0.1), (0.2, 0.05), (0.6, 0.3)])
def test_repeat_count_against_a_failing_lot_is_the_smallest_binomial_test(p_hi, p_lo):
    # Exhaustive search with scipy.stats.binom: the smallest n with a threshold k such that at least
    # k failures has probability ≥ 95 % at p_hi and ≤ 5 % at p_lo.
    n, k = repeat_count(p_hi, p_lo)
    assert stats.binom.sf(k - 1, n, p_hi) >= 0.95 and stats.binom.sf(k - 1, n, p_lo) <= 0.05
    for m in range(1, n):
        assert not any(stats.binom.sf(j - 1, m, p_hi) >= 0.95 and stats.binom.sf(j - 1, m, p_lo) <= 0.05
                       for j in range(1, m + 1))


def test_repeat_count_gives_up_beyond_its_cap():
    assert repeat_count(0.0011, 0.001) is None
    with pytest.raises(ValueError):
        repeat_count(0.1, 0.2)


# -- the verdict likelihood ------------------------------------------------------------------------
@pytest.mark.parametrize("counts, alpha", [([3, 0, 1], [0.5, 0.5, 0.5]), ([10, 2, 0, 5], [1, 2, 0.3, 4]),
                                           ([0, 7], [8, 1])])
def test_dirichlet_multinomial_matches_scipy(counts, alpha):
    # scipy.stats.dirichlet_multinomial gives the count pmf: the sequence probability times the
    # multinomial coefficient n! / Π k_i!.
    n = sum(counts)
    coefficient = gammaln(n + 1) - sum(gammaln(np.asarray(counts) + 1.0))
    assert log_dm(counts, alpha) + coefficient == pytest.approx(stats.dirichlet_multinomial.logpmf(counts, alpha, n))


def test_healthy_rates_learn_from_the_set_up_and_sum_to_one():
    clean = np.zeros(len(CATEGORIES))
    clean[-1] = 40  # 40 clean starts of the lot at this set-up
    p = healthy_probabilities(clean)
    assert p.sum() == pytest.approx(1.0) and p[-1] > 0.998  # a fine set-up: about one failure in a thousand
    marginal = clean.copy()
    marginal[CATEGORIES.index("stuck_at_zero")] = 300
    marginal[-1] = 700
    p = healthy_probabilities(marginal)
    # a lot stuck in 30 % of 1000 starts here: the rate is the lot's (within the prior's weight)
    assert p[CATEGORIES.index("stuck_at_zero")] == pytest.approx(0.3, abs=0.002)
    # and the joint probability of a part's starts is a proper distribution over its sequences:
    # summing over both outcomes of two starts (stuck/started) with the rest impossible gives ~1
    two = [log_healthy(np.bincount([a, b], minlength=len(CATEGORIES)), marginal)
           for a in range(len(CATEGORIES)) for b in range(len(CATEGORIES))]
    assert math.exp(logsumexp(two)) == pytest.approx(1.0)


def test_region_priors_sum_to_one():
    for family in ("all", "cold", "hot", "slow", "rectangle"):
        for n_t, n_r in ((3, 3), (2, 4), (4, 1)):
            regs = regions(family, n_t, n_r)
            assert not regs or sum(r.prior for r in regs) == pytest.approx(1.0)
    assert len(regions("rectangle", 3, 3)) == 25 and regions("cold", 1, 3) == []


def test_story_priors_sum_to_one():
    assert sum(s.prior for s in STORIES) == pytest.approx(1.0)


# -- the continuous likelihood ---------------------------------------------------------------------
@pytest.mark.parametrize("z, dof, sign", [(0.0, 4, +1), (3.0, 15, +1), (25.0, 4, +1), (400.0, 30, +1),
                                          (-7.0, 1, -1), (6.0, 2, 0), (-0.5, 8, 0)])
def test_shift_density_is_the_convolution_with_a_log_uniform_size(z, dof, sign):
    # Reference: scipy.integrate.quad of t.pdf(z − s·u) · 1 / (u · ln(U/L)) over u in [L, U].
    def one(s):
        f = lambda u: stats.t.pdf(z - s * u, dof) / (u * math.log(SHIFT_MAX / SHIFT_MIN))  # noqa: E731
        peak = min(max(abs(z), SHIFT_MIN), SHIFT_MAX)
        return integrate.quad(f, SHIFT_MIN, SHIFT_MAX, points=[peak], limit=400, epsabs=0, epsrel=1e-10)[0]
    want = one(sign) if sign else 0.5 * (one(+1) + one(-1))
    assert float(np.exp(log_shifted(z, dof, sign))[0]) == pytest.approx(want, rel=2e-3)


def test_a_small_baseline_is_widened_by_the_conjugate_prior_a_large_one_is_not():
    delay = METRIC["delay_s"]
    values = np.array([10e-6, 11e-6, 12e-6])  # three captures of other parts at a 10 µs ramp
    sp = baseline_spread(values, delay, 10e-6)
    s = np.median(np.abs(values - 11e-6)) / 0.6745  # MAD/0.6745 (Iglewicz & Hoaglin 1993)
    prior = 0.25 * 11e-6 + 0.03 * 10e-6
    # (ν0·σ0² + (n − 1)·s²) / (ν0 + n − 1), ν0 + n − 1 degrees of freedom (Gelman et al., BDA 3rd ed. §3.3)
    assert sp.scale == pytest.approx(math.sqrt((PRIOR_DOF * prior ** 2 + 2 * s ** 2) / (PRIOR_DOF + 2)))
    assert sp.dof == PRIOR_DOF + 2 and sp.n == 3 and sp.contamination == 0
    assert baseline_spread(values[:1], delay, 10e-6).contamination > 0  # one capture may be a faulty part's
    many = np.linspace(10e-6, 12e-6, MIN_BASELINE)
    big = baseline_spread(many, delay, 10e-6)
    assert big.scale == pytest.approx(np.median(np.abs(many - np.median(many))) / 0.6745) and big.dof == MIN_BASELINE - 1
    assert total_scale(big, 0.0) == pytest.approx(big.scale * math.sqrt(1 + 1 / MIN_BASELINE))


def test_resolution_floor_of_a_quiet_8_bit_trace():
    # An 8-bit scope on a 2.04 V range has 8 mV codes (common practice, no source): a 1.2 V start
    # resolves overshoot to one code, 0.67 % of the step, and its level to one code.
    rng = np.random.default_rng(3)
    t = np.linspace(0, 200e-6, 2000)
    out = 1.2 * (1 - np.exp(-np.maximum(t - 20e-6, 0) / 3e-6))
    codes = lambda v, q: np.round((v + rng.normal(0, 0.0015, v.size)) / q) * q  # noqa: E731
    res = CaptureResolution.from_arrays(t, codes(np.minimum(t / 10e-6, 1) * 1.8, 0.010), codes(out, 0.008))
    assert res.out_step_v == pytest.approx(0.008) and res.supply_step_v == pytest.approx(0.010)
    row = {"vout_final_v": 1.2, "rise_s": 6.6e-6}
    assert res.floor("overshoot_pct", row) == pytest.approx(100 * 0.008 / 1.2)
    assert res.floor("vout_final_v", row) == pytest.approx(0.008)
    assert res.floor("delay_s", row) == pytest.approx(200e-6 / 1999)  # a sample ...
    slow_edge = {**row, "rise_s": 66e-6}
    assert res.floor("delay_s", slow_edge) == pytest.approx(0.008 * 66e-6 / (0.8 * 1.2))  # ... or a code over the slope
    assert code_step(np.linspace(0, 1, 1000)) == pytest.approx(1 / 999)  # unquantised: the sample spacing


def test_the_models_set_up_of_a_capture_without_a_recorded_supply():
    # A blank vdd_v (NaN in the table) is "not recorded", not a supply of NaN volts for the model.
    assert model_setup({"ramp_s": 1e-3, "temperature_c": 25.0, "vdd_v": float("nan")}) == (1e-3, 25.0, None)
    assert model_setup({"ramp_s": 1e-3, "temperature_c": None}) is None
