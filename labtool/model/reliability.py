"""Small failure probabilities in a standard-normal parameter space: search, then importance sampling.

The parameters of a part are independent standard normals u (d of them); a classifier says which
points fail (expensive: a full transient each); an optional guide g(u) (cheap: a DC margin,
negative where it predicts failure) steers the search. Published methods, all cited from memory:

- **Most probable failure point.** The reliability index β of Hasofer & Lind (J. Eng. Mech. Div.
  ASCE 100, 1974) is the distance from the origin to the nearest failure point u*; the first-order
  estimate is Φ(−β). The search is a constrained nearest-point search that needs only the sign of
  failure (a transient's verdict has no gradient, and the guide's margin may jump): along each start
  direction the boundary radius is found by subdividing a bracket, and a boundary point is moved to
  the local nearest point by response-surface steps (Bucher & Bourgund, Structural Safety 7, 1990):
  a plane fitted through boundary points on rays tilted around it, and that plane's nearest point.
  The guide's boundary is searched first from many directions (cheap); the classifier then finds its
  own boundary along the guide's directions and refines it the same way.
- **A second failure region.** A first-order search finds one local nearest point. Guards: the
  guide's search runs from several starts; an exploration stage classifies points drawn with
  scaled sigma (u ~ N(0, s²·I)) and turns every failing point that lies away from the known regions
  into a candidate of its own; and the sampling density keeps a defensive share of the nominal
  density, so the weights stay bounded (w ≤ 1/λ₀) wherever the failures are.
- **Estimate.** Mixture importance sampling as used for rare circuit failures (Kanj, Joshi, Nassif,
  DAC 2006): q(u) = λ₀·φ(u) + Σₖ λₖ·φ(u − u*ₖ), the defensive nominal component as in Hesterberg
  (Technometrics 37, 1995). With weights w = φ/q the estimator is p̂ = mean(1_F·w), its standard
  error the sample standard deviation of 1_F·w over √n, the 95 % interval p̂ ± 1.96·se (Owen, Monte
  Carlo theory, methods and examples, ch. 9). Effective sample size (Σ 1_F·w)²/Σ (1_F·w)²: how many
  equally weighted failing samples the estimate is worth (Owen ch. 9); a small one means the weights
  have degenerated and the interval is not to be trusted. With no failing sample the upper end is
  the exact one-sided bound for zero successes in n trials of probability ≥ λ₀·p (q ≥ λ₀·φ).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy import special

Classifier = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]]  # u (B, d) → (fails, broken), bool (B,)
Guide = Callable[[np.ndarray], np.ndarray]  # u (B, d) → margin (B,), negative where failure is predicted

Z95 = 1.959963984540054  # scipy.stats.norm.ppf(0.975)
R_MAX = 12.0  # farthest radius searched (σ): Φ(−12) ≈ 2e-33; nothing beyond matters
SAME_REGION_COS = 0.85  # failing directions closer than ~32° belong to one region
MIN_ESS = 30.0  # below this effective number of failing samples the weights count as degenerate
EXPLORE_SCALE = 2.5  # sigma scale of the exploration when nothing is known yet
MAX_NEW_REGIONS = 3  # exploration points verified as regions of their own, nearest first


@dataclass(frozen=True)
class FailureRegion:
    """A nearest failure point u* of one region (classifier-verified), its β = |u*| and how it was found."""

    point: np.ndarray
    beta: float
    found_by: str  # "guide" or "exploration"


@dataclass(frozen=True)
class TailEstimate:
    p: float
    se: float
    ci95: tuple[float, float]
    ess: float
    regions: tuple[FailureRegion, ...]  # nearest first
    weights: tuple[float, ...]  # mixture shares: defensive first, then one per region
    n_samples: int  # importance samples
    n_failing: int
    n_broken: int  # samples the classifier could not decide (counted as failing for the upper end only)
    n_evaluations: int  # classifier calls in total, search included
    warnings: tuple[str, ...]
    samples: dict = field(repr=False, compare=False)  # u, component, fails, broken, weight

    @property
    def beta(self) -> float | None:
        return self.regions[0].beta if self.regions else None


class _Counted:
    """The classifier, counting its calls."""

    def __init__(self, classify: Classifier):
        self.classify = classify
        self.calls = 0

    def __call__(self, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        u = np.atleast_2d(np.asarray(u, dtype=float))
        if not len(u):
            return np.zeros(0, bool), np.zeros(0, bool)
        self.calls += len(u)
        fails, broken = self.classify(u)
        return np.asarray(fails, bool), np.asarray(broken, bool)


def _unit(v: np.ndarray) -> np.ndarray:
    norm = np.linalg.norm(v, axis=-1, keepdims=True)
    return v / np.where(norm > 0, norm, 1.0)


# -- nearest failure points -----------------------------------------------------------------------
def distinct(points: list[np.ndarray], cos_same: float = SAME_REGION_COS) -> list[np.ndarray]:
    """Keep the nearest point of every group of directions closer than ``cos_same`` (points nearest first)."""
    kept: list[np.ndarray] = []
    for p in points:
        if not any(float(_unit(p) @ _unit(k)) > cos_same for k in kept):
            kept.append(p)
    return kept


# -- the classifier's boundary -------------------------------------------------------------------
def boundary_radii(classify: _Counted, directions: np.ndarray, guess: np.ndarray | None = None, *,
                   r_max: float = R_MAX, steps: int = 2, fan: int = 7) -> np.ndarray:
    """Radius of the first failing point along each unit direction; inf where nothing fails up to
    ``r_max``. A first call probes 0.7·guess, guess and r_max; then ``steps`` rounds split every open
    bracket by ``fan`` probes (1: bisection, the fewest evaluations; more: fewer rounds, which is what
    costs when each call is a batch), all rays in one batch per round. Returns the failing end of each
    bracket (2 rounds of 7 probes narrow it 64-fold)."""
    k = len(directions)
    guess = np.full(k, 0.5 * r_max) if guess is None else np.clip(np.asarray(guess, float), 0.3, r_max)
    near = 0.7 * guess
    fails, _ = classify(np.concatenate([directions * near[:, None], directions * guess[:, None],
                                        directions * r_max]))
    at_near, at_guess, at_max = fails[:k], fails[k:2 * k], fails[2 * k:]
    lo = np.where(at_near, 0.0, np.where(at_guess, near, guess))
    hi = np.where(at_near, near, np.where(at_guess, guess, np.where(at_max, r_max, np.inf)))
    fractions = np.arange(1, fan + 1) / (fan + 1)
    for _ in range(steps):
        idx = np.nonzero(np.isfinite(hi))[0]
        if not idx.size:
            break
        probes = lo[idx, None] + (hi - lo)[idx, None] * fractions[None, :]  # (rays, fan)
        f, _ = classify((directions[idx, None, :] * probes[:, :, None]).reshape(-1, directions.shape[1]))
        f = f.reshape(len(idx), fan)
        first = np.where(f.any(axis=1), np.argmax(f, axis=1), fan)  # first failing probe (fan: none)
        below = np.concatenate([lo[idx, None], probes], axis=1)[np.arange(len(idx)), first]
        above = np.concatenate([probes, hi[idx, None]], axis=1)[np.arange(len(idx)), first]
        lo[idx], hi[idx] = below, above
    return hi


def _tangent_basis(direction: np.ndarray) -> np.ndarray:
    """(d − 1, d) orthonormal vectors perpendicular to ``direction``."""
    d = direction.size
    q, _ = np.linalg.qr(np.column_stack([direction, np.eye(d)]))
    return q[:, 1:d].T


def _plane_nearest_point(points: np.ndarray) -> tuple[np.ndarray, float] | None:
    """Unit normal n and offset c > 0 of the plane n·u = c fitted through ``points`` (total least
    squares); None when it cannot be fitted or passes through the origin's side."""
    if len(points) < points.shape[1]:
        return None
    centre = points.mean(axis=0)
    normal = np.linalg.svd(points - centre)[2][-1]
    offset = float(normal @ centre)
    if offset < 0:
        normal, offset = -normal, -offset
    return (normal, offset) if offset > 0 else None


def refine(classify: _Counted, points: list[np.ndarray], *, rounds: int = 2, spread: float = 0.25,
           steps: int = 2, fan: int = 7, tol: float = 0.02) -> list[np.ndarray]:
    """Move boundary points towards the classifier's nearest failure points: boundary radii on rays
    tilted by ±``spread`` rad along every tangent direction, a plane fitted through those boundary
    points (a response-surface step), and that plane's nearest point, kept if its own ray fails
    nearer. All points' rays go in one batch per step; a point stops when a round gains less than
    ``tol`` in radius."""
    points = [np.asarray(p, float) for p in points]
    d = points[0].size if points else 0
    active = [k for k, p in enumerate(points) if d >= 2 and np.linalg.norm(p) > 0]
    tilt = math.tan(spread)
    for _ in range(rounds):
        if not active:
            break
        fans = []
        for k in active:
            axis = _unit(points[k])
            tangent = _tangent_basis(axis)
            fans.append(_unit(np.concatenate([axis + tilt * tangent, axis - tilt * tangent])))
        guess = np.concatenate([np.full(len(f), np.linalg.norm(points[k]) / math.cos(math.atan(tilt)))
                                for k, f in zip(active, fans)])
        radii = np.split(boundary_radii(classify, np.concatenate(fans), guess, steps=steps, fan=fan),
                         np.cumsum([len(f) for f in fans])[:-1])
        planes = {}
        for k, rays, r in zip(active, fans, radii):
            good = np.isfinite(r)
            plane = _plane_nearest_point(np.concatenate([rays[good] * r[good, None], points[k][None]]))
            if plane is not None:
                planes[k] = plane
        if not planes:
            break
        keys = list(planes)
        r_new = boundary_radii(classify, np.array([planes[k][0] for k in keys]), np.array([planes[k][1] for k in keys]),
                               steps=steps, fan=fan)
        still = []
        for k, r in zip(keys, r_new):
            gain = float(np.linalg.norm(points[k]) - r)
            if gain > 0:
                points[k] = planes[k][0] * r
            if gain >= tol:
                still.append(k)
        active = still
        tilt *= 0.5
    return points


# -- search ----------------------------------------------------------------------------------------
def _guide_classifier(guide: Guide) -> Classifier:
    """The guide as a classifier: fails where its margin is negative (no verdict where it is NaN)."""
    def classify(u):
        g = guide(u)
        return g < 0, np.zeros(len(u), bool)
    return classify


def start_directions(guide: Guide | None, d: int, rng: np.random.Generator, random_starts: int) -> np.ndarray:
    """Directions the search starts from: the guide's steepest descent at the origin (the first-order
    nearest-point direction), both senses of every axis, and ``random_starts`` random ones."""
    dirs = [np.eye(d), -np.eye(d), _unit(rng.standard_normal((random_starts, d)))]
    if guide is not None:
        h = 1e-3
        g = guide(np.concatenate([np.zeros((1, d)), h * np.eye(d)]))
        grad = (g[1:] - g[0]) / h
        if np.all(np.isfinite(grad)) and np.any(grad != 0):
            dirs.insert(0, _unit(-grad)[None])
    return np.concatenate(dirs)


def nearest_points(classify: _Counted, directions: np.ndarray, guess: np.ndarray | None = None, *,
                   steps: int = 2, fan: int = 7, rounds: int = 2, keep: int = 3) -> list[np.ndarray]:
    """Boundary points along ``directions``, the ``keep`` nearest distinct ones refined (:func:`refine`),
    nearest first."""
    radii = boundary_radii(classify, directions, guess, steps=steps, fan=fan)
    found = [directions[k] * radii[k] for k in np.argsort(radii) if np.isfinite(radii[k])]
    refined = refine(classify, distinct(found)[:keep], rounds=rounds, steps=steps, fan=fan)
    return distinct(sorted(refined, key=lambda p: float(np.linalg.norm(p))))


def find_regions(classify: _Counted, d: int, rng: np.random.Generator, guide: Guide | None = None, *,
                 random_starts: int = 4, explore: int = 256, beta_window: float = 1.0) -> list[FailureRegion]:
    """Failure regions nearest first. The guide's nearest points from many start directions (cheap:
    fine subdivision, several refinement rounds), verified and refined with the classifier; then an
    exploration of ``explore`` points with scaled sigma for regions the guide does not see. Regions
    farther than β_min + ``beta_window`` are dropped (at ppm levels their first-order share is below
    about 1 % of the nearest one's)."""
    starts = start_directions(guide, d, rng, random_starts)
    explore_eps = rng.standard_normal((explore, d))
    candidates: list[tuple[np.ndarray, float, str]] = []  # (direction, radius guess, found_by)
    if guide is not None:
        cheap = _Counted(_guide_classifier(guide))
        for p in nearest_points(cheap, starts, steps=4, fan=15, rounds=3):  # brackets narrowed 16⁴-fold
            candidates.append((_unit(p), float(np.linalg.norm(p)), "guide"))
    regions = _verify(classify, candidates)
    if explore:
        # twice the scale reaches a region at the nearest β with odds Φ(−2) ≈ 2 % per point; with no
        # region known yet, regions up to β ≈ 5 at the same odds
        scale = max(1.5, regions[0].beta / 2.0) if regions else EXPLORE_SCALE
        u = scale * explore_eps
        fails, _ = classify(u)
        news: list[FailureRegion] = []  # failing points no region explains, as rough regions of their own
        for p in sorted(u[fails], key=lambda x: float(np.linalg.norm(x))):
            if not explained(p, regions + news):
                news.append(FailureRegion(p, float(np.linalg.norm(p)), "exploration"))
        regions += _verify(classify, [(_unit(r.point), r.beta, r.found_by) for r in news[:MAX_NEW_REGIONS]])
    regions = sorted(regions, key=lambda r: r.beta)
    merged: list[FailureRegion] = []
    for r in regions:
        if not any(float(_unit(r.point) @ _unit(m.point)) > SAME_REGION_COS for m in merged):
            merged.append(r)
    return [r for r in merged if r.beta <= merged[0].beta + beta_window] if merged else []


def _verify(classify: _Counted, candidates: list[tuple[np.ndarray, float, str]]) -> list[FailureRegion]:
    """Classifier boundary along each candidate direction, then :func:`refine` of the boundary points."""
    if not candidates:
        return []
    dirs = np.array([c[0] for c in candidates])
    radii = boundary_radii(classify, dirs, np.array([c[1] for c in candidates]))
    found = [(direction * r, how) for (direction, _, how), r in zip(candidates, radii) if np.isfinite(r)]
    points = refine(classify, [p for p, _ in found])
    return [FailureRegion(p, float(np.linalg.norm(p)), how) for p, (_, how) in zip(points, found)]


def explained(point: np.ndarray, regions: list[FailureRegion], slack: float = 0.25) -> bool:
    """Does a known region account for this failing point: is it beyond (or near) the region's tangent
    plane at its nearest point, u·α ≥ (1 − ``slack``)·β? (First order: such points are that region's.)"""
    return any(float(point @ _unit(r.point)) >= (1.0 - slack) * r.beta for r in regions)


# -- importance sampling -----------------------------------------------------------------------------
def mixture_shares(regions: list[FailureRegion], defensive: float) -> np.ndarray:
    """λ₀ = ``defensive`` for the nominal density, the rest over the regions in proportion to their
    first-order probabilities Φ(−βₖ), none below a tenth of the largest."""
    if not regions:
        return np.array([1.0])
    log_p = np.array([special.log_ndtr(-r.beta) for r in regions])
    share = np.maximum(np.exp(log_p - log_p.max()), 0.1)
    return np.concatenate([[defensive], (1.0 - defensive) * share / share.sum()])


def log_weights(u: np.ndarray, centres: np.ndarray, shares: np.ndarray) -> np.ndarray:
    """ln(φ(u)/q(u)) for q = Σ shares_k·φ(u − centre_k) (centre 0 is the nominal density)."""
    terms = np.log(shares)[None, :] + u @ centres.T - 0.5 * np.sum(centres * centres, axis=1)[None, :]
    return -special.logsumexp(terms, axis=1)


def _statistics(fw: np.ndarray) -> tuple[float, float]:
    n = fw.size
    return float(fw.mean()), (float(fw.std(ddof=1) / math.sqrt(n)) if n > 1 else math.inf)


def importance_sample(classify: _Counted, regions: list[FailureRegion], d: int, seed: int, *, n: int,
                      defensive: float = 0.1, round_size: int = 500, min_samples: int = 1000,
                      rel_halfwidth: float | None = 0.1) -> dict:
    """Mixture importance sampling in rounds of ``round_size`` until ``n`` samples, or earlier once the
    95 % interval's half-width is within ``rel_halfwidth`` of the estimate (after ``min_samples``).
    The draws of round r come from their own stream of ``seed``, so the same seed gives the same base
    draws whatever the regions (common random numbers across conditions)."""
    shares = mixture_shares(regions, defensive)
    centres = np.concatenate([np.zeros((1, d))] + [r.point[None] for r in regions])
    cum = np.cumsum(shares)
    parts = []
    total = 0
    for round_ in range(math.ceil(n / round_size)):
        rng = np.random.default_rng([seed, 3, round_])
        m = min(round_size, n - total)
        eps = rng.standard_normal((round_size, d))[:m]
        pick = np.minimum(np.searchsorted(cum, rng.random(round_size)[:m], side="right"), len(shares) - 1)
        u = centres[pick] + eps
        fails, broken = classify(u)
        parts.append((u, pick, fails, broken & ~fails))
        total += m
        fw = np.concatenate([f * np.exp(log_weights(x, centres, shares)) for x, _, f, _ in parts])
        p, se = _statistics(fw)
        if rel_halfwidth is not None and total >= min_samples and fw.any() and Z95 * se <= rel_halfwidth * p:
            break
    u, pick, fails, broken = (np.concatenate(x) for x in zip(*parts))
    return {"u": u, "component": pick, "fails": fails, "broken": broken,
            "weight": np.exp(log_weights(u, centres, shares)), "shares": shares}


def summarise_samples(s: dict, defensive_share: float) -> tuple[float, float, tuple[float, float], float, list[str]]:
    """p̂, se, 95 % interval, effective sample size and warnings from the weighted samples."""
    w, fails, broken = s["weight"], s["fails"], s["broken"]
    n = w.size
    fw = fails * w
    p, se = _statistics(fw)
    warnings = []
    if not fails.any():
        # q ≥ λ₀·φ, so P_q(fail) ≥ λ₀·p: the exact one-sided bound for zero in n (1 − 0.05^(1/n)) over λ₀
        high = -math.expm1(math.log(0.05) / n) / defensive_share
        ci, ess = (0.0, min(high, 1.0)), 0.0
        warnings.append(f"no failing sample among {n}: the interval is an upper bound only")
    else:
        ci = (max(p - Z95 * se, 0.0), p + Z95 * se)
        ess = float(fw.sum() ** 2 / np.sum(fw * fw))
        if ess < MIN_ESS:
            warnings.append(f"the importance weights degenerate: the estimate rests on about {ess:.0f} effective "
                            f"failing samples, so its interval may be too narrow; use more samples")
    if broken.any():
        p_hi, se_hi = _statistics((fails | broken) * w)
        ci = (ci[0], max(ci[1], p_hi + Z95 * se_hi))
        warnings.append(f"{int(broken.sum())} samples could not be simulated: counted as not failing in the "
                        f"estimate and as failing in the upper end of the interval")
    return p, se, ci, ess, warnings


def estimate(classify: Classifier, d: int, *, seed: int, n: int = 4000, guide: Guide | None = None,
             explore: int = 256, defensive: float = 0.1, rel_halfwidth: float | None = 0.1,
             round_size: int = 500, min_samples: int = 1000, near: list[np.ndarray] | None = None) -> TailEstimate:
    """The failure probability of u ~ N(0, I_d): regions (:func:`find_regions`), then mixture importance
    sampling of up to ``n`` points (:func:`importance_sample`). Reproducible by ``seed``.

    ``near``: nearest failure points of a closely related problem (the same design with slightly other
    parameters); the search then only re-verifies and refines them, without the guide's search and the
    exploration (the guard against other regions was run for the related problem)."""
    counted = _Counted(classify)
    if near is not None:
        regions = _verify(counted, [(_unit(p), float(np.linalg.norm(p)), "related estimate") for p in near])
    else:
        regions = find_regions(counted, d, np.random.default_rng([seed, 2]), guide, explore=explore)
    warnings = []
    if not regions:
        warnings.append("no failure region found within β ≤ 12 by the search: sampling the nominal density")
    s = importance_sample(counted, regions, d, seed, n=n, defensive=defensive, round_size=round_size,
                          min_samples=min_samples, rel_halfwidth=rel_halfwidth)
    p, se, ci, ess, more = summarise_samples(s, float(s["shares"][0]))
    return TailEstimate(p=p, se=se, ci95=ci, ess=ess, regions=tuple(regions),
                        weights=tuple(float(x) for x in s["shares"]), n_samples=int(s["u"].shape[0]),
                        n_failing=int(s["fails"].sum()), n_broken=int(s["broken"].sum()),
                        n_evaluations=counted.calls, warnings=tuple(warnings + more), samples=s)
