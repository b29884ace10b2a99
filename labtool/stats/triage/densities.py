"""Closed-form and numerical densities of the triage likelihood (pure functions over numpy arrays).

* Dirichlet-multinomial probability of a sequence of category draws with an unknown, shared vector
  of category probabilities (Johnson, Kotz & Balakrishnan, Discrete Multivariate Distributions, 1997,
  ch. 35, from memory; ``scipy.stats.dirichlet_multinomial`` gives the count version).
* The healthy rate of each verdict at one set-up: a two-component Dirichlet mixture prior (a "fine"
  set-up where a start fails about once in a thousand, or a set-up where the whole lot is marginal)
  updated by the lot's captures there; docs/triage.md.
* Student t for a value against a small baseline, and that density shifted by an unknown amount
  with a log-uniform prior on its size (between 1 and 1000 spreads): the scale-mixture idea of
  Box & Tiao's outlier model (Biometrika 55(1), 1968, from memory) as a location shift.
"""

from __future__ import annotations

import numpy as np
from scipy.special import gammaln
from scipy.stats import t as student_t

# Healthy-rate prior per set-up (labtool's choice, docs/triage.md), over the verdict categories
# (hypotheses.CATEGORIES, "started" last): with weight 0.98 the set-up is fine (each of the seven other
# verdicts 0.15 against 1000 starts: about one start in a thousand fails), with weight 0.02 the whole
# lot is marginal there (Jeffreys-like 0.5 each, learned from the lot's captures).
HEALTHY_COMPONENTS = ((0.98, np.array([0.15] * 7 + [1000.0])), (0.02, np.full(8, 0.5)))
SHIFT_MIN, SHIFT_MAX = 1.0, 1000.0  # size of a fault's shift, in spreads of the set-up (log-uniform)
_SHIFT_GRID = np.exp(np.linspace(np.log(SHIFT_MIN), np.log(SHIFT_MAX), 241))
_LOCAL = np.linspace(-12.0, 12.0, 121)  # dense points around the kernel's peak


def logsumexp(values) -> float:
    """ln Σ exp(values), without overflow (the arrays here are short: plain numpy is faster than scipy's)."""
    a = np.asarray(values, dtype=np.float64)
    top = a.max() if a.size else -np.inf
    if not np.isfinite(top):
        return float(top)
    return float(top + np.log(np.exp(a - top).sum()))


def log_dm(counts, alpha) -> np.ndarray:
    """ln P(a given sequence with these category counts | Dirichlet(alpha)); last axis is the category."""
    counts = np.asarray(counts, dtype=np.float64)
    alpha = np.asarray(alpha, dtype=np.float64)
    return (gammaln(alpha.sum(-1)) - gammaln(alpha.sum(-1) + counts.sum(-1))
            + (gammaln(alpha + counts) - gammaln(alpha)).sum(-1))


def collapse(counts, merged: np.ndarray | None) -> np.ndarray:
    """Categories in ``merged`` summed into one last bucket (a Dirichlet stays a Dirichlet when its
    categories are aggregated: their parameters add)."""
    counts = np.asarray(counts, dtype=np.float64)
    if merged is None:
        return counts
    return np.concatenate([counts[..., ~merged], counts[..., merged].sum(-1, keepdims=True)], axis=-1)


def healthy_posterior(baseline_counts, merged: np.ndarray | None = None) -> tuple[np.ndarray, list[np.ndarray]]:
    """Posterior weights of the healthy prior's components and their updated Dirichlet parameters
    (over the collapsed categories when ``merged`` is given)."""
    n = collapse(baseline_counts, merged)
    alphas = [collapse(a, merged) for _, a in HEALTHY_COMPONENTS]
    logw = np.array([np.log(w) + log_dm(n, a) for (w, _), a in zip(HEALTHY_COMPONENTS, alphas)])
    return np.exp(logw - logsumexp(logw)), [a + n for a in alphas]


def log_healthy(part_counts, baseline_counts, merged: np.ndarray | None = None) -> float:
    """ln P(the part's sequence at one set-up | it behaves as the lot there); with ``merged``, only
    whether each capture fell in the merged categories or in which other one."""
    weights, alphas = healthy_posterior(baseline_counts, merged)
    part = collapse(part_counts, merged)
    return float(logsumexp([np.log(w) + log_dm(part, a) for w, a in zip(weights, alphas) if w > 0]))


def healthy_probabilities(baseline_counts) -> np.ndarray:
    """Predictive probability of each category for one more start of a healthy part at the set-up."""
    weights, alphas = healthy_posterior(baseline_counts)
    return sum(w * a / a.sum() for w, a in zip(weights, alphas))


def log_t(x, loc, scale, dof) -> np.ndarray:
    """ln of the Student t density of x (location, scale, degrees of freedom)."""
    return student_t.logpdf(x, dof, loc=loc, scale=scale)


def log_shifted(z, dof, sign: int) -> np.ndarray:
    """ln density of a standardised value z = noise + sign·u, noise ~ t(dof), u log-uniform on
    [SHIFT_MIN, SHIFT_MAX] (per unit of z); ``sign`` 0: either direction with equal odds.

    The integral over u is a trapezoid on a log grid joined with a dense grid around the kernel's
    peak at u = ±z, so that sharp kernels at large z are resolved.
    """
    z = np.atleast_1d(np.asarray(z, dtype=np.float64))
    dof = np.broadcast_to(np.asarray(dof, dtype=np.float64), z.shape)
    if sign == 0:
        return np.logaddexp(log_shifted(z, dof, +1), log_shifted(z, dof, -1)) - np.log(2.0)
    zs = sign * z
    local = np.clip(zs[:, None] + _LOCAL[None, :], SHIFT_MIN, SHIFT_MAX)
    u = np.sort(np.concatenate([np.broadcast_to(_SHIFT_GRID, (z.size, _SHIFT_GRID.size)), local], axis=1), axis=1)
    prior = 1.0 / (u * np.log(SHIFT_MAX / SHIFT_MIN))
    kernel = student_t.pdf(zs[:, None] - u, dof[:, None])
    f = kernel * prior
    integral = np.sum(0.5 * (f[:, 1:] + f[:, :-1]) * np.diff(u, axis=1), axis=1)
    return np.log(np.maximum(integral, 1e-300))
