"""From a parsed table (names, units, float columns, preamble) to a Capture in SI units.

Both readers end here, so time bases, units, clip flags, roles and file conditions are handled once.
"""

from __future__ import annotations

import re
import time
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from labtool.capture import Capture, Channel, Conditions, Provenance, TimeBase
from labtool.errors import InputError, UsageError
from labtool.ingest.conditions import typed_conditions
from labtool.ingest.options import IngestOptions
from labtool.ingest.roles import assign_roles
from labtool.ingest.sniff import known_unit, split_name_unit
from labtool.units import parse_quantity

# SCPI-1999 Vol. 1 (Syntax and Style), special numeric values: NAN is sent as 9.91E37, INFinity and
# NINFinity as ±9.9E37. Anything at or beyond that magnitude is an instrument's "no valid value".
SCPI_INFINITY = 9.9e37
# Beyond these, an SI value is a wrong unit or a corrupt cell, not a signal on an IC bench (common
# practice, no source): refused with the cell, never stored.
PLAUSIBLE_LIMITS = {"V": 1e6, "A": 1e6, "s": 1e10}

TIME_NAMES = frozenset({"time", "t", "x", "seconds", "sec", "timestamp", "time_s", "elapsed"})
INDEX_NAMES = frozenset({"index", "idx", "sample", "samples", "sample_index", "sample_no", "sample_number",
                         "point", "points", "pt", "n", "no", "nr", "num", "number", "#"})
_INTERVAL_KEYS = frozenset({"sample_interval", "sampling_interval", "sample_period", "sampling_period", "dt",
                            "time_step", "timestep", "xincrement", "xinc", "horizontal_increment",
                            "time_per_sample", "time_interval", "delta_t", "interval"})
_RATE_KEYS = frozenset({"sample_rate", "sampling_rate", "samplerate", "sampling_frequency", "sample_frequency",
                        "fs"})
_START_KEYS = frozenset({"t0", "start_time", "time_offset", "xorigin", "first_sample_time"})
_LENGTH_KEYS = frozenset({"record_length", "number_of_points", "n_points", "points", "record_points"})
# What a channel of each role must be measured in.
ROLE_UNITS = {"supply": "V", "output": "V", "enable": "V", "supply_current": "A"}

Place = Callable[[int | None, int | None], dict]


@dataclass
class RawTable:
    """A table as a reader found it; ``place(row, column)`` gives InputError keywords (line=/field=)
    for a data row (None = the header) and a column (None = the whole row)."""

    source_path: str
    importer: str
    names: list[str]
    units: list[str | None]
    columns: list[np.ndarray]
    place: Place
    locator: str = ""
    metadata: dict[str, str] = field(default_factory=dict)  # preamble pairs as written
    metadata_place: Callable[[str], dict] = lambda key: {}
    notes: list[str] = field(default_factory=list)
    layout: str = ""  # how the file was read, for the record
    base_conditions: Conditions = field(default_factory=Conditions)  # below the preamble's
    sheet_conditions: Conditions = field(default_factory=Conditions)  # above the preamble's


def _key(text: str) -> str:
    return re.sub(r"[^0-9a-z#]+", "_", text.lower()).strip("_")


def _meta_value(table: RawTable, keys: frozenset[str], unit: str, *, strict: bool = True) -> tuple[float, str] | None:
    """A quantity from the preamble whose key is one of ``keys`` (unit in the key or the value).

    Not ``strict``: a value that is no quantity (a clock time under "Start Time") counts as absent.
    """
    for key, value in table.metadata.items():
        name, key_unit = split_name_unit(key)
        if _key(name) not in keys and _key(name).replace("_", "") not in keys:  # "X Increment" as "xincrement"
            continue
        text = value.strip()
        if "." not in text:
            text = text.replace(",", ".")
        text = re.sub(r"\s*(S/s|Sa/s|sps|SPS)$", "Hz", text)
        if key_unit and re.fullmatch(r"[-+0-9.eE]+", text):
            text = f"{text} {key_unit}"
        try:
            return parse_quantity(text, unit, what=key), key
        except UsageError:
            if not strict:
                return None
            raise InputError(table.source_path, f"{key}: {value!r} is not a quantity in {unit}",
                             **table.metadata_place(key)) from None
    return None


def _sample_interval(table: RawTable) -> float | None:
    """The sample interval from the preamble, given directly or as a sample rate."""
    for keys, unit, what in ((_INTERVAL_KEYS, "s", "interval"), (_RATE_KEYS, "Hz", "rate")):
        found = _meta_value(table, keys, unit)
        if found is not None:
            value, key = found
            if not value > 0:
                raise InputError(table.source_path, f"{key}: the sample {what} must be positive",
                                 **table.metadata_place(key))
            return value if what == "interval" else 1.0 / value
    return None


def to_si(values: np.ndarray, factor: float) -> np.ndarray:
    """Scale by a power-of-ten factor; dividing by 10**k for small ones rounds once (10 µs → 1e-05)."""
    if factor == 1.0:
        return values
    inverse = round(1.0 / factor)
    if factor < 1.0 and abs(inverse * factor - 1.0) < 1e-12:
        return values / float(inverse)
    return values * factor


def _first_bad(mask: np.ndarray) -> int:
    return int(np.argmax(mask))


def _time_base(table: RawTable, t_col: int | None, index_col: int | None, factors: list[float]) -> TimeBase:
    path = table.source_path
    n = len(table.columns[0])
    if t_col is not None:
        t = to_si(table.columns[t_col], factors[t_col])
        bad = ~np.isfinite(t) | (np.abs(table.columns[t_col]) >= SCPI_INFINITY)
        if bad.any():
            k = _first_bad(bad)
            raise InputError(path, "time is missing or not a number", **table.place(k, t_col))
        _check_plausible(table, t, np.zeros(n, dtype=bool), t_col, "s")
        steps = np.diff(t)
        if (steps <= 0).any():
            k = _first_bad(steps <= 0) + 1
            raise InputError(path, f"time does not increase ({t[k]:.9g} s after {t[k - 1]:.9g} s)",
                             **table.place(k, t_col))
        return TimeBase.from_times(t)
    dt = _sample_interval(table)
    start = _meta_value(table, _START_KEYS, "s", strict=False)
    t0 = start[0] if start else 0.0
    if index_col is not None:
        if dt is None:
            raise InputError(path, f"column {table.names[index_col]!r} is a sample index and the preamble "
                                   f"gives no sample interval (a line such as 'Sample Interval,2e-9')",
                             **table.place(None, index_col))
        if start is None:  # without a start time, index k is at k·dt
            t0 = float(table.columns[index_col][0]) * dt
    elif dt is None:
        raise InputError(path, "no time column (a column in seconds or named time) and no sample interval "
                               "in the preamble", **table.place(None, None))
    return TimeBase(n=n, t0_s=t0, dt_s=dt)


def _check_plausible(table: RawTable, values: np.ndarray, clipped: np.ndarray, col: int, unit: str) -> None:
    limit = PLAUSIBLE_LIMITS[unit]
    far = ~clipped & (np.abs(values) > limit)
    if far.any():
        k = _first_bad(far)
        raise InputError(table.source_path, f"{values[k]:g} {unit} is beyond the plausible ±{limit:g} {unit} "
                                            f"(a wrong unit or a corrupt file)", **table.place(k, col))


def _is_index(values: np.ndarray) -> bool:
    return bool(np.all(np.isfinite(values)) and values[0] == np.floor(values[0]) and np.all(np.diff(values) == 1))


def _check_record_length(table: RawTable, n: int) -> None:
    for key, value in table.metadata.items():
        if _key(key) in _LENGTH_KEYS and re.fullmatch(r"\s*\d+\s*", value):
            expected = int(value)
            if expected != n:
                raise InputError(table.source_path, f"{key} is {expected} but the file holds {n} data rows "
                                                    f"(truncated or cut)", **table.metadata_place(key))


def build_capture(table: RawTable, sha256: str, options: IngestOptions) -> Capture:
    """Check and convert a table; raise InputError naming the line or cell of any problem."""
    path = table.source_path
    n = len(table.columns[0]) if table.columns else 0
    if n < 2:
        raise InputError(path, f"{n} data row{'s' if n != 1 else ''}; a capture needs at least 2 samples",
                         **table.place(None, None))
    seen: dict[str, int] = {}
    for k, name in enumerate(table.names):
        if name in seen:
            raise InputError(path, f"two columns named {name!r}", **table.place(None, k))
        seen[name] = k
    _check_record_length(table, n)

    bases: list[str | None] = []
    factors: list[float] = []
    for k, unit in enumerate(table.units):
        info = known_unit(unit) if unit else None
        bases.append(info[0] if info else unit)
        factors.append(info[1] if info else 1.0)
    keys = [_key(name) for name in table.names]
    t_col = next((k for k, b in enumerate(bases) if b == "s"), None)
    if t_col is None:
        t_col = next((k for k, key in enumerate(keys) if key in TIME_NAMES), None)
    if t_col is not None and bases[t_col] not in (None, "s"):
        raise InputError(path, f"column {table.names[t_col]!r} is in {bases[t_col]}; time must be in seconds",
                         **table.place(None, t_col))
    index_col = None
    if t_col is None:
        index_col = next((k for k, key in enumerate(keys)
                          if key in INDEX_NAMES and bases[k] is None and _is_index(table.columns[k])), None)
    time_base = _time_base(table, t_col, index_col, factors)

    channel_cols = [k for k in range(len(table.names)) if k not in (t_col, index_col)]
    roles = assign_roles([table.names[k] for k in channel_cols], options.picks(), path=path,
                         place=table.place(None, None), all_columns=table.names)
    channels = []
    for k, role in zip(channel_cols, roles):
        want = ROLE_UNITS.get(role)
        unit = bases[k]
        if want and unit not in (None, want):
            what = f"has an unknown unit {unit!r}" if known_unit(unit) is None else f"is in {unit}"
            raise InputError(path, f"column {table.names[k]!r} ({role}) {what}; it must be in {want}",
                             **table.place(None, k))
        values = to_si(table.columns[k], factors[k])
        clipped = ~np.isfinite(values) | (np.abs(table.columns[k]) >= SCPI_INFINITY)
        if role in ("supply", "output") and clipped.all():
            raise InputError(path, f"column {table.names[k]!r} ({role}) holds no valid values",
                             **table.place(None, k))
        if want:
            _check_plausible(table, values, clipped, k, want)
        values = np.where(clipped, np.nan, values)
        channels.append(Channel(name=table.names[k], unit=unit or want or "", role=role, values=values,
                                clipped=clipped if clipped.any() else None))

    from_file = typed_conditions(table.metadata, path=path, place=table.metadata_place, known_only=True)
    conditions = table.base_conditions.merged(from_file).merged(table.sheet_conditions)
    metadata = dict(table.metadata)
    if table.notes:
        metadata["notes"] = " | ".join(table.notes)
    if table.layout:
        metadata["layout"] = table.layout
    provenance = Provenance(source_path=path, sha256=sha256, importer=table.importer,
                            imported_at=time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
                            locator=table.locator, metadata=metadata)
    return Capture(time=time_base, channels=tuple(channels), conditions=conditions, provenance=provenance)
