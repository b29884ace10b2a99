"""What a channel's waveform looks like, for telling channels apart when their names say nothing.

Coarse and cheap (a few vectorised passes, on a strided subset of long records): the level at the
start and at the settled end, whether the channel moves at all, when it first crosses half-way, and
whether it is a two-level signal with a fast edge (an enable). Only the role inference and the
truncation rule use these; the measurement has its own, published definitions (``labtool.measure``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

MAX_POINTS = 20_000
SHORT_RECORD = 16  # a strided subset of longer records is enough to tell shapes apart
HEAD_FRACTION = 0.05
TAIL_FRACTION = 0.10
MOVE_SIGMAS = 10.0  # a range beyond 10 noise sigmas is a transition, not noise (common practice, no source)
MOVE_CODES = 3.0  # ... and beyond 3 codes of a quantised record
TWO_LEVEL_BAND = 0.10  # within ±10 % of the level difference of one of the two levels
TWO_LEVEL_SHARE = 0.95  # ... for at least 95 % of the samples
FAST_EDGE_SHARE = 0.02  # the 10–90 % transition within 2 % of the record


@dataclass(frozen=True)
class ChannelShape:
    initial_v: float
    final_v: float
    moves: bool
    t_half_s: float | None  # first crossing half-way from the initial to the final level
    two_level_edge: bool  # two levels and one fast edge: an enable, a logic signal


def _levels(v: np.ndarray) -> tuple[float, float]:
    n = v.size
    head = v[: max(1, int(n * HEAD_FRACTION))]
    tail = v[n - max(1, int(n * TAIL_FRACTION)):]
    return float(np.median(head)), float(np.median(tail))


def moves(values: np.ndarray) -> bool:
    """Whether a record holds more than noise: its robust range beyond noise and quantisation."""
    v = _subset(values)
    if v.size < 2:
        return False
    if v.size < SHORT_RECORD:  # too few samples to estimate noise: any change counts
        return bool(v.max() > v.min())
    diffs = np.abs(np.diff(v))
    noise = 1.4826 * float(np.median(diffs)) / np.sqrt(2.0)  # MAD of first differences (white noise)
    positive = diffs[diffs > 0]
    code = float(positive.min()) if positive.size else 0.0
    low, high = np.percentile(v, [1.0, 99.0]) if v.size >= 100 else (float(v.min()), float(v.max()))
    spread = float(high - low)
    return spread > 0 and spread > MOVE_SIGMAS * noise and spread > MOVE_CODES * code


def _subset(values: np.ndarray) -> np.ndarray:
    v = np.asarray(values, dtype=np.float64)
    v = v[np.isfinite(v)]
    if v.size > MAX_POINTS:
        v = v[:: v.size // MAX_POINTS]
    return v


def channel_shape(t: np.ndarray, values: np.ndarray) -> ChannelShape:
    step = max(1, values.size // MAX_POINTS)
    v, tt = np.asarray(values[::step], dtype=np.float64), t[::step]
    finite = np.isfinite(v)
    if not finite.all():
        v, tt = v[finite], tt[finite]
    if v.size < 2:
        return ChannelShape(0.0, 0.0, False, None, False)
    initial, final = _levels(v)
    moving = moves(v)
    t_half = None
    two_level = False
    amplitude = final - initial
    if moving and amplitude != 0:
        sign = np.sign(amplitude)
        progress = sign * (v - initial) / abs(amplitude)  # 0 at the initial level, 1 at the final one
        crossed = np.flatnonzero(progress >= 0.5)
        t_half = float(tt[crossed[0]]) if crossed.size else None
        near = (np.abs(progress) <= TWO_LEVEL_BAND) | (np.abs(progress - 1.0) <= TWO_LEVEL_BAND)
        k10, k90 = np.flatnonzero(progress >= 0.1), np.flatnonzero(progress >= 0.9)
        if k10.size and k90.size:
            edge = max(0, int(k90[0]) - int(k10[0]))
            two_level = bool(near.mean() >= TWO_LEVEL_SHARE and edge <= FAST_EDGE_SHARE * v.size)
    return ChannelShape(initial, final, moving, t_half, two_level)
