"""Confidence bounds on a failure fraction (k failures in n trials).

References: C. J. Clopper and E. S. Pearson, "The use of confidence or fiducial limits illustrated in
the case of the binomial", Biometrika 26(4), 1934 (the exact interval from beta quantiles); J. A.
Hanley and A. Lippman-Hand, "If nothing goes wrong, is everything all right?", JAMA 249(13), 1983
(zero failures: the one-sided 95 % upper bound 1 − 0.05^(1/n) ≈ 3/n, the "rule of three").
"""

from __future__ import annotations

from dataclasses import dataclass

from scipy.stats import beta

from labtool.errors import UsageError


def _check(k: int, n: int) -> None:
    if n < 0 or k < 0 or k > n:
        raise UsageError(f"a binomial count needs 0 ≤ k ≤ n (got k={k}, n={n})")


def upper_bound(k: int, n: int, confidence: float = 0.95) -> float:
    """One-sided Clopper–Pearson upper bound on the fraction: Beta quantile ``confidence`` of (k+1, n−k).

    With n = 0 nothing is known and the bound is 1.
    """
    _check(k, n)
    if k >= n:
        return 1.0
    return float(beta.ppf(confidence, k + 1, n - k))


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
