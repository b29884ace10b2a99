"""Confidence bounds on a failure fraction (k failures in n trials), and on a per-start rate when the
starts come in clusters (repeated power cycles of one part).

References: C. J. Clopper and E. S. Pearson, "The use of confidence or fiducial limits illustrated in
the case of the binomial", Biometrika 26(4), 1934 (the exact interval from beta quantiles); J. A.
Hanley and A. Lippman-Hand, "If nothing goes wrong, is everything all right?", JAMA 249(13), 1983
(zero failures: the one-sided 95 % upper bound 1 − 0.05^(1/n) ≈ 3/n, the "rule of three").

Clustered starts (:func:`clustered_rate`): repeated starts of one part are not independent trials.
Under a beta-binomial model (each part its own stuck probability, drawn from a beta law) the variance
of the stuck count is the binomial one times the design effect 1 + (m − 1)·ρ, m starts per part and
ρ the intra-part correlation (L. Kish, Survey Sampling, 1965; from memory). The design effect is
estimated by moments from the parts' own counts: the with-replacement variance of the ratio k/n over
parts, C/(C − 1)·Σ(k_i − p̂·n_i)²/n² (W. G. Cochran, Sampling Techniques, 3rd ed., 1977, ratio
estimators in cluster sampling; from memory), against the binomial p̂(1 − p̂)/(n − 1), never below 1.
The bound is then the exact Clopper–Pearson bound at the effective counts k/deff of n/deff, with the
effective size cut by the degrees of freedom of that variance, n* = n/deff · (t₀.₉₅(n − 1)/t₀.₉₅(C − 1))²
(E. L. Korn and B. I. Graubard, "Confidence intervals for proportions with small expected number of
positive counts estimated from survey data", Survey Methodology 24(2), 1998; from memory), never above
n. With one start per part this is the plain Clopper–Pearson bound. When no start (or every start)
failed the spread between parts cannot be estimated and, as Korn and Graubard do, deff is 1; the
degrees-of-freedom cut still applies, so a few parts started many times give a wide per-start bound.
A group of one part is that part's own per-start rate: its starts are the trials (plain Clopper–Pearson).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import beta
from scipy.stats import t as student_t

from labtool.errors import UsageError


def _check(k: int, n: int) -> None:
    if n < 0 or k < 0 or k > n:
        raise UsageError(f"a binomial count needs 0 ≤ k ≤ n (got k={k}, n={n})")


def upper_bound(k: float, n: float, confidence: float = 0.95) -> float:
    """One-sided Clopper–Pearson upper bound on the fraction: Beta quantile ``confidence`` of (k+1, n−k).

    With n = 0 nothing is known and the bound is 1. ``k`` and ``n`` may be effective (non-integer)
    counts, as :func:`clustered_rate` uses them.
    """
    _check(k, n)
    if k >= n:
        return 1.0
    return float(beta.ppf(confidence, k + 1, n - k))


@dataclass(frozen=True)
class ClusteredRate:
    """A per-start rate over clusters (starts of parts): k of n starts in ``n_clusters`` parts; the bound
    is Clopper–Pearson at ``n_effective`` starts (see the module notes)."""

    k: int
    n: int
    n_clusters: int
    rate: float | None
    upper95: float
    design_effect: float
    n_effective: float


def clustered_rate(k_by_cluster, n_by_cluster, confidence: float = 0.95) -> ClusteredRate:
    """The rate k/n and its one-sided upper bound allowing for clustered starts (see the module notes)."""
    k_i = np.asarray(k_by_cluster, dtype=np.float64)
    n_i = np.asarray(n_by_cluster, dtype=np.float64)
    keep = n_i > 0
    k_i, n_i = k_i[keep], n_i[keep]
    k, n, c = int(k_i.sum()), int(n_i.sum()), int(k_i.size)
    _check(k, n)
    if n == 0:
        return ClusteredRate(k, n, c, None, 1.0, 1.0, 0.0)
    p = k / n
    if k in (0, n) or c < 2:
        deff = 1.0
    else:
        spread = c / (c - 1) * float(np.sum((k_i - p * n_i) ** 2)) / n ** 2
        deff = max(1.0, spread / (p * (1.0 - p) / (n - 1)))
    n_eff = n / deff
    if c >= 2:
        n_eff = min(float(n), n_eff * (student_t.ppf(confidence, n - 1) / student_t.ppf(confidence, c - 1)) ** 2)
    return ClusteredRate(k, n, c, p, upper_bound(p * n_eff, n_eff, confidence), deff, n_eff)


def exact_interval(k: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Two-sided Clopper–Pearson interval with ``(1 − confidence)/2`` in each tail."""
    _check(k, n)
    tail = (1.0 - confidence) / 2.0
    lo = 0.0 if k == 0 else float(beta.ppf(tail, k, n - k + 1))
    hi = 1.0 if k == n else float(beta.ppf(1.0 - tail, k + 1, n - k))
    return lo, hi


def rule_of_three(n: int) -> float:
    """Approximate one-sided 95 % upper bound with zero failures in ``n`` trials: 3/n."""
    if n <= 0:
        raise UsageError("the rule of three needs at least one trial")
    return 3.0 / n


@dataclass(frozen=True)
class FailureFraction:
    """``k`` of ``n`` with the point estimate, the exact two-sided interval and the one-sided bound."""

    k: int
    n: int
    fraction: float | None
    ci95_low: float
    ci95_high: float
    ucl95: float

    @property
    def ppm_ucl95(self) -> float:
        return self.ucl95 * 1e6


def failure_fraction(k: int, n: int) -> FailureFraction:
    lo, hi = exact_interval(k, n)
    return FailureFraction(k=k, n=n, fraction=(k / n if n else None), ci95_low=lo, ci95_high=hi,
                           ucl95=upper_bound(k, n))
