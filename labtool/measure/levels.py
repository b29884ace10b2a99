"""State levels by the histogram method of IEEE Std 181-2011 (§5.2), plus noise and quantisation.

IEEE 181 takes the low and high state levels of a two-level waveform as the modes of the histogram
of the lower and upper halves of its amplitude range. Two practical details decide whether that is
robust on bench data:

* **Bin width.** On an 8-bit scope record the values sit on a grid of codes. Bins narrower than a code
  leave empty bins; bins that are not a whole number of codes hold one or two codes in turn, and the
  mode then jumps to whichever bin happens to hold two. So the bin width is a whole number of codes,
  with edges half a code off the grid, and never narrower than the noise (a bin much narrower than the
  noise makes the mode itself noisy).
* **Refinement.** The level is the mean of the samples in the modal bin and its two neighbours, which
  removes the half-bin bias of a bare bin centre while staying a mode (samples far from it are ignored).

Large records are subsampled (evenly strided) for these estimates: a level from 20,000 samples is
as good as one from a million, at a fiftieth of the cost.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

SUBSAMPLE = 20_000
MAX_BINS = 512
_MAD_TO_SIGMA = 1.4826  # normal distribution: sigma = 1.4826 · MAD (common practice, no source)


@dataclass(frozen=True)
class StateLevels:
    """Low and high state levels of a two-level waveform (IEEE Std 181 §5.2)."""

    low_v: float
    high_v: float

    @property
    def amplitude_v(self) -> float:
        return self.high_v - self.low_v

    def reference(self, fraction: float) -> float:
        """Reference level at ``fraction`` of the way from low to high (IEEE Std 181 §5.3.3)."""
        return self.low_v + fraction * (self.high_v - self.low_v)


def subsample(v: np.ndarray, limit: int = SUBSAMPLE) -> np.ndarray:
    """At most ``limit`` evenly strided samples of ``v`` (a view, no copy)."""
    step = max(1, v.size // limit)
    return v[::step]


def quantisation_step(v: np.ndarray) -> float:
    """Spacing of the value grid when the record is quantised (ADC codes, rounded exports), else 0.

    A record is taken as quantised when its values repeat a lot (fewer distinct values than half the
    samples looked at) and the smallest gap between distinct values is at most an eighth of the range
    (an ideal two-level record repeats its values too, but its "step" is the whole amplitude).
    """
    codes = np.unique(subsample(v))
    if codes.size < 2 or codes.size > subsample(v).size // 2:
        return 0.0
    gaps = np.diff(codes)
    span = codes[-1] - codes[0]
    gaps = gaps[gaps > 1e-9 * span]  # float rounding of one code is not a second code
    step = float(gaps.min()) if gaps.size else 0.0
    return step if step <= span / 8 else 0.0


def noise_rms(v: np.ndarray) -> float:
    """Sample noise from first differences, robust to edges and spikes: 1.4826·MAD(Δv)/√2.

    Differences remove the slow signal; the median ignores the few large steps of a transition.
    """
    if v.size < 3:
        return 0.0
    step = max(1, (v.size - 1) // SUBSAMPLE)
    starts = np.arange(0, v.size - 1, step)
    d = v[starts + 1] - v[starts]
    return float(_MAD_TO_SIGMA * np.median(np.abs(d - np.median(d))) / np.sqrt(2.0))


def _bin_width(span: float, q: float, sigma: float) -> float:
    width = max(span / MAX_BINS, sigma, np.finfo(float).tiny)
    if q > 0:
        width = q * max(1.0, np.ceil(width / q - 1e-9))
    return width


def _histogram(v: np.ndarray, lo: float, width: float) -> np.ndarray:
    idx = np.floor((v - lo) / width).astype(np.intp)
    return np.bincount(idx)


def _refined_mode(v: np.ndarray, counts: np.ndarray, lo: float, width: float, first: int, last: int) -> float:
    """Mean of the samples in the modal bin of counts[first:last] and its neighbours."""
    mode_bin = first + int(np.argmax(counts[first:last]))
    a = lo + max(mode_bin - 1, first) * width
    b = lo + min(mode_bin + 2, last) * width
    near = v[(v >= a) & (v < b)]
    return float(near.mean()) if near.size else lo + (mode_bin + 0.5) * width


def _grid(v: np.ndarray, q: float | None = None) -> tuple[float, float, float]:
    """Histogram origin, bin width and span for a (subsampled) record with code step ``q`` (found when None)."""
    vmin, vmax = float(v.min()), float(v.max())
    q = quantisation_step(v) if q is None else q
    width = _bin_width(vmax - vmin, q, noise_rms(v))
    origin = vmin - (q / 2 if q > 0 else width / 2)  # codes in bin centres
    return origin, width, vmax - vmin


def state_levels(v: np.ndarray) -> StateLevels:
    """IEEE Std 181 §5.2 histogram state levels: the mode of each half of the amplitude range."""
    v = np.asarray(v, dtype=np.float64)
    s = subsample(v)
    origin, width, span = _grid(s)
    if span == 0:
        return StateLevels(float(s[0]), float(s[0]))
    counts = _histogram(s, origin, width)
    middle = (float(s.min()) + float(s.max())) / 2
    split = int(np.clip(np.floor((middle - origin) / width), 1, counts.size - 1))
    low = _refined_mode(s, counts, origin, width, 0, split)
    high = _refined_mode(s, counts, origin, width, split, counts.size)
    return StateLevels(low, high)


def segment_level(v: np.ndarray, step_v: float | None = None) -> float:
    """The single state level of a segment that is in one state (the histogram mode of all of it).

    Used for the start and the settled end of a record (IEEE Std 181 §5.2 histogram method applied to
    one state). ``step_v`` is the code step of the whole record: a flat segment spans too few codes to
    find it by itself.
    """
    v = np.asarray(v, dtype=np.float64)
    s = subsample(v)
    origin, width, span = _grid(s, step_v)
    if span == 0:
        return float(s[0])
    counts = _histogram(s, origin, width)
    return _refined_mode(s, counts, origin, width, 0, counts.size)
