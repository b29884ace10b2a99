"""Best-fitting delay distribution among normal, lognormal and two-parameter Weibull.

Each candidate is fitted by maximum likelihood (lognormal and Weibull with location fixed at 0, so
they apply only when every delay is positive). The one with the lowest AIC = 2k − 2 ln L (Akaike,
IEEE Trans. Automatic Control 19(6), 1974) wins. Goodness of fit:

* Kolmogorov–Smirnov statistic D as ``scipy.stats.kstest`` has it (the largest of i/n − F(x_i) and
  F(x_i) − (i − 1)/n over the sorted sample), its p-value from Stephens' finite-sample form of the
  Kolmogorov law, Q(D·(√n + 0.12 + 0.11/√n)) (M. A. Stephens, JRSS B 32(1), 1970; from memory), within
  0.003 of the exact law (``scipy.stats.kstwo``) where p < 0.2 and a thousand times cheaper (statistics
  per set-up fit thousands of laws). The p-value is optimistic: the parameters come from the same data.
* Anderson–Darling statistic A² against the fitted law (Stephens, JASA 69, 1974; e-Handbook
  §1.3.5.14) and the composite-hypothesis p-value from the tables ``scipy.stats.anderson`` uses for
  estimated parameters (``_AD_TABLES``): normal on x, normal on ln x for the lognormal, and the
  smallest-extreme-value (Gumbel) law on ln x for the two-parameter Weibull (Stephens, Biometrika
  64(3), 1977). Those tables end at 0.15 (normal) or 0.25 (Gumbel) and at 0.01: a p-value read at a
  table end is a bound, not a value, and ``ad_pvalue_bound`` says so ("lower": the p-value is at least
  this; "upper": at most this).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import partial

import numpy as np
from scipy import optimize, special, stats

from labtool.errors import UsageError

CANDIDATES = ("normal", "lognormal", "weibull")
MIN_SAMPLES = 8


@dataclass(frozen=True)
class DistributionFit:
    """One fitted law. ``params`` in SI (seconds for delays): normal mean_s/std_s, lognormal
    mu_ln/sigma_ln (of ln seconds), weibull shape/scale_s."""

    distribution: str
    params: dict = field(hash=False)
    n: int
    log_likelihood: float
    aic: float
    ks_stat: float
    ks_pvalue: float
    ad_stat: float
    ad_pvalue: float
    ad_pvalue_bound: str | None = None  # "lower" / "upper" when read at a table end

    def frozen(self):
        """The fitted law as a frozen scipy.stats distribution."""
        return frozen_law(self.distribution, self.params)

    def to_json_dict(self) -> dict:
        return {"distribution": self.distribution, "params": dict(self.params), "n": self.n,
                "aic": self.aic, "ks_stat": self.ks_stat, "ks_pvalue": self.ks_pvalue, "ad_stat": self.ad_stat,
                "ad_pvalue": self.ad_pvalue, "ad_pvalue_bound": self.ad_pvalue_bound}


@dataclass(frozen=True)
class BestFit:
    best: DistributionFit
    aic_by_distribution: dict = field(hash=False)  # every candidate that applied
    criterion: str = "aic"


def frozen_law(name: str, p: dict):
    if name == "normal":
        return stats.norm(loc=p["mean_s"], scale=p["std_s"])
    if name == "lognormal":
        return stats.lognorm(s=p["sigma_ln"], scale=math.exp(p["mu_ln"]))
    return stats.weibull_min(c=p["shape"], scale=p["scale_s"])


def _logpdf(name: str, p: dict, x: np.ndarray) -> np.ndarray:
    """Log density in closed form (the frozen scipy laws cost a millisecond each to build)."""
    if name == "normal":
        z = (x - p["mean_s"]) / p["std_s"]
        return -0.5 * z * z - math.log(p["std_s"] * math.sqrt(2 * math.pi))
    if name == "lognormal":
        lx = np.log(x)
        z = (lx - p["mu_ln"]) / p["sigma_ln"]
        return -0.5 * z * z - lx - math.log(p["sigma_ln"] * math.sqrt(2 * math.pi))
    k, lam = p["shape"], p["scale_s"]
    u = x / lam
    return math.log(k / lam) + (k - 1) * np.log(u) - u ** k


def _cdf(name: str, p: dict, x: np.ndarray) -> np.ndarray:
    if name == "normal":
        return special.ndtr((x - p["mean_s"]) / p["std_s"])
    if name == "lognormal":
        return special.ndtr((np.log(x) - p["mu_ln"]) / p["sigma_ln"])
    return -np.expm1(-((x / p["scale_s"]) ** p["shape"]))


def _weibull_mle(x: np.ndarray) -> dict:
    """Two-parameter Weibull MLE: the shape k solves Σ xᵏ ln x / Σ xᵏ − 1/k − mean(ln x) = 0, then
    scale = (mean xᵏ)^(1/k) (e.g. Johnson, Kotz & Balakrishnan, Continuous Univariate Distributions
    vol. 1, ch. 21). Solved on ln x centred, which makes it independent of the unit."""
    lx = np.log(x)
    c = lx.mean()
    y = lx - c

    def score(k):
        w = np.exp(k * (y - y.max()))
        return np.dot(w, y) / w.sum() - 1.0 / k

    lo, hi = 1e-3, 1.0
    while score(hi) < 0 and hi < 1e4:
        hi *= 2.0
    k = optimize.brentq(score, lo, hi, xtol=1e-12, rtol=1e-10)
    scale = math.exp(c + math.log(np.mean(np.exp(k * y))) / k)
    return {"shape": float(k), "scale_s": float(scale)}


def anderson_darling_statistic(values: np.ndarray, cdf) -> float:
    """A² = −n − (1/n) Σ (2i − 1)[ln F(x_i) + ln(1 − F(x_{n+1−i}))] over the sorted sample."""
    x = np.sort(np.asarray(values, dtype=np.float64))
    n = x.size
    f = np.clip(cdf(x), 1e-300, 1 - 1e-16)
    i = np.arange(1, n + 1)
    return float(-n - np.sum((2 * i - 1) * (np.log(f) + np.log1p(-f[::-1]))) / n)


def _fit_params(name: str, x: np.ndarray) -> dict:
    if name == "normal":
        return {"mean_s": float(x.mean()), "std_s": float(x.std())}
    if name == "lognormal":
        lx = np.log(x)
        return {"mu_ln": float(lx.mean()), "sigma_ln": float(lx.std())}
    return _weibull_mle(x)


def _check_values(values: np.ndarray, name: str) -> np.ndarray:
    x = np.asarray(values, dtype=np.float64)
    x = x[np.isfinite(x)]
    if name not in CANDIDATES:
        raise UsageError(f"unknown distribution {name!r}; choose from {', '.join(CANDIDATES)}")
    if name != "normal" and np.any(x <= 0):
        raise UsageError(f"{name} needs positive values")
    return x


def _aic(name: str, x: np.ndarray) -> tuple[dict, float, float]:
    params = _fit_params(name, x)
    loglik = float(np.sum(_logpdf(name, params, x)))
    return params, loglik, 2 * len(params) - 2 * loglik


def ks_test(values: np.ndarray, cdf) -> tuple[float, float]:
    """One-sample Kolmogorov–Smirnov (D, two-sided p) against ``cdf`` (see the module notes)."""
    x = np.sort(np.asarray(values, dtype=np.float64))
    n = x.size
    f = cdf(x)
    d = float(max(np.max(np.arange(1, n + 1) / n - f), np.max(f - np.arange(n) / n)))
    root = math.sqrt(n)
    return d, float(np.clip(special.kolmogorov(d * (root + 0.12 + 0.11 / root)), 0.0, 1.0))


def _fitted(name: str, x: np.ndarray, params: dict, loglik: float, aic: float) -> DistributionFit:
    cdf = partial(_cdf, name, params)
    ks_stat, ks_p = ks_test(x, cdf)
    ad_p, bound = _ad_pvalue(name, x, params)
    return DistributionFit(distribution=name, params=params, n=int(x.size), log_likelihood=loglik, aic=aic,
                           ks_stat=ks_stat, ks_pvalue=ks_p,
                           ad_stat=anderson_darling_statistic(x, cdf), ad_pvalue=ad_p, ad_pvalue_bound=bound)


# The composite-hypothesis Anderson–Darling tables that scipy.stats.anderson(method="interpolate") uses:
# critical values of A² at significance levels 15…1 % for the normal law with both parameters estimated
# (Stephens, JASA 69, 1974) and 25…1 % for the extreme-value law (Stephens, Biometrika 64(3), 1977),
# divided by a sample-size factor and rounded to 3 decimals; p is interpolated linearly between them
# and held at the ends. Computed here in closed form (scipy's call costs a millisecond, and statistics
# per set-up fit thousands of laws); tests compare every value with scipy.stats.anderson.
_AD_TABLES = {"norm": ((0.561, 0.631, 0.752, 0.873, 1.035), (0.15, 0.10, 0.05, 0.025, 0.01),
                       lambda n: 1.0 + 0.75 / n + 2.25 / n ** 2),
              "gumbel_l": ((0.474, 0.637, 0.757, 0.877, 1.038), (0.25, 0.10, 0.05, 0.025, 0.01),
                           lambda n: 1.0 + 0.2 / math.sqrt(n))}


def table_bound(p: float, low: float, high: float) -> str | None:
    """"lower" when ``p`` was read at the top of a table (the true p-value is at least p), "upper" at
    its bottom (at most p), None in between."""
    return "lower" if p >= high else "upper" if p <= low else None


def _ad_pvalue(name: str, x: np.ndarray, params: dict) -> tuple[float, str | None]:
    """The table p-value of A² for the law fitted to ``x``: normal on x, normal on ln x (lognormal), the
    smallest-extreme-value law on ln x (two-parameter Weibull: location ln scale, scale 1/shape)."""
    y = np.sort(x if name == "normal" else np.log(x))
    n = y.size
    if name == "weibull":
        w = (y - math.log(params["scale_s"])) * params["shape"]
        log_sf = -np.exp(w)
        log_cdf = np.log(-np.expm1(log_sf))
        table = "gumbel_l"
    else:
        w = (y - y.mean()) / y.std(ddof=1)
        log_cdf, log_sf = special.log_ndtr(w), special.log_ndtr(-w)
        table = "norm"
    i = np.arange(1, n + 1)
    a2 = float(-n - np.sum((2 * i - 1.0) / n * (log_cdf + log_sf[::-1])))
    values, levels, factor = _AD_TABLES[table]
    p = float(np.interp(a2, np.round(np.asarray(values) / factor(n), 3), levels))
    return p, table_bound(p, levels[-1], levels[0])


def fit_distribution(values: np.ndarray, name: str) -> DistributionFit:
    """Maximum-likelihood fit of one law with its AIC and goodness of fit."""
    x = _check_values(values, name)
    return _fitted(name, x, *_aic(name, x))


def best_fit(values: np.ndarray) -> BestFit | None:
    """The lowest-AIC law among the candidates that apply, with its goodness of fit; None with fewer
    than MIN_SAMPLES values or no spread."""
    x = np.asarray(values, dtype=np.float64)
    x = x[np.isfinite(x)]
    if x.size < MIN_SAMPLES or np.ptp(x) == 0:
        return None
    names = CANDIDATES if np.all(x > 0) else ("normal",)
    fits = {name: _aic(name, x) for name in names}
    aics = {name: f[2] for name, f in fits.items() if math.isfinite(f[2])} or {names[0]: fits[names[0]][2]}
    best = min(aics, key=aics.get)
    return BestFit(best=_fitted(best, x, *fits[best]), aic_by_distribution=aics)
