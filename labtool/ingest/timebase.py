"""Time bases from what a file wrote: rounded time stamps, min/max pairs, the roundest interval.

Spreadsheet re-saves and some exports print times with too few digits, so a fine grid shows repeated
or uneven stamps. When every stamp lies within half a print step of one uniform grid, that grid is
the time base: its interval from the preamble when it gives one, else the roundest interval (fewest
significant digits) the stamps allow, and its start likewise. Anything else is left to the caller
(explicit times, or the "does not increase" refusal).
"""

from __future__ import annotations

import numpy as np

from labtool.capture import TimeBase

MIN_ROUNDED = 8  # fewer stamps are too few to tell rounding from a real gap


def roundest(lo: float, hi: float) -> float:
    """The number in [lo, hi] with the fewest significant digits (0 when the range holds it)."""
    if lo <= 0.0 <= hi:
        return 0.0
    mid = 0.5 * (lo + hi)
    for digits in range(1, 18):
        candidate = float(f"{mid:.{digits - 1}e}")
        if lo <= candidate <= hi:
            return candidate
    return mid


def print_step(steps: np.ndarray) -> float:
    """The resolution the stamps were printed with: the smallest gap between distinct steps (0 included)."""
    scale = float(steps.max())
    if not scale > 0:
        return 0.0
    distinct = np.unique(np.round(steps / scale, 9)) * scale
    if distinct[0] > 0:
        distinct = np.concatenate([[0.0], distinct])
    gaps = np.diff(distinct)
    gaps = gaps[gaps > 1e-9 * scale]
    return float(gaps.min()) if gaps.size else 0.0


def rebuild_rounded(t: np.ndarray, dt_s: float | None) -> tuple[TimeBase, float] | None:
    """(uniform time base, print step) when ``t`` is a uniform grid printed coarsely, else None.

    ``dt_s``: the interval the preamble gives; the stamps must agree with it.
    """
    n = t.size
    if n < MIN_ROUNDED:
        return None
    steps = np.diff(t)
    if (steps < 0).any():
        return None
    q = print_step(steps)
    if not q > 0:
        return None
    half = 0.5 * q * (1.0 + 1e-6) + 8.0 * np.finfo(float).eps * float(np.abs(t).max())
    k = np.arange(n, dtype=np.float64)
    if dt_s is None:
        span = float(t[-1] - t[0])
        lo, hi = (span - 2.0 * half) / (n - 1), (span + 2.0 * half) / (n - 1)
        if not hi > 0:
            return None
        trials = [roundest(max(lo, 0.0), hi), span / (n - 1)]
    else:
        trials = [dt_s]
    for dt in trials:
        if not dt > 0:
            continue
        residual = t - k * dt
        lo0, hi0 = float(residual.max()) - half, float(residual.min()) + half
        if lo0 <= hi0:
            return TimeBase(n=n, t0_s=roundest(lo0, hi0), dt_s=float(dt)), q
    return None


def min_max_pairs(t: np.ndarray) -> bool:
    """Every time stamp written twice in a row (peak-detect exports: a minimum and a maximum per interval)."""
    return bool(t.size >= 4 and t.size % 2 == 0 and np.array_equal(t[0::2], t[1::2])
                and (np.diff(t[0::2]) > 0).all())
