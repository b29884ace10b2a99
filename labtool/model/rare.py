"""Stuck-at-zero probability at the ppm level, with a confidence interval, for one (ramp, temperature).

The standardised parameter space is the Monte Carlo's (:data:`labtool.model.montecarlo.VARIED`:
offset, saturation-current mismatch of each diode, resistors, capacitances, startup current,
leakages), restricted to the parameters the design varies (sigma > 0). The verdict of every sample
is the one used everywhere else: a full transient from the unpowered state measured by
labtool.measure (stuck = verdict ``stuck_at_zero`` under the given limits), so the estimate means
what a lot's stuck rate means. The DC escape condition (:func:`labtool.model.dc.startup_margin`)
only guides the search for the most probable failure point; transients verify and refine it and
decide every importance sample. Method and its limits: :mod:`labtool.model.reliability` and
docs/model.md. Behavioural model, not transistor-level sign-off.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import special

from labtool.errors import ModelError
from labtool.execute import Scheduler
from labtool.measure import Limits
from labtool.model import reliability
from labtool.model.dc import startup_margin
from labtool.model.design import resolve_params
from labtool.model.montecarlo import CHUNK, VARIED, no_failures, run_samples, sampled_values, sigmas

DEFENSIVE = 0.1  # share of the nominal density in the mixture
METHOD = (f"mixture importance sampling around the most probable stuck point(s) with a {DEFENSIVE:.0%} defensive "
          "nominal component; DC-guided multi-start search, scaled-sigma exploration; every sample a full "
          "transient measured by the engine")

# What each varied parameter is, in the words of the readable summary.
LABELS = {"amp_offset_v": "offset", "is_dev_q1": "Q1 saturation current", "is_dev_q2": "Q2 saturation current",
          "is_dev_q3": "Q3 saturation current", "r_dev": "resistors", "c_dev": "capacitances",
          "i_start_a": "startup current", "leak_q1_a": "Q1-node leakage", "leak_q2_a": "Q2-node leakage",
          "leak_out_a": "output leakage"}
_STARTUP_CURRENT_KINDS = ("inject", "pulldown")  # kinds that use i_start_a


@dataclass(frozen=True)
class MppCoordinate:
    """One parameter of the most probable stuck point: how many sigma from nominal, and its value there."""

    parameter: str
    sigma: float
    value: float
    nominal: float


@dataclass(frozen=True)
class RareStuckResult:
    """Stuck-at-zero probability of one condition by importance sampling (behavioural model, not sign-off)."""

    ramp_s: float
    temperature_c: float
    seed: int
    method: str
    p_stuck: float
    p_stuck_ci95: tuple[float, float]
    se: float
    n_transients: int  # every transient run, search included
    n_samples: int  # importance samples
    n_stuck: int  # stuck importance samples
    beta: float | None  # reliability index |u*| of the nearest stuck region (transient-verified)
    p_form: float | None  # first-order estimate Φ(−β)
    ess: float
    mpp: tuple[MppCoordinate, ...]  # largest |sigma| first
    regions: tuple[dict, ...]  # every stuck region kept: beta, found_by, mixture share, its point
    warnings: tuple[str, ...]
    n_failed: int  # transients that could not be simulated
    parameters: tuple[str, ...]  # the varied parameters searched (sigma > 0)
    failures: pd.DataFrame = field(repr=False, compare=False)
    samples: pd.DataFrame = field(repr=False, compare=False)  # the importance samples: draws, stuck, weight

    @property
    def rel_halfwidth(self) -> float | None:
        """Half-width of the 95 % interval relative to the estimate."""
        low, high = self.p_stuck_ci95
        return 0.5 * (high - low) / self.p_stuck if self.p_stuck > 0 else None

    def cause(self, limit: int = 3) -> str:
        """The most probable stuck point in words: "startup current −4.6 σ with capacitances +1.1 σ"."""
        main = [c for c in self.mpp if abs(c.sigma) >= 0.25 * abs(self.mpp[0].sigma) and abs(c.sigma) >= 0.1][:limit]
        words = [f"{LABELS[c.parameter]} {c.sigma:+.1f} σ".replace("-", "−") for c in main]
        return " with ".join([words[0], ", ".join(words[1:])]) if len(words) > 1 else (words[0] if words else "")

    def to_json_dict(self) -> dict:
        return {"method": self.method, "seed": self.seed, "ramp_s": self.ramp_s, "temperature_c": self.temperature_c,
                "p_stuck": self.p_stuck, "p_stuck_ci95": list(self.p_stuck_ci95), "p_stuck_se": self.se,
                "n_transients": self.n_transients, "n": self.n_samples, "n_stuck": self.n_stuck, "beta": self.beta,
                "p_form": self.p_form, "ess": self.ess, "mpp": [vars(c) for c in self.mpp],
                "regions": list(self.regions), "warnings": list(self.warnings), "n_failed": self.n_failed,
                "failed": self.failures.head(20).to_dict(orient="records")}


def active_parameters(design) -> list[str]:
    """The varied parameters that can move a part: sigma > 0 (and a startup current the kind uses, a
    non-zero nominal leakage)."""
    s = sigmas(design)
    out = []
    for name in VARIED:
        if not s[name] > 0:
            continue
        if name == "i_start_a" and not (design.startup_kind in _STARTUP_CURRENT_KINDS and design.i_start_a > 0):
            continue
        if name.startswith("leak_") and not getattr(design, name) > 0:
            continue
        out.append(name)
    return out


class _StuckModel:
    """The classifier (transients) and the guide (DC margin) over the active standardised parameters."""

    def __init__(self, design, ramp_s: float, temperature_c: float, limits: Limits, scheduler: Scheduler | None):
        self.design, self.ramp_s, self.temperature_c = design, float(ramp_s), float(temperature_c)
        self.limits, self.scheduler = limits, scheduler
        self.active = active_parameters(design)
        self.columns = [VARIED.index(name) for name in self.active]
        self.ids = itertools.count()
        self.failures: list[pd.DataFrame] = []

    def draws(self, u: np.ndarray) -> np.ndarray:
        z = np.zeros((len(u), len(VARIED)))
        z[:, self.columns] = u
        return z

    def _chunk(self, size: int) -> int:
        """One batch item for a few samples (runs in this process); an item per worker for more."""
        workers = self.scheduler.workers if self.scheduler is not None and self.scheduler.kind == "local" else 1
        return size if size <= 64 or workers <= 1 else min(CHUNK, math.ceil(size / workers))

    def classify(self, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        ids = np.array([next(self.ids) for _ in range(len(u))], dtype=np.int64)
        res = run_samples(self.design, self.draws(u), conditions=[(self.ramp_s, self.temperature_c)], sample_ids=ids,
                          limits=self.limits, scheduler=self.scheduler, chunk=self._chunk(len(u)))
        stuck = dict(zip(res.samples["sample"].to_numpy(), res.samples["stuck"].to_numpy()))
        if len(res.failures):
            self.failures.append(res.failures)
        broken = set(res.failures["sample"].astype(int))
        return np.array([bool(stuck.get(i, False)) for i in ids]), np.array([i in broken for i in ids])

    def guide(self, u: np.ndarray) -> np.ndarray:
        values = sampled_values(self.design, self.draws(u))
        p = resolve_params({**self.design.values(), **values}, self.temperature_c)
        p["ramp_s"] = self.ramp_s
        with np.errstate(all="ignore"):
            return np.asarray(startup_margin(p), dtype=float)

    def coordinates(self, u: np.ndarray) -> tuple[MppCoordinate, ...]:
        z = self.draws(u[None])
        values = sampled_values(self.design, z)
        nominal = sampled_values(self.design, np.zeros_like(z))
        coords = [MppCoordinate(name, float(z[0, VARIED.index(name)]), float(values[name][0]), float(nominal[name][0]))
                  for name in self.active]
        return tuple(sorted(coords, key=lambda c: -abs(c.sigma)))


def stuck_probability(design, *, ramp_s: float, temperature_c: float, n: int = 4000, seed: int = 1,
                      limits: Limits | None = None, scheduler: Scheduler | None = None, explore: int | None = None,
                      rel_halfwidth: float | None = 0.1, round_size: int = 500,
                      min_samples: int = 1000, near: "RareStuckResult | None" = None) -> RareStuckResult:
    """P(stuck at zero) of ``design`` at one condition, by mixture importance sampling (see the module).

    ``n``: most importance samples (transients); sampling stops earlier once the 95 % interval's
    half-width is within ``rel_halfwidth`` of the estimate (after ``min_samples``; None: always ``n``).
    ``explore``: scaled-sigma transients that look for stuck regions the DC guide does not see (default
    n/8, at least 32, at most 256). The same ``seed`` gives the same result, and the same base draws
    at every condition. ``near``: the
    result of a closely related design at this condition (a calibration's estimate, for the ends of
    its parameter intervals): its stuck points are re-verified and refined instead of searched anew."""
    if n < 2:
        raise ModelError(f"rare-event estimate needs n ≥ 2 importance samples (got {n})")
    model = _StuckModel(design, ramp_s, temperature_c, limits or Limits(), scheduler)
    d = len(model.active)
    if d == 0:
        raise ModelError("rare-event estimate: the design varies no parameter (every sigma is zero)")
    start = None
    if near is not None:
        if near.parameters != tuple(model.active):
            raise ModelError("rare-event estimate: the related result varies other parameters")
        start = [np.array([_sigma_at(reg, name) for name in model.active]) for reg in near.regions]
    explore = min(256, max(32, n // 8)) if explore is None else explore
    est = reliability.estimate(model.classify, d, seed=seed, n=n, guide=model.guide, explore=explore,
                               defensive=DEFENSIVE, rel_halfwidth=rel_halfwidth, round_size=round_size,
                               min_samples=min_samples, near=start)
    s = est.samples
    z = model.draws(s["u"])
    samples = pd.DataFrame({f"z_{name}": z[:, VARIED.index(name)] for name in model.active})
    samples["component"] = s["component"]
    samples["stuck"] = s["fails"]
    samples["failed"] = s["broken"]
    samples["weight"] = s["weight"]
    regions = tuple({"beta": r.beta, "found_by": r.found_by, "share": share,
                     "mpp": [vars(c) for c in model.coordinates(r.point)]}
                    for r, share in zip(est.regions, est.weights[1:]))
    failures = pd.concat(model.failures, ignore_index=True) if model.failures else no_failures()
    return RareStuckResult(
        ramp_s=float(ramp_s), temperature_c=float(temperature_c), seed=seed, method=METHOD, p_stuck=est.p,
        p_stuck_ci95=est.ci95, se=est.se, n_transients=est.n_evaluations, n_samples=est.n_samples,
        n_stuck=est.n_failing, beta=est.beta, p_form=float(special.ndtr(-est.beta)) if est.beta is not None else None,
        ess=est.ess, mpp=model.coordinates(est.regions[0].point) if est.regions else (), regions=regions,
        warnings=est.warnings, n_failed=len(failures), parameters=tuple(model.active), failures=failures,
        samples=samples)


def _sigma_at(region: dict, name: str) -> float:
    """The sigma of parameter ``name`` at a region's stuck point (as stored in ``regions``)."""
    return next(c["sigma"] for c in region["mpp"] if c["parameter"] == name)
