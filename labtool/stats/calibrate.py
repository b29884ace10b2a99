"""Calibration of startup-model parameters to a measured lot, and stuck-at-zero ppm where nobody measured.

Method (simulated likelihood with common random numbers):
- Data: per measured set-up (ramp_s, temperature_c) the delays of the captures that came up and the
  count stuck at zero of the powered captures (``no_supply`` left out).
- Likelihood of a parameter vector θ: the model's Monte Carlo at every measured set-up with one fixed
  seed (the same simulated parts for every θ, so the surface is smooth in θ rather than noisy).
  Delays: Gaussian synthetic likelihood per set-up (S. N. Wood, Nature 466, 2010): the measured
  delays under a normal with the simulated delays' mean and standard deviation. Stuck counts:
  binomial with the simulated stuck probability smoothed to (k + ½)/(N + 1), so that a finite
  Monte Carlo never claims a probability of exactly 0 or 1.
- Search in ln θ (parameters are positive scales): coordinate line searches, a factor-3 bracket and
  then bounded Brent (scipy.optimize.minimize_scalar) inside it.
- Intervals: one parameter, profile likelihood (where the log-likelihood has fallen by
  χ²₁(0.95)/2 = 1.921, found by two secant steps on √drop); several, Wald intervals in ln θ from a
  central-difference Hessian. Both are stated in the result. The simulated parts are a finite sample
  too: the half-widths in ln θ are widened by √(1 + n_measured/n_simulated), the usual variance factor
  1 + 1/S of simulation estimators with S simulated draws per observation (D. McFadden,
  Econometrica 57(5), 1989; Gouriéroux & Monfort, Simulation-Based Econometric Methods, 1996).
- Prediction (field ppm per corner): the calibrated design's stuck-at-zero probability at set-ups
  not measured, by the rare-event estimator of labtool.model.rare (the most probable stuck point,
  then mixture importance sampling; every sample a full transient measured by the engine), so ppm
  and sub-ppm rates get an interval instead of "0 stuck in N". Stuck ppm at the estimate, with the
  envelope of the 95 % intervals over the estimate and the ends of the parameter intervals, which
  covers sampling and parameter uncertainty together (conservatively). The same seed at every
  corner and parameter point: common random numbers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable, Mapping, Sequence

import numpy as np
import pandas as pd
from scipy import stats
from scipy.optimize import minimize_scalar

from labtool.errors import UsageError
from labtool.execute import Scheduler
from labtool.stats.predictions import model_conditions
from labtool.stats.setups import counted
from labtool.stats.table import STUCK, plain, require_columns

CAPACITANCE_SCALE = "c_scale"  # virtual parameter: multiplies every capacitance of the design
PROFILE_DROP = stats.chi2.ppf(0.95, 1) / 2.0  # 1.921
_BRACKET = math.log(3.0)
_SEARCH_LIMIT = math.log(100.0)  # never more than 100× from the starting value
_TOL = 0.01  # in ln θ: 1 %
_MIN_SIM_DELAYS = 3
_NO_DELAY_PENALTY = -50.0  # log-likelihood per measured delay when the model gives (almost) none


@dataclass(frozen=True)
class ParameterEstimate:
    name: str
    initial: float
    estimate: float
    ci95_low: float | None
    ci95_high: float | None
    interval: str  # how the interval was found, or why an end is missing


@dataclass(frozen=True)
class StuckPrediction:
    ramp_s: float
    temperature_c: float
    n_samples: int  # importance samples at the estimate
    n_stuck: int  # stuck among them (they are drawn around the stuck point: not a rate)
    stuck_ppm: float
    stuck_ppm_low: float
    stuck_ppm_high: float
    beta: float | None = None  # reliability index of the nearest stuck region at the estimate
    n_transients: int = 0  # transients over all parameter points, searches included
    method: str = ""


@dataclass(frozen=True)
class CalibrationResult:
    parameters: tuple[ParameterEstimate, ...]
    log_likelihood: float
    log_likelihood_initial: float
    n_evaluations: int
    n_captures: int
    setups: tuple[tuple[float, float], ...]
    samples_per_setup: int
    seed: int
    predictions: tuple[StuckPrediction, ...]
    design: object = field(compare=False, repr=False)
    method: str = "Gaussian synthetic likelihood + binomial stuck likelihood, common random numbers"

    def to_json_dict(self) -> dict:
        return {"parameters": [{k: plain(v) for k, v in vars(p).items()} for p in self.parameters],
                "log_likelihood": self.log_likelihood, "log_likelihood_initial": self.log_likelihood_initial,
                "n_evaluations": self.n_evaluations, "n_captures": self.n_captures,
                "setups": [{"ramp_s": r, "temperature_c": t} for r, t in self.setups],
                "samples_per_setup": self.samples_per_setup, "seed": self.seed, "method": self.method,
                "predictions": [{k: plain(v) for k, v in vars(p).items()} for p in self.predictions]}

    def table(self) -> pd.DataFrame:
        return pd.DataFrame([vars(p) for p in self.parameters])

    def prediction_table(self) -> pd.DataFrame:
        return pd.DataFrame([vars(p) for p in self.predictions])


# -- parameters ---------------------------------------------------------------------------------
def _capacitances(design) -> list[str]:
    from labtool.model import PARAMS

    return [p.name for p in PARAMS if p.section == "capacitance"]


def parameter_value(design, name: str) -> float:
    if name == CAPACITANCE_SCALE:
        return 1.0
    if not hasattr(design, name):
        raise UsageError(f"--fit {name}: not a design parameter (or {CAPACITANCE_SCALE} for all capacitances)")
    value = getattr(design, name)
    if not isinstance(value, (int, float)) or isinstance(value, bool) or not value > 0 or not math.isfinite(value):
        raise UsageError(f"--fit {name}: needs a positive number in the design to fit on a log scale (is {value!r})")
    return float(value)


def with_parameters(design, values: Mapping[str, float]):
    """The design with fitted values; ``c_scale`` multiplies every capacitance."""
    changes = {k: v for k, v in values.items() if k != CAPACITANCE_SCALE}
    if CAPACITANCE_SCALE in values:
        changes.update({c: getattr(design, c) * values[CAPACITANCE_SCALE] for c in _capacitances(design)})
    return design.replace(**changes)


# -- data and likelihood ------------------------------------------------------------------------
@dataclass(frozen=True)
class SetupData:
    delays_s: np.ndarray
    n_stuck: int
    n: int


def lot_data(measurements: pd.DataFrame) -> dict[tuple[float, float], SetupData]:
    """Per (ramp_s, temperature_c): delays of captures that came up and stayed (labtool.stats.setups),
    stuck count of powered captures."""
    powered = measurements[measurements["verdict"] != "no_supply"]
    out = {}
    for (r, t), g in powered.groupby(["ramp_s", "temperature_c"]):
        out[(float(r), float(t))] = SetupData(counted(g), int((g["verdict"] == STUCK).sum()), len(g))
    return out


def synthetic_log_likelihood(data: Mapping[tuple[float, float], SetupData], samples: pd.DataFrame) -> float:
    total = 0.0
    for (r, t), g in samples.groupby(["ramp_s", "temperature_c"]):
        obs = data.get((float(r), float(t)))
        if obs is None:
            continue
        stuck = g["stuck"].to_numpy(bool)
        p = (stuck.sum() + 0.5) / (stuck.size + 1.0)
        total += obs.n_stuck * math.log(p) + (obs.n - obs.n_stuck) * math.log1p(-p)
        sim = g.loc[~stuck, "delay_s"].to_numpy(np.float64)
        sim = sim[np.isfinite(sim)]
        if obs.delays_s.size == 0:
            continue
        if sim.size < _MIN_SIM_DELAYS:
            total += _NO_DELAY_PENALTY * obs.delays_s.size
            continue
        mu, sd = sim.mean(), sim.std(ddof=1)
        sd = max(sd, 1e-3 * abs(mu), 1e-12)
        z = (obs.delays_s - mu) / sd
        total += float(-0.5 * np.dot(z, z) - obs.delays_s.size * math.log(sd * math.sqrt(2 * math.pi)))
    return total


# -- search -------------------------------------------------------------------------------------
class _Objective:
    """−log-likelihood of ln θ, cached (each evaluation is a Monte Carlo run)."""

    def __init__(self, fn: Callable[[np.ndarray], float]):
        self.fn = fn
        self.cache: dict[tuple, float] = {}

    def __call__(self, u: np.ndarray) -> float:
        key = tuple(np.round(u, 6))
        if key not in self.cache:
            self.cache[key] = -self.fn(np.asarray(u, float))
        return self.cache[key]


def _vertex(x: np.ndarray, f: np.ndarray) -> tuple[float, float]:
    """Vertex and curvature a of the parabola f ≈ f0 + a (x − v)² through three points."""
    a, b, _ = np.polyfit(x, f, 2)
    return (-b / (2 * a) if a > 0 else float("nan")), float(a)


def _line_search(obj: _Objective, u: np.ndarray, i: int, u0: np.ndarray) -> tuple[np.ndarray, float]:
    """Minimise along coordinate i: factor-3 bracket within the search limits, then bounded Brent
    (``scipy.optimize.minimize_scalar``) inside it. Returns the best point and the local curvature
    of −ln L along i (from the three evaluated points around the best)."""
    pts: dict[float, float] = {}

    def at(x):
        v = u.copy()
        v[i] = x
        pts[float(x)] = obj(v)
        return pts[float(x)]

    lo_lim, hi_lim = u0[i] - _SEARCH_LIMIT, u0[i] + _SEARCH_LIMIT
    for x in (u[i], u[i] - _BRACKET, u[i] + _BRACKET):
        at(x)
    while True:
        xs = sorted(pts)
        best = min(pts, key=pts.get)
        if best == xs[0] and best - _BRACKET >= lo_lim:
            at(best - _BRACKET)
        elif best == xs[-1] and best + _BRACKET <= hi_lim:
            at(best + _BRACKET)
        else:
            break
    k = xs.index(best)
    if 0 < k < len(xs) - 1:  # bracketed (at a search limit the limit is the answer)
        minimize_scalar(at, bounds=(xs[k - 1], xs[k + 1]), method="bounded", options={"xatol": _TOL})
    xs = sorted(pts)
    best = min(pts, key=pts.get)
    k = xs.index(best)
    curvature = (_vertex(np.array(xs[k - 1:k + 2]), np.array([pts[x] for x in xs[k - 1:k + 2]]))[1]
                 if 0 < k < len(xs) - 1 else 0.0)
    out = u.copy()
    out[i] = best
    return out, curvature


def _profile_interval(obj: _Objective, u: np.ndarray, curvature: float) -> tuple[float | None, float | None]:
    """Both ends where −ln L has risen by PROFILE_DROP (one parameter), by two secant steps on √drop
    (exact for a quadratic −ln L, whose √drop is linear in the distance)."""
    f_best = obj(u)
    ends = []
    target = math.sqrt(PROFILE_DROP)
    for sign in (-1.0, 1.0):
        d = math.sqrt(PROFILE_DROP / curvature) if curvature > 0 else _BRACKET
        tried = []
        for _ in range(2):
            d = min(d, _SEARCH_LIMIT)
            root_drop = math.sqrt(max(obj(u + sign * d) - f_best, 0.0))
            tried.append((d, root_drop))
            if abs(root_drop - target) < 1e-3 * target:
                break
            d = d * 3.0 if root_drop == 0 else d * target / root_drop
        (d1, s1), (d2, s2) = tried[0], tried[-1]
        if abs(s2 - target) < 1e-3 * target:
            d_end = d2
        elif s2 != s1:
            d_end = d1 + (target - s1) * (d2 - d1) / (s2 - s1)
        else:
            d_end = float("nan")
        ends.append(u[0] + sign * d_end if math.isfinite(d_end) and 0 < d_end <= _SEARCH_LIMIT else None)
    return ends[0], ends[1]


def _wald_intervals(obj: _Objective, u: np.ndarray, h: float = 0.1) -> list[tuple[float | None, float | None]]:
    p = u.size
    f0 = obj(u)
    hess = np.zeros((p, p))
    e = np.eye(p) * h
    for i in range(p):
        hess[i, i] = (obj(u + e[i]) - 2 * f0 + obj(u - e[i])) / h ** 2
        for j in range(i):
            hess[i, j] = hess[j, i] = (obj(u + e[i] + e[j]) - obj(u + e[i] - e[j]) - obj(u - e[i] + e[j])
                                       + obj(u - e[i] - e[j])) / (4 * h * h)
    try:
        cov = np.linalg.inv(hess)
    except np.linalg.LinAlgError:
        return [(None, None)] * p
    out = []
    for i in range(p):
        if not cov[i, i] > 0 or np.any(np.linalg.eigvalsh(hess) <= 0):
            out.append((None, None))
        else:
            s = 1.959964 * math.sqrt(cov[i, i])
            out.append((u[i] - s, u[i] + s))
    return out


# -- prediction ---------------------------------------------------------------------------------
def default_prediction_setups(design, measured: Sequence[tuple[float, float]]) -> list[tuple[float, float]]:
    """Corners of the design's field ramps × temperatures (slowest and fastest ramp, coldest and hottest
    temperature) that were not measured; the slowest-coldest corner first."""
    ramps, temps = tuple(design.ramp_times_s), tuple(design.temperatures_c)
    corners = [(max(ramps), min(temps)), (max(ramps), max(temps)), (min(ramps), min(temps)), (min(ramps), max(temps))]
    seen = {(round(r, 12), round(t, 6)) for r, t in measured}
    return [c for c in dict.fromkeys(corners) if (round(c[0], 12), round(c[1], 6)) not in seen]


def _predict(design_at: Callable[[np.ndarray], object], points: list[np.ndarray], setups, n: int, *, seed: int,
             scheduler: Scheduler | None, limits=None) -> tuple[StuckPrediction, ...]:
    """Stuck ppm per set-up by importance sampling at every parameter point (estimate first): the
    estimate's value and the envelope of all the points' 95 % intervals."""
    from labtool.model.rare import stuck_probability

    out = []
    for r, t in setups:
        runs = [stuck_probability(design_at(points[0]), ramp_s=r, temperature_c=t, n=n, seed=seed, limits=limits,
                                  scheduler=scheduler)]
        runs += [stuck_probability(design_at(u), ramp_s=r, temperature_c=t, n=n, seed=seed, limits=limits,
                                   scheduler=scheduler, near=runs[0]) for u in points[1:]]
        first = runs[0]
        out.append(StuckPrediction(
            ramp_s=r, temperature_c=t, n_samples=first.n_samples, n_stuck=first.n_stuck, stuck_ppm=1e6 * first.p_stuck,
            stuck_ppm_low=1e6 * min(x.p_stuck_ci95[0] for x in runs),
            stuck_ppm_high=1e6 * max(x.p_stuck_ci95[1] for x in runs), beta=first.beta,
            n_transients=sum(x.n_transients for x in runs), method=first.method))
    return tuple(out)


# -- entry point --------------------------------------------------------------------------------
def calibrate(measurements: pd.DataFrame, design, fit: Sequence[str] = (CAPACITANCE_SCALE,), *, n: int = 60,
              seed: int = 1, predict_at: Sequence[tuple[float, float]] | None = None, n_predict: int = 200,
              scheduler: Scheduler | None = None, limits=None) -> CalibrationResult:
    """Fit ``fit`` (design parameter names, or ``c_scale``) to the measured lot; predict stuck ppm at
    ``predict_at`` (default: unmeasured corners of the design's field ramps and temperatures).
    ``limits``: the limits the lot was measured with; every simulated part is measured by them."""
    from labtool.model import monte_carlo

    if measurements.empty:
        raise UsageError("no measurements: run `labtool measure CAMPAIGN` first")
    require_columns(measurements, ["verdict", "delay_s"], "calibrate")
    fit = tuple(dict.fromkeys(fit))
    if not fit:
        raise UsageError("--fit: name at least one parameter")
    setups = model_conditions(measurements)
    data = lot_data(measurements)
    initial = np.array([parameter_value(design, name) for name in fit])
    u0 = np.log(initial)

    def simulate(u: np.ndarray, at, count: int) -> pd.DataFrame:
        d = with_parameters(design, dict(zip(fit, np.exp(u))))
        return monte_carlo(d, conditions=list(at), n=count, seed=seed, limits=limits, scheduler=scheduler).samples

    obj = _Objective(lambda u: synthetic_log_likelihood(data, simulate(u, setups, n)))
    f_initial = obj(u0)
    u = u0.copy()
    curvature = 0.0
    for _ in range(1 if len(fit) == 1 else 2):
        for i in range(len(fit)):
            u, curvature = _line_search(obj, u, i, u0)
    if len(fit) == 1:
        intervals, how = [_profile_interval(obj, u, curvature)], "profile likelihood"
    else:
        intervals, how = _wald_intervals(obj, u), "Wald (ln θ)"
    widen = math.sqrt(1.0 + sum(d.n for d in data.values()) / (n * len(setups)))
    intervals = [(None if lo is None else ui - widen * (ui - lo), None if hi is None else ui + widen * (hi - ui))
                 for ui, (lo, hi) in zip(u, intervals)]
    params = []
    for name, x0, ui, (lo, hi) in zip(fit, initial, u, intervals):
        if lo is not None and hi is not None:
            label = how
        elif lo is None and hi is None:
            label = "not identified (the likelihood is flat here)"
        else:
            label = f"{how}; {'lower' if lo is None else 'upper'} end not reached within 100× of the start"
        params.append(ParameterEstimate(name=name, initial=float(x0), estimate=float(math.exp(ui)),
                                        ci95_low=math.exp(lo) if lo is not None else None,
                                        ci95_high=math.exp(hi) if hi is not None else None,
                                        interval=label))
    calibrated = with_parameters(design, {p.name: p.estimate for p in params})
    at = list(predict_at) if predict_at is not None else default_prediction_setups(design, setups)
    points = [u]
    for i, p in enumerate(params):
        for end in (p.ci95_low, p.ci95_high):
            if end is not None:
                v = u.copy()
                v[i] = math.log(end)
                points.append(v)
    design_at = lambda v: with_parameters(design, dict(zip(fit, np.exp(v))))  # noqa: E731
    predictions = (_predict(design_at, points, at, n_predict, seed=seed, scheduler=scheduler, limits=limits)
                   if at else ())
    return CalibrationResult(parameters=tuple(params), log_likelihood=-obj(u), log_likelihood_initial=-f_initial,
                             n_evaluations=len(obj.cache), n_captures=sum(d.n for d in data.values()),
                             setups=tuple(setups), samples_per_setup=n, seed=seed, predictions=predictions,
                             design=calibrated)


# -- design file out ----------------------------------------------------------------------------
def _toml_value(value) -> str:
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, (tuple, list)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, float):
        return "inf" if value == math.inf else "-inf" if value == -math.inf else repr(value)
    return repr(value)


def design_toml(design, header: str = "") -> str:
    """The design as a TOML design file (every parameter, by section)."""
    from labtool.model import PARAMS

    lines = [f"# {line}" for line in header.splitlines()]
    section = None
    for p in PARAMS:
        if p.section != section:
            section = p.section
            lines += ["", f"[{section}]"]
        lines.append(f"{p.name} = {_toml_value(getattr(design, p.name))}")
    return "\n".join(lines).lstrip("\n") + "\n"


def write_design(design, path, header: str = "") -> None:
    """Write the design TOML atomically (temporary file, then rename)."""
    from pathlib import Path

    from labtool.atomic import write_atomic

    text = design_toml(design, header)
    write_atomic(Path(path), lambda tmp: tmp.write_text(text, encoding="utf-8"), "calibrated design")
