"""The capture model: one supply-ramp record with its channels, conditions and provenance.

Every importer, the bench acquisition and the startup model produce a :class:`Capture`; every
measurement, statistic and report consumes one. Values are SI (V, A, s) once inside a Capture.
"""

from __future__ import annotations

import dataclasses
import hashlib
import math
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from labtool.errors import MeasurementError, UsageError

ROLES = ("supply", "output", "enable", "supply_current", "other")
ROLE_SOURCES = ("name", "shape", "flag", "")
# Provenance metadata key: when the supply became valid (seconds on the capture's time axis), given by
# the user for a capture without a supply channel.
SUPPLY_VALID_KEY = "supply_valid_at_s"

# Condition fields with a type; any other condition is a free-text tag.
CONDITION_TYPES: dict[str, type] = {
    "lot": str,
    "wafer": str,
    "die_x": int,
    "die_y": int,
    "part": str,
    "temperature_c": float,
    "ramp_s": float,
    "vdd_v": float,
    "repeat": int,
}
# Aliases accepted in name patterns and manifests.
CONDITION_ALIASES = {"temp_c": "temperature_c", "temp": "temperature_c", "t_c": "temperature_c",
                     "ramp": "ramp_s", "vdd": "vdd_v", "rep": "repeat", "x": "die_x", "y": "die_y",
                     "die": "part", "unit": "part"}


@dataclass(frozen=True)
class TimeBase:
    """Sample instants: uniform ``t0_s + i·dt_s``, or explicit ``times_s`` when not uniform."""

    n: int
    t0_s: float = 0.0
    dt_s: float | None = None
    times_s: np.ndarray | None = field(default=None, compare=False, repr=False)

    def __post_init__(self):
        if self.times_s is None and (self.dt_s is None or not self.dt_s > 0):
            raise UsageError("a uniform time base needs a positive sample interval")
        if self.times_s is not None and len(self.times_s) != self.n:
            raise UsageError("explicit times do not match the sample count")

    @property
    def uniform(self) -> bool:
        return self.times_s is None

    def array(self) -> np.ndarray:
        if self.times_s is not None:
            return self.times_s
        return self.t0_s + self.dt_s * np.arange(self.n, dtype=np.float64)

    @staticmethod
    def from_times(times_s: np.ndarray, rtol: float = 1e-6) -> "TimeBase":
        """Uniform when the steps agree to ``rtol`` of the mean step (scope exports round times)."""
        t = np.asarray(times_s, dtype=np.float64)
        if t.size >= 2:
            steps = np.diff(t)
            mean = (t[-1] - t[0]) / (t.size - 1)
            if mean > 0 and np.all(np.abs(steps - mean) <= max(rtol * abs(mean), 1e-9 * abs(mean)) + 1e-6 * abs(mean)):
                return TimeBase(n=t.size, t0_s=float(t[0]), dt_s=float(mean))
        return TimeBase(n=t.size, t0_s=float(t[0]) if t.size else 0.0, times_s=t)


@dataclass(frozen=True)
class Channel:
    """One recorded signal in SI units; ``clipped`` marks samples that were over range or not-a-number."""

    name: str
    unit: str
    role: str
    values: np.ndarray = field(compare=False, repr=False)
    clipped: np.ndarray | None = field(default=None, compare=False, repr=False)
    role_source: str = ""  # how the role was found: "name", "shape" (the waveform), "flag"; "" for no role

    def __post_init__(self):
        if self.role_source not in ROLE_SOURCES:
            raise UsageError(f"channel {self.name!r}: role source {self.role_source!r} is not one of "
                             f"{', '.join(s for s in ROLE_SOURCES if s)}")
        if self.role not in ROLES:
            raise UsageError(f"channel {self.name!r}: role {self.role!r} is not one of {', '.join(ROLES)}")

    @property
    def n_clipped(self) -> int:
        return 0 if self.clipped is None else int(np.count_nonzero(self.clipped))


@dataclass(frozen=True)
class Conditions:
    """Under which conditions a capture was taken. Unknown keys live in ``tags``."""

    lot: str | None = None
    wafer: str | None = None
    die_x: int | None = None
    die_y: int | None = None
    part: str | None = None
    temperature_c: float | None = None
    ramp_s: float | None = None
    vdd_v: float | None = None
    repeat: int | None = None
    tags: Mapping[str, str] = field(default_factory=dict)

    @staticmethod
    def from_mapping(values: Mapping[str, Any], *, what: str = "conditions") -> "Conditions":
        """Type known fields (aliases allowed); everything else becomes a tag. Empty values are skipped."""
        known: dict[str, Any] = {}
        tags: dict[str, str] = {}
        for raw_key, raw in values.items():
            if raw is None or (isinstance(raw, float) and math.isnan(raw)) or str(raw).strip() == "":
                continue
            key = str(raw_key).strip()
            key = CONDITION_ALIASES.get(key.lower(), key.lower() if key.lower() in CONDITION_TYPES else key)
            if key in CONDITION_TYPES:
                known[key] = coerce_condition(key, raw, what=what)
            else:
                tags[key] = str(raw).strip()
        return Conditions(**known, tags=tags)

    def merged(self, other: "Conditions") -> "Conditions":
        """Fields of ``other`` that are set win over ours; tags are merged."""
        updates = {k: v for k, v in dataclasses.asdict(other).items() if k != "tags" and v is not None}
        return dataclasses.replace(self, **updates, tags={**self.tags, **other.tags})


def coerce_condition(key: str, raw: Any, *, what: str = "conditions") -> Any:
    """Convert one condition value to its declared type, with an error naming the field."""
    kind = CONDITION_TYPES[key]
    text = str(raw).strip()
    try:
        if kind is str:
            return text
        if kind is int:
            f = float(text.replace(",", "."))
            if not f.is_integer():
                raise ValueError
            return int(f)
        if key == "ramp_s":
            from labtool.units import parse_quantity

            return parse_quantity(text.replace(",", "."), "s", what=key)
        if key == "temperature_c":
            text = text.replace(",", ".").removesuffix("°C").removesuffix("C").removesuffix("c")
            if text.startswith("m") and text[1:].replace(".", "", 1).isdigit():
                text = "-" + text[1:]  # "m40" for -40 °C is usual in file names
        if key == "vdd_v":
            text = text.replace(",", ".").replace("p", ".").removesuffix("V").removesuffix("v")
        return float(text)
    except (ValueError, UsageError):
        raise UsageError(f"{what}: {key} = {raw!r} is not a valid {kind.__name__}") from None


@dataclass(frozen=True)
class Provenance:
    """Where a capture came from: path, hash of the raw bytes, importer and its metadata."""

    source_path: str
    sha256: str
    importer: str
    imported_at: str
    locator: str = ""  # sheet name, block index or plan step within the source
    metadata: Mapping[str, str] = field(default_factory=dict)
    revision: int = 0  # > 0: the same source stored again under other conditions (a new catalog version)

    @property
    def truncated(self) -> bool:
        """The file claimed more samples than it holds (``metadata["truncated"]`` says how many)."""
        return "truncated" in self.metadata

    @property
    def warnings(self) -> list[str]:
        """What the importer warned about (rebuilt time base, truncation …), one line each."""
        text = self.metadata.get("warnings", "")
        return text.split(" | ") if text else []


@dataclass(frozen=True)
class Capture:
    time: TimeBase
    channels: tuple[Channel, ...]
    conditions: Conditions
    provenance: Provenance

    def __post_init__(self):
        names = [c.name for c in self.channels]
        if len(set(names)) != len(names):
            raise UsageError(f"duplicate channel names: {names}")
        for c in self.channels:
            if len(c.values) != self.time.n:
                raise UsageError(f"channel {c.name!r} has {len(c.values)} samples, time base {self.time.n}")

    @property
    def capture_id(self) -> str:
        """Stable id from the raw bytes' hash, the place inside the source and the conditions revision."""
        return capture_id_for(self.provenance.sha256, self.provenance.locator, self.provenance.revision)

    def channel(self, role: str) -> Channel:
        found = [c for c in self.channels if c.role == role]
        if not found:
            raise MeasurementError(
                f"{self.provenance.source_path}: no {role} channel (channels: "
                f"{', '.join(f'{c.name}={c.role}' for c in self.channels)})")
        return found[0]

    def has_role(self, role: str) -> bool:
        return any(c.role == role for c in self.channels)

    def times(self) -> np.ndarray:
        return self.time.array()

    def to_pandas(self):
        """The samples as a ``pandas.DataFrame``: index ``time_s`` (seconds), one column per channel (SI
        values; clipped samples stay as recorded). ``attrs`` holds ``units`` and ``roles`` per channel,
        the capture's ``capture_id``, ``conditions`` (the fields that are set, tags included) and ``source``."""
        import pandas as pd

        frame = pd.DataFrame({c.name: np.asarray(c.values, dtype=np.float64) for c in self.channels},
                             index=pd.Index(self.times(), name="time_s"))
        conditions = {k: v for k, v in dataclasses.asdict(self.conditions).items() if k != "tags" and v is not None}
        frame.attrs.update(units={c.name: c.unit for c in self.channels}, roles={c.name: c.role for c in self.channels},
                           capture_id=self.capture_id, conditions={**conditions, **self.conditions.tags},
                           source=self.provenance.source_path + (f" [{self.provenance.locator}]"
                                                                 if self.provenance.locator else ""))
        return frame


def capture_id_for(sha256: str, locator: str = "", revision: int = 0) -> str:
    key = f"{sha256}|{locator}" + (f"|r{revision}" if revision else "")
    return hashlib.sha256(key.encode()).hexdigest()[:16]


def sha256_bytes(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()
