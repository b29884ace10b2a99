"""Reference-level crossings with hysteresis, by linear interpolation (IEEE Std 181-2011 §5.3.4).

A crossing of ``level`` is only believed when the signal goes from a definite state on one side
(below ``level − h/2``) to a definite state on the other (above ``level + h/2``) and stays there for
at least ``min_dwell`` definite samples. Noise around the level (smaller than the hysteresis ``h``)
and short spikes (fewer than ``min_dwell`` samples, however tall) therefore give no crossing. The
instant reported is where the signal passes ``level``: by linear interpolation between the two
samples around it on a clean edge, by the least-squares line through the samples between the two
definite states when noise makes it pass the level several times.

Everything is vectorised over the record; Python only loops over the (few) accepted transitions.
"""

from __future__ import annotations

import numpy as np

MIN_DWELL = 3  # samples; a spike of one or two samples is noise (common practice, no source)


def _regions(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(start, end) index pairs (end exclusive) of the runs where ``mask`` is True."""
    edges = np.flatnonzero(mask[1:] != mask[:-1]) + 1
    bounds = np.concatenate(([0], edges, [mask.size]))
    first = 0 if mask[0] else 1
    return bounds[:-1][first::2], bounds[1:][first::2]


def _group(starts, ends, high, counts):
    """Merge neighbouring runs in the same state: first index, last index, state, definite count."""
    lead = np.flatnonzero(np.concatenate(([True], high[1:] != high[:-1])))
    tail = np.concatenate((lead[1:] - 1, [high.size - 1]))
    return starts[lead], ends[tail], high[lead], np.add.reduceat(counts, lead)


def _state_runs(v: np.ndarray, lo: float, hi: float, min_dwell: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Runs of the Schmitt-trigger state: (first definite index, last definite index, is_high) per run.

    Runs of fewer than ``min_dwell`` definite samples between two others are dropped (spikes). Works
    on the regions above ``hi`` and below ``lo`` (few) rather than on every definite sample (many).
    """
    up_s, up_e = _regions(v >= hi)
    down_s, down_e = _regions(v <= lo if lo < hi else v < lo)
    starts = np.concatenate((up_s, down_s))
    if starts.size == 0:
        empty = np.empty(0, dtype=np.intp)
        return empty, empty, np.empty(0, dtype=bool)
    order = np.argsort(starts, kind="stable")
    ends = np.concatenate((up_e, down_e))[order]
    starts = starts[order]
    high = np.concatenate((np.ones(up_s.size, bool), np.zeros(down_s.size, bool)))[order]
    first, last, high, counts = _group(starts, ends - 1, high, ends - starts)
    keep = counts >= min_dwell
    keep[0] = True  # the state at the start of the record is what it is, however short
    if not keep.all():
        first, last, high, _ = _group(first[keep], last[keep], high[keep], counts[keep])
    return first, last, high


def _interpolate(t: np.ndarray, v: np.ndarray, j: int, level: float) -> float:
    """Instant between samples j and j+1 where the straight line through them passes ``level``."""
    v0, v1 = v[j], v[j + 1]
    if v1 == v0:
        return float(t[j])
    return float(t[j] + (level - v0) * (t[j + 1] - t[j]) / (v1 - v0))


def crossings(t: np.ndarray, v: np.ndarray, level: float, hysteresis: float, *, direction: str = "rising",
              min_dwell: int = MIN_DWELL) -> np.ndarray:
    """Instants (s) at which ``v`` crosses ``level`` in ``direction`` ("rising", "falling" or "both")."""
    if direction not in ("rising", "falling", "both"):
        raise ValueError(f"direction {direction!r}")
    half = max(hysteresis, 0.0) / 2
    first, last, high = _state_runs(v, level - half, level + half, min_dwell)
    out = []
    for k in range(1, high.size):
        rising = bool(high[k])
        if (direction == "rising" and not rising) or (direction == "falling" and rising):
            continue
        a, b = last[k - 1], first[k]  # last definite sample on the old side, first on the new
        passes = np.flatnonzero(np.diff(v[a:b + 1] >= level))
        if passes.size == 1:  # a clean edge: the two samples either side of the level
            out.append(_interpolate(t, v, a + int(passes[0]), level))
        else:
            out.append(_line_crossing(t[a:b + 1], v[a:b + 1], level))
    return np.asarray(out, dtype=np.float64)


def _line_crossing(ts: np.ndarray, vs: np.ndarray, level: float) -> float:
    """Where the least-squares line through the samples of an ambiguous stretch passes ``level``.

    Between the last definite sample on the old side and the first on the new one the signal runs
    from ``level − h/2`` to ``level + h/2``; noise makes it pass ``level`` several times there. The
    straight line through all those samples (linear interpolation in the least-squares sense) is
    symmetric about the level, so unlike "the last pass" it has no bias towards the late side.
    """
    tc = ts - ts.mean()
    slope = float(tc @ (vs - vs.mean()) / (tc @ tc))
    if slope == 0:
        return float(ts.mean())
    return float(ts.mean() + (level - vs.mean()) / slope)


def first_crossing(t, v, level, hysteresis, *, direction="rising", min_dwell=MIN_DWELL) -> float | None:
    found = crossings(t, v, level, hysteresis, direction=direction, min_dwell=min_dwell)
    return float(found[0]) if found.size else None


def last_crossing(t, v, level, hysteresis, *, direction="rising", min_dwell=MIN_DWELL) -> float | None:
    found = crossings(t, v, level, hysteresis, direction=direction, min_dwell=min_dwell)
    return float(found[-1]) if found.size else None


def value_at(t: np.ndarray, v: np.ndarray, instant: float) -> float:
    """``v`` at ``instant`` by linear interpolation (t increasing)."""
    return float(np.interp(instant, t, v))


def last_entry(t: np.ndarray, v: np.ndarray, centre: float, half_width: float, *,
               min_dwell: int = MIN_DWELL) -> float | None:
    """Instant the signal enters the band ``centre ± half_width`` for the last time.

    Excursions outside the band shorter than ``min_dwell`` samples are spikes and do not count.
    Returns ``t[0]`` when the signal never leaves the band, None when it ends outside it.
    """
    starts, ends = _regions(np.abs(v - centre) > half_width)
    long_runs = np.flatnonzero(ends - starts >= min_dwell)
    if long_runs.size == 0:
        return float(t[0])
    j = int(ends[long_runs[-1]]) - 1  # last outside sample
    if j == v.size - 1:
        return None
    edge = centre + half_width if v[j] > centre else centre - half_width
    return _interpolate(t, v, j, edge)
