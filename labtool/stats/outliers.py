"""Outlier screens for delay samples.

Modified z-score M = 0.6745·(x − median)/MAD, flagged when |M| > 3.5 (B. Iglewicz and D. Hoaglin,
"How to Detect and Handle Outliers", ASQC 1993; NIST/SEMATECH e-Handbook of Statistical Methods
§1.3.5.17). Grubbs' statistic G = max|x − mean|/s (e-Handbook §1.3.5.17.1).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import t as student_t

from labtool.errors import UsageError

MODIFIED_Z_LIMIT = 3.5
# 0.6745 is the 75 % quantile of the standard normal, so MAD/0.6745 estimates sigma for normal data.
_MAD_FACTOR = 0.6745
# When more than half the values are equal MAD is zero; the mean absolute deviation scaled by
# sqrt(pi/2) = 1.2533 (its ratio to sigma for normal data) takes over. Common practice, no source.
_MEANAD_FACTOR = 1.253314


def modified_z_scores(values: np.ndarray, groups: np.ndarray | None = None) -> np.ndarray:
    """Modified z-score of each value, against the median and MAD of its group (``groups``: one label
    per value; default one group). NaN where the value is NaN; 0 where all of a group's values are equal."""
    x = pd.Series(np.asarray(values, dtype=np.float64))
    key = np.zeros(len(x), dtype=np.int64) if groups is None else np.asarray(groups)
    med = x.groupby(key).transform("median")
    dev = (x - med).abs().groupby(key)
    mad, mean_ad = dev.transform("median"), dev.transform("mean")
    scale = np.where(mad > 0, mad / _MAD_FACTOR, _MEANAD_FACTOR * mean_ad)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(scale > 0, (x - med) / scale, 0.0)
    return np.where(np.isfinite(x), z, np.nan)


def robust_location_scale(values: np.ndarray) -> tuple[float, float]:
    """(median, MAD/0.6745) of the finite values, with the mean-absolute-deviation fallback when MAD is
    zero: the centre and scale of the modified z-score, for scoring values against another sample."""
    x = np.asarray(values, dtype=np.float64)
    x = x[np.isfinite(x)]
    if x.size == 0:
        return float("nan"), float("nan")
    med = float(np.median(x))
    dev = np.abs(x - med)
    mad = float(np.median(dev))
    return med, (mad / _MAD_FACTOR if mad > 0 else _MEANAD_FACTOR * float(dev.mean()))


def outlier_mask(values: np.ndarray, limit: float = MODIFIED_Z_LIMIT) -> np.ndarray:
    """True where |modified z| > ``limit``."""
    return np.abs(np.nan_to_num(modified_z_scores(values), nan=0.0)) > limit


@dataclass(frozen=True)
class GrubbsResult:
    statistic: float
    critical: float
    index: int  # position of the most extreme value
    outlier: bool


def grubbs(values: np.ndarray, alpha: float = 0.05) -> GrubbsResult:
    """Two-sided Grubbs test for one outlier (e-Handbook §1.3.5.17.1): G against its critical value
    (n−1)/√n · √(t²/(n−2+t²)), t the upper α/(2n) quantile of Student's t with n−2 degrees of freedom."""
    x = np.asarray(values, dtype=np.float64)
    x = x[np.isfinite(x)]
    n = x.size
    if n < 3:
        raise UsageError(f"Grubbs' test needs at least 3 values (got {n})")
    s = x.std(ddof=1)
    if s == 0:
        return GrubbsResult(0.0, float("inf"), 0, False)
    dev = np.abs(x - x.mean())
    idx = int(np.argmax(dev))
    g = float(dev[idx] / s)
    t = student_t.isf(alpha / (2 * n), n - 2)
    crit = float((n - 1) / np.sqrt(n) * np.sqrt(t * t / (n - 2 + t * t)))
    return GrubbsResult(statistic=g, critical=crit, index=idx, outlier=g > crit)
