"""Best-fitting delay distribution among normal, lognormal and two-parameter Weibull.

Each candidate is fitted by maximum likelihood (lognormal and Weibull with location fixed at 0, so
they apply only when every delay is positive). The one with the lowest AIC = 2k − 2 ln L (Akaike,
IEEE Trans. Automatic Control 19(6), 1974) wins; goodness of fit is reported as the Kolmogorov–Smirnov
statistic and p-value (``scipy.stats.kstest`` against the fitted law; the p-value is optimistic because
the parameters were estimated from the same data) and the Anderson–Darling statistic A² against the
fitted law (Stephens, JASA 69, 1974; the e-Handbook §1.3.5.14 formula).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy import stats

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

    def frozen(self):
        """The fitted law as a frozen scipy.stats distribution."""
        return frozen_law(self.distribution, self.params)

    def to_json_dict(self) -> dict:
        return {"distribution": self.distribution, "params": dict(self.params), "n": self.n,
                "aic": self.aic, "ks_stat": self.ks_stat, "ks_pvalue": self.ks_pvalue, "ad_stat": self.ad_stat}


@dataclass(frozen=True)
class BestFit:
    best: DistributionFit
    candidates: tuple[DistributionFit, ...]
    criterion: str = "aic"


def frozen_law(name: str, p: dict):
    if name == "normal":
        return stats.norm(loc=p["mean_s"], scale=p["std_s"])
    if name == "lognormal":
        return stats.lognorm(s=p["sigma_ln"], scale=math.exp(p["mu_ln"]))
    return stats.weibull_min(c=p["shape"], scale=p["scale_s"])


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
    # Fit on data scaled to order one (delays are microseconds), then scale back.
    unit = float(np.median(x))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        c, _, scale = stats.weibull_min.fit(x / unit, floc=0)
    return {"shape": float(c), "scale_s": float(scale * unit)}


def fit_distribution(values: np.ndarray, name: str) -> DistributionFit:
    x = np.asarray(values, dtype=np.float64)
    x = x[np.isfinite(x)]
    if name not in CANDIDATES:
        raise UsageError(f"unknown distribution {name!r}; choose from {', '.join(CANDIDATES)}")
    if name != "normal" and np.any(x <= 0):
        raise UsageError(f"{name} needs positive values")
    params = _fit_params(name, x)
    fitted = frozen_law(name, params)
    loglik = float(np.sum(fitted.logpdf(x)))
    ks = stats.kstest(x, fitted.cdf)
    return DistributionFit(distribution=name, params=params, n=int(x.size), log_likelihood=loglik,
                           aic=2 * len(params) - 2 * loglik, ks_stat=float(ks.statistic),
                           ks_pvalue=float(ks.pvalue), ad_stat=anderson_darling_statistic(x, fitted.cdf))


def best_fit(values: np.ndarray) -> BestFit | None:
    """The lowest-AIC law among the candidates that apply; None with fewer than MIN_SAMPLES values
    or no spread."""
    x = np.asarray(values, dtype=np.float64)
    x = x[np.isfinite(x)]
    if x.size < MIN_SAMPLES or np.ptp(x) == 0:
        return None
    names = CANDIDATES if np.all(x > 0) else ("normal",)
    fits = tuple(fit_distribution(x, name) for name in names)
    fits = tuple(f for f in fits if math.isfinite(f.aic)) or fits[:1]
    return BestFit(best=min(fits, key=lambda f: f.aic), candidates=fits)
