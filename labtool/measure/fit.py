"""Delayed first- and second-order step models fitted by least squares on the transition window.

The generic fitter :func:`fit_curve` is scipy's trust-region reflective least squares
(``scipy.optimize.least_squares``) with an exact Jacobian by complex-step differentiation (Squire &
Trapp, SIAM Review 40(1), 1998), so standard errors come from the true Jacobian at the optimum:
cov = s²·(JᵀJ)⁻¹ with s² = RSS/(n − p) (the usual nonlinear-regression estimate, as used by NIST StRD).

The step models (Ogata, Modern Control Engineering, §5-3), with s = max(t − t_d, 0):

* first order:  y = base + amp·(1 − exp(−s/τ))
* second order: y = base + amp·(1 − e^(−ζωn·s)·(cos ωd·s + ζ/√(1−ζ²)·sin ωd·s)), ωd = ωn√(1−ζ²), 0 < ζ < 1

They are fitted on the block-averaged transition window (not the whole record), in time units of
the measured 10–90 % transition duration so the parameters are of order one; the initial guess comes
from the crossings (τ = rise/ln 9 for first order; for second order ζ from the measured overshoot,
%OS = 100·exp(−ζπ/√(1−ζ²)), and ωn from the rise time of the unit response with that ζ). The order is
the one with the lower Bayesian information criterion; ringing is reported only when the second order
wins and its first overshoot stands clear of the residual noise.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np
from scipy.optimize import least_squares

from labtool.measure.decimate import block_means

ZETA_MIN, ZETA_MAX = 1e-3, 0.999
_COMPLEX_STEP = 1e-30
RING_SIGMAS = 3.0  # the first overshoot must exceed 3 residual sigmas to count as an oscillation


@dataclass(frozen=True)
class FitResult:
    """Parameters of a least-squares fit with their standard errors (None when not estimable)."""

    names: tuple[str, ...]
    values: tuple[float, ...]
    stderr: tuple[float | None, ...]
    rss: float
    n: int
    converged: bool

    def __getitem__(self, name: str) -> float:
        return self.values[self.names.index(name)]

    def error(self, name: str) -> float | None:
        return self.stderr[self.names.index(name)]

    @property
    def aic(self) -> float:
        """Akaike information criterion for Gaussian least squares: n·ln(RSS/n) + 2k."""
        return self.n * math.log(max(self.rss, 1e-300) / self.n) + 2 * len(self.names)

    @property
    def bic(self) -> float:
        """Bayesian (Schwarz) information criterion: n·ln(RSS/n) + k·ln n."""
        return self.n * math.log(max(self.rss, 1e-300) / self.n) + len(self.names) * math.log(self.n)


def _complex_step_jacobian(model: Callable, x: np.ndarray, p: np.ndarray) -> np.ndarray:
    jac = np.empty((x.size, p.size))
    for j in range(p.size):
        dp = p.astype(complex)
        dp[j] += 1j * _COMPLEX_STEP
        jac[:, j] = model(x, dp).imag / _COMPLEX_STEP
    return jac


def fit_curve(model: Callable[[np.ndarray, np.ndarray], np.ndarray], x, y, p0: Sequence[float], *,
              names: Sequence[str], bounds=(-np.inf, np.inf), tol: float = 1e-15, max_nfev: int | None = None,
              search_jacobian: str = "exact") -> FitResult:
    """Least-squares fit of ``model(x, p)`` to ``y`` from ``p0``.

    ``model`` must accept complex parameters (written with numpy functions and comparisons on the
    real part), which gives an exact Jacobian. The standard errors always use it; the search may use
    cheaper forward differences instead (``search_jacobian="2-point"``): they steer the iterations as
    well on smooth models and cost real evaluations only.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    p0 = np.asarray(p0, dtype=np.float64)
    lo, hi = np.broadcast_to(bounds[0], p0.shape), np.broadcast_to(bounds[1], p0.shape)
    p0 = np.clip(p0, lo, hi)
    with np.errstate(over="ignore", invalid="ignore"):
        res = least_squares(lambda p: model(x, p).real - y, p0,
                            jac=search_jacobian if search_jacobian != "exact"
                            else (lambda p: _complex_step_jacobian(model, x, p)), bounds=(lo, hi), method="trf",
                            x_scale="jac", xtol=tol, ftol=tol, gtol=tol, max_nfev=max_nfev)
    p = res.x
    resid = model(x, p.astype(complex)).real - y
    rss = float(resid @ resid)
    jac = _complex_step_jacobian(model, x, p)
    dof = x.size - p.size
    stderr: list[float | None] = [None] * p.size
    if dof > 0:
        try:
            cov = np.linalg.inv(jac.T @ jac) * rss / dof
            stderr = [float(math.sqrt(c)) if c >= 0 and math.isfinite(c) else None for c in np.diag(cov)]
        except np.linalg.LinAlgError:
            pass
    return FitResult(tuple(names), tuple(float(v) for v in p), tuple(stderr), rss, int(x.size), bool(res.success))


# -- step models (time in units of the measured rise, origin at the 10 % instant) -----------------

def _elapsed(t, td):
    return np.where(t > np.real(td), t - td, 0.0)


def first_order_step(t, p):
    base, amp, td, tau = p
    return base + amp * (1.0 - np.exp(-_elapsed(t, td) / tau))


def second_order_step(t, p):
    base, amp, td, zeta, wn = p
    s = _elapsed(t, td)
    root = np.sqrt(1.0 - zeta * zeta)
    wd = wn * root
    return base + amp * (1.0 - np.exp(-zeta * wn * s) * (np.cos(wd * s) + zeta / root * np.sin(wd * s)))


FIRST_ORDER_NAMES = ("base_v", "amplitude_v", "t_d_s", "tau_s")
SECOND_ORDER_NAMES = ("base_v", "amplitude_v", "t_d_s", "zeta", "omega_n_rad_s")


def zeta_from_overshoot(fraction: float) -> float:
    """Damping ratio from the fractional overshoot (Ogata §5-3): ζ = −ln OS / √(π² + ln² OS)."""
    ln = math.log(fraction)
    return -ln / math.sqrt(math.pi ** 2 + ln ** 2)


def _unit_rise(zeta: float) -> tuple[float, float]:
    """10 % instant and 10–90 % rise of the ωn = 1 second-order step with this ζ (numerically)."""
    s = np.linspace(0.0, 20.0 / max(zeta, 0.05), 20001)
    g = second_order_step(s, (0.0, 1.0, 0.0, zeta, 1.0))
    t10 = float(np.interp(0.1, g[: int(np.argmax(g >= 0.9)) + 1], s[: int(np.argmax(g >= 0.9)) + 1]))
    t90 = float(s[int(np.argmax(g >= 0.9))])
    return t10, t90 - t10


@dataclass(frozen=True)
class StepFit:
    """The chosen step model of the output's transition (values in SI: V, s, rad/s)."""

    order: int
    params: FitResult  # in SI units
    rss_v2: float
    aic: float
    bic: float
    other_bic: float  # BIC of the model not chosen
    n_points: int
    ring_hz: float | None
    damping: float | None

    def to_json_dict(self) -> dict:
        names = self.params.names
        return {"order": self.order, "params": {n: json_value(v) for n, v in zip(names, self.params.values)},
                "stderr": {n: json_value(e) for n, e in zip(names, self.params.stderr)},
                "rss_v2": json_value(self.rss_v2), "aic": json_value(self.aic), "bic": json_value(self.bic),
                "other_bic": json_value(self.other_bic), "n_points": self.n_points}


def json_value(value):
    """A plain Python value for JSON: numpy scalars unwrapped, NaN and infinities as None (null)."""
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    return value


def _to_si(fit: FitResult, t0: float, scale: float) -> FitResult:
    """Undo the time normalisation u = (t − t0)/scale for the time-like parameters."""
    factors = {"t_d_s": scale, "tau_s": scale, "omega_n_rad_s": 1.0 / scale}
    values, errors = [], []
    for name, v, e in zip(fit.names, fit.values, fit.stderr):
        f = factors.get(name, 1.0)
        values.append(v * f + (t0 if name == "t_d_s" else 0.0))
        errors.append(None if e is None else e * f)
    return FitResult(fit.names, tuple(values), tuple(errors), fit.rss, fit.n, fit.converged)


def fit_step(t: np.ndarray, v: np.ndarray, window: tuple[int, int], *, t10_s: float, rise_s: float,
             base_v: float, final_v: float, overshoot_pct: float | None) -> StepFit | None:
    """Fit both step models on the decimated window and keep the one the BIC prefers."""
    tw, vw = block_means(t, v, *window)
    if tw.size < 8 or not rise_s > 0:
        return None
    u = (tw - t10_s) / rise_s
    amp = final_v - base_v
    tau0 = 1.0 / math.log(9.0)
    first = fit_curve(first_order_step, u, vw, (base_v, amp, -tau0 * math.log(10 / 9), tau0),
                      names=FIRST_ORDER_NAMES, bounds=((-np.inf, -np.inf, -np.inf, 1e-6), np.inf), tol=1e-8,
                      max_nfev=200, search_jacobian="2-point")
    os_fraction = (overshoot_pct or 0.0) / 100.0
    zeta0 = zeta_from_overshoot(os_fraction) if os_fraction > 0.002 else 0.7
    t10u, rise_u = _unit_rise(zeta0)
    wn0 = rise_u  # measured rise is 1 in these units
    second = fit_curve(second_order_step, u, vw, (base_v, amp, -t10u / wn0, zeta0, wn0),
                       names=SECOND_ORDER_NAMES,
                       bounds=((-np.inf, -np.inf, -np.inf, ZETA_MIN, 1e-6), (np.inf, np.inf, np.inf, ZETA_MAX, np.inf)),
                       tol=1e-8, max_nfev=200, search_jacobian="2-point")
    chosen, other = (second, first) if second.bic < first.bic else (first, second)
    ring_hz = damping = None
    if chosen is second:
        zeta, wn = second["zeta"], second["omega_n_rad_s"]
        first_overshoot = abs(second["amplitude_v"]) * math.exp(-zeta * math.pi / math.sqrt(1 - zeta * zeta))
        noise = math.sqrt(second.rss / max(1, second.n - 5))
        if zeta < 0.98 * ZETA_MAX and first_overshoot > RING_SIGMAS * noise:
            damping = zeta
            ring_hz = wn / rise_s * math.sqrt(1 - zeta * zeta) / (2 * math.pi)
    si = _to_si(chosen, t10_s, rise_s)
    return StepFit(order=2 if chosen is second else 1, params=si, rss_v2=chosen.rss, aic=chosen.aic,
                   bic=chosen.bic, other_bic=other.bic, n_points=int(tw.size), ring_hz=ring_hz, damping=damping)
