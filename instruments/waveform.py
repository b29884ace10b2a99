"""labtool's scaling record and the decoding of sample codes to SI values and instants (pure numpy).

An instrument reports, in its own words and order, how its integer codes become volts or amperes
and its sample indices become seconds. A profile maps that reply onto this record (see
``instruments/profiles/README.md``); the record's names are labtool's own:

- ``points``: samples in the record
- ``dt_s``: sample interval
- ``t_first_s``: time of sample 0, relative to the trigger (negative when there is a pre-trigger)
- ``lsb``: value of one code step, in the trace's unit (V or A)
- ``code_zero``: the code that stands for ``zero_level``
- ``zero_level``: the value (V or A) at ``code_zero``

value = (code − code_zero)·lsb + zero_level; time of sample i = t_first_s + i·dt_s
(the usual linear digitiser scaling; common practice, no source).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

import numpy as np

from labtool.errors import BlockError, InstrumentError

BLOCK_FORMATS = {"int8": "i1", "uint8": "u1", "int16be": ">i2", "int16le": "<i2", "uint16be": ">u2",
                 "uint16le": "<u2", "float32be": ">f4", "float32le": "<f4"}
SCALING_FIELDS = ("points", "dt_s", "t_first_s", "lsb", "code_zero", "zero_level")


@dataclass(frozen=True)
class Scaling:
    points: int
    dt_s: float
    t_first_s: float
    lsb: float
    code_zero: float
    zero_level: float

    @staticmethod
    def from_values(values: Mapping[str, float], *, what: str = "scaling") -> "Scaling":
        """Checked: a whole number of points ≥ 2, finite numbers, a positive interval, a non-zero step."""
        points = values["points"]
        if not float(points).is_integer() or points < 2:
            raise InstrumentError(f"{what}: points = {points!r} is not a whole number ≥ 2")
        rest = {k: float(values[k]) for k in SCALING_FIELDS[1:]}
        bad = [k for k, v in rest.items() if not np.isfinite(v)]
        if not rest["dt_s"] > 0:
            bad.append(f"dt_s = {rest['dt_s']!r} (must be > 0)")
        if rest["lsb"] == 0:
            bad.append("lsb = 0")
        if bad:
            raise InstrumentError(f"{what}: unusable scaling ({', '.join(bad)})")
        return Scaling(points=int(points), **rest)

    def times(self) -> np.ndarray:
        return self.t_first_s + np.arange(self.points, dtype=np.float64) * self.dt_s

    def same_time_base(self, other: "Scaling") -> bool:
        return (self.points, self.dt_s, self.t_first_s) == (other.points, other.dt_s, other.t_first_s)


def sample_width(fmt: str) -> int:
    return np.dtype(BLOCK_FORMATS[fmt]).itemsize


def decode(data: bytes, fmt: str, scaling: Scaling, *, what: str = "trace") -> tuple[np.ndarray, np.ndarray]:
    """Values in SI and the per-sample clip flags (codes at either end of the integer range)."""
    dtype = np.dtype(BLOCK_FORMATS[fmt])
    if len(data) != scaling.points * dtype.itemsize:
        raise BlockError(f"{what}: {len(data)} data bytes, but {scaling.points} points of {dtype.itemsize} "
                         f"byte(s) were announced; refusing a short or long capture")
    codes = np.frombuffer(data, dtype=dtype)
    values = (codes.astype(np.float64) - scaling.code_zero) * scaling.lsb + scaling.zero_level
    if dtype.kind in "iu":
        info = np.iinfo(dtype)
        clipped = (codes == info.min) | (codes == info.max)
    else:
        clipped = ~np.isfinite(values)
    return values, clipped
