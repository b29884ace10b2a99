"""The rare-event machinery on failure sets with exact probabilities (no circuit: fast and exact).

Failure sets are half-spaces a·u ≥ β of u ~ N(0, I): P = Φ(−β) exactly (the first-order result of
Hasofer & Lind 1974 is exact for a plane; from memory), computed with scipy.special.ndtr.
"""

import numpy as np
import pytest
from scipy import special

from labtool.model import reliability


def _unit(v):
    v = np.asarray(v, float)
    return v / np.linalg.norm(v)


def _half_spaces(*planes):
    """A classifier failing where any a·u ≥ β, and the number of points it was asked about."""
    def classify(u):
        fails = np.zeros(len(u), bool)
        for a, beta in planes:
            fails |= u @ a >= beta
        return fails, np.zeros(len(u), bool)
    return classify


def _covers(est, exact):
    low, high = est.ci95
    return low <= exact <= high


def test_half_space_with_a_misleading_guide():
    # Exact answer Φ(−4.5) (scipy.special.ndtr); the guide's plane is tilted by ~25° and too far out,
    # so the classifier-driven refinement has to find the true nearest point.
    rng = np.random.default_rng(0)
    d, beta = 6, 4.5
    a = _unit(rng.standard_normal(d))
    wrong = _unit(a + 0.45 * _unit(rng.standard_normal(d)))
    est = reliability.estimate(_half_spaces((a, beta)), d, seed=3, n=3000,
                               guide=lambda u: 5.0 - u @ wrong, rel_halfwidth=None)
    exact = special.ndtr(-beta)
    assert _covers(est, exact)
    assert est.beta == pytest.approx(beta, abs=0.1)
    assert float(_unit(est.regions[0].point) @ a) > 0.99  # the nearest point found, not the guide's
    assert 0.5 * (est.ci95[1] - est.ci95[0]) / est.p < 0.3
    assert est.ess > reliability.MIN_ESS and not est.warnings
    # search included, far fewer evaluations than plain Monte Carlo's ~4e7 for the same precision
    assert est.n_evaluations < 5000


def test_second_failure_region_that_the_guide_does_not_see():
    # Two regions (β 4.5 and 4.6, 90° apart); the guide knows only the first. The exploration stage must
    # find the second, or the estimate would be short by Φ(−4.6)/(Φ(−4.5) + Φ(−4.6)) ≈ 44 %.
    d = 5
    a, b = np.eye(d)[0], -np.eye(d)[3]
    # (a fixed seed; a 95 % interval misses for about one seed in twenty: seeds 1–10 gave z = −1.9…2.3)
    est = reliability.estimate(_half_spaces((a, 4.5), (b, 4.6)), d, seed=2, n=4000,
                               guide=lambda u: 4.5 - u @ a, rel_halfwidth=None)
    # inclusion–exclusion; the two half-planes are independent (orthogonal normals)
    pa, pb = special.ndtr(-4.5), special.ndtr(-4.6)
    exact = pa + pb - pa * pb
    assert len(est.regions) == 2 and {r.found_by for r in est.regions} == {"guide", "exploration"}
    assert _covers(est, exact)
    assert not (est.ci95[0] <= pa <= est.ci95[1])  # the first region alone is excluded: the guard matters


def test_without_a_guide_the_exploration_finds_the_region():
    est = reliability.estimate(_half_spaces((np.eye(3)[1], 4.0)), 3, seed=2, n=2000, rel_halfwidth=None)
    assert est.regions and est.regions[0].found_by == "exploration"
    assert _covers(est, special.ndtr(-4.0))


def test_no_failure_gives_the_exact_zero_count_bound():
    # No region and no failing sample: sampling the nominal density, the upper end is the exact one-sided
    # 95 % bound for zero in n, 1 − 0.05^(1/n) (Clopper & Pearson 1934; GUIDE §3: n = 100 → 0.029513).
    est = reliability.estimate(_half_spaces((np.eye(2)[0], 50.0)), 2, seed=1, n=100, explore=16,
                               rel_halfwidth=None)
    assert est.p == 0.0 and est.regions == ()
    assert est.ci95 == (0.0, pytest.approx(0.029513, abs=5e-7))
    assert any("no failing sample" in w for w in est.warnings)


def test_reproducible_by_seed_and_common_base_draws():
    classify = _half_spaces((np.eye(4)[2], 3.8))
    one = reliability.estimate(classify, 4, seed=5, n=800, explore=128, rel_halfwidth=None)
    again = reliability.estimate(classify, 4, seed=5, n=800, explore=128, rel_halfwidth=None)
    other = reliability.estimate(classify, 4, seed=6, n=800, explore=128, rel_halfwidth=None)
    assert one.p == again.p and one.ci95 == again.ci95 and np.array_equal(one.samples["u"], again.samples["u"])
    assert one.p != other.p
    # another failure set (another condition) with the same seed: the same base draws, shifted to its
    # own nearest point (common random numbers)
    shifted = reliability.estimate(_half_spaces((np.eye(4)[2], 4.3)), 4, seed=5, n=800, explore=128,
                                   rel_halfwidth=None)
    centres = [np.zeros(4)] + [r.point for r in one.regions]
    centres_b = [np.zeros(4)] + [r.point for r in shifted.regions]
    base = one.samples["u"] - np.array(centres)[one.samples["component"]]
    base_b = shifted.samples["u"] - np.array(centres_b)[shifted.samples["component"]]
    assert np.allclose(base, base_b)


def test_degenerate_weights_are_flagged():
    # Forty samples carry far fewer than MIN_ESS effective failing samples: the estimate says so.
    est = reliability.estimate(_half_spaces((np.eye(2)[0], 2.0)), 2, seed=4, n=40, explore=0,
                               guide=lambda u: 2.0 - u[:, 0], rel_halfwidth=None)
    assert est.ess < reliability.MIN_ESS
    assert any("degenerate" in w for w in est.warnings)
