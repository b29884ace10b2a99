"""Waveforms prepared for plotting: one capture's trace with its measured instants, and group envelopes.

Traces are aligned on the instant the supply became valid (``t_supply_s``), the reference instant of
every startup delay, so traces of one group line up even when their records were triggered
differently. A trace without a ``t_supply_s`` (no valid supply) keeps its record time.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np

from labtool.capture import Capture

MAX_POINTS = 2000  # per trace: plenty for a 9-inch plot, bounded memory for big groups


@dataclass(frozen=True)
class Trace:
    """One capture ready to draw; times in seconds from supply valid, voltages in volts."""

    label: str
    t_s: np.ndarray = field(repr=False)
    output_v: np.ndarray = field(repr=False)
    supply_v: np.ndarray | None = field(default=None, repr=False)
    verdict: str = "started"
    delay_s: float | None = None
    settle_s: float | None = None
    aligned: bool = True  # False when the record had no supply-valid instant

    def events(self) -> dict[str, tuple[float, float]]:
        """(time, voltage) of the instants the measurement found: supply valid, 90 % crossing, settled."""
        out: dict[str, tuple[float, float]] = {}
        if self.aligned and self.supply_v is not None:
            out["t_supply"] = (0.0, float(np.interp(0.0, self.t_s, self.supply_v)))
        for name, when in (("cross90", self.delay_s), ("settle", self.settle_s)):
            if self.aligned and _finite(when):
                out[name] = (float(when), float(np.interp(when, self.t_s, self.output_v)))
        return out


@dataclass(frozen=True)
class Envelope:
    """Median and p05–p95 band of a group's outputs on a common time grid."""

    t_s: np.ndarray
    median_v: np.ndarray
    low_v: np.ndarray
    high_v: np.ndarray
    n: int


def _finite(value) -> bool:
    return value is not None and not (isinstance(value, float) and math.isnan(value))


def _value(row: Mapping, key: str) -> float | None:
    v = row.get(key)
    return float(v) if _finite(v) else None


def _decimate(n: int, max_points: int) -> slice:
    return slice(None, None, max(1, math.ceil(n / max_points)))


def trace_from_capture(capture: Capture, row: Mapping, *, label: str | None = None,
                       max_points: int = MAX_POINTS) -> Trace:
    """A capture and its measurement row (``verdict``, ``t_supply_s``, ``delay_s``, ``settle_s``)."""
    t = capture.times()
    t_supply = _value(row, "t_supply_s")
    keep = _decimate(t.size, max_points)
    supply = capture.channel("supply").values[keep] if capture.has_role("supply") else None
    return Trace(
        label=label or str(row.get("capture_id", capture.capture_id)),
        t_s=(t - (t_supply or 0.0))[keep],
        output_v=np.asarray(capture.channel("output").values, dtype=float)[keep],
        supply_v=None if supply is None else np.asarray(supply, dtype=float),
        verdict=str(row.get("verdict", "started")),
        delay_s=_value(row, "delay_s"),
        settle_s=_value(row, "settle_s"),
        aligned=t_supply is not None,
    )


def envelope(traces: Sequence[Trace], n_points: int = 800) -> Envelope | None:
    """Pointwise median and 5th/95th percentiles of the aligned outputs (None without aligned traces).

    Each trace is linearly interpolated onto a grid spanning all traces; outside its own record a
    trace does not count, so the envelope is the statistic over the traces that cover each instant.
    """
    aligned = [tr for tr in traces if tr.aligned and tr.t_s.size >= 2]
    if not aligned:
        return None
    grid = np.linspace(min(tr.t_s[0] for tr in aligned), max(tr.t_s[-1] for tr in aligned), n_points)
    stack = np.vstack([np.interp(grid, tr.t_s, tr.output_v, left=np.nan, right=np.nan) for tr in aligned])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # columns no trace covers stay NaN
        low, median, high = np.nanpercentile(stack, [5.0, 50.0, 95.0], axis=0)
    return Envelope(t_s=grid, median_v=median, low_v=low, high_v=high, n=len(aligned))
