"""From a block of sample codes and its preamble to SI values and sample instants (pure numpy).

Scaling (the usual digitiser convention, common practice, no source):
value = (code − y_reference)·y_increment + y_origin; time = (i − x_reference)·x_increment + x_origin.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

import numpy as np

from instruments.profile import BLOCK_FORMATS, PREAMBLE_FIELDS
from labtool.errors import BlockError, InstrumentError


@dataclass(frozen=True)
class Preamble:
    points: int
    x_increment_s: float
    x_origin_s: float
    x_reference: float
    y_increment: float
    y_origin: float
    y_reference: float

    @staticmethod
    def from_fields(values: Mapping[str, float], *, what: str = "preamble") -> "Preamble":
        p = {k: values[k] for k in PREAMBLE_FIELDS}
        points = p.pop("points")
        if not float(points).is_integer() or points < 2:
            raise InstrumentError(f"{what}: points = {points!r} is not a whole number ≥ 2")
        bad = [k for k, v in p.items() if not np.isfinite(v)]
        if bad or not p["x_increment_s"] > 0 or p["y_increment"] == 0:
            raise InstrumentError(f"{what}: unusable scaling ({', '.join(bad) or 'x_increment_s/y_increment'})")
        return Preamble(points=int(points), **{k: float(v) for k, v in p.items()})

    def times(self) -> np.ndarray:
        return (np.arange(self.points, dtype=np.float64) - self.x_reference) * self.x_increment_s + self.x_origin_s

    @property
    def t0_s(self) -> float:
        return (0.0 - self.x_reference) * self.x_increment_s + self.x_origin_s


def sample_width(fmt: str) -> int:
    return np.dtype(BLOCK_FORMATS[fmt]).itemsize


def decode(data: bytes, fmt: str, preamble: Preamble, *, what: str = "trace") -> tuple[np.ndarray, np.ndarray]:
    """Values in SI and the per-sample clip flags (codes at either end of the integer range)."""
    dtype = np.dtype(BLOCK_FORMATS[fmt])
    if len(data) != preamble.points * dtype.itemsize:
        raise BlockError(f"{what}: {len(data)} data bytes, but {preamble.points} points of {dtype.itemsize} "
                         f"byte(s) were announced; refusing a short or long capture")
    codes = np.frombuffer(data, dtype=dtype)
    values = (codes.astype(np.float64) - preamble.y_reference) * preamble.y_increment + preamble.y_origin
    if dtype.kind in "iu":
        info = np.iinfo(dtype)
        clipped = (codes == info.min) | (codes == info.max)
    else:
        clipped = ~np.isfinite(values)
    return values, clipped
