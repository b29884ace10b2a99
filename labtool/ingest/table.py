"""From a parsed table (names, units, float columns, preamble) to a Capture in SI units.

Both readers end here, so time bases, units, clip flags, roles and file conditions are handled once.
"""

from __future__ import annotations

import dataclasses
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
from labtool.ingest.shape import ChannelShape, channel_shape, moves
from labtool.ingest.sniff import (CHANNEL_NAME_KEYS, HORIZONTAL_UNIT_KEYS, VERTICAL_UNIT_KEYS, is_index_unit,
                                  known_unit, normal_key, split_name_unit)
from labtool.ingest.timebase import min_max_pairs, rebuild_rounded
from labtool.units import parse_quantity

# SCPI-1999 Vol. 1 (Syntax and Style), special numeric values: NAN is sent as 9.91E37, INFinity and
# NINFinity as ±9.9E37. Anything at or beyond that magnitude is an instrument's "no valid value".
SCPI_INFINITY = 9.9e37
# Beyond these, an SI value is a wrong unit or a corrupt cell, not a signal on an IC bench (common
# practice, no source): refused with the cell, never stored.
PLAUSIBLE_LIMITS = {"V": 1e6, "A": 1e6, "s": 1e10}

TIME_NAMES = frozenset({"time", "t", "x", "seconds", "sec", "timestamp", "time_s", "elapsed", "elapsed_time",
                        "time_elapsed", "relative_time", "rel_time", "time_rel", "date_time", "datetime"})
# Words of a sample-index or scan-number column's name ("Sample #", "Scan No.", "Reading").
INDEX_WORDS = frozenset({"index", "idx", "sample", "samples", "point", "points", "pt", "n", "no", "nr", "num",
                         "number", "#", "scan", "scans", "reading", "readings", "record", "rec", "sweep", "seq",
                         "sequence"})
_INTERVAL_KEYS = frozenset({"sample_interval", "sampling_interval", "sample_period", "sampling_period", "dt",
                            "time_step", "timestep", "xincrement", "xinc", "horizontal_increment",
                            "time_per_sample", "time_interval", "delta_t", "interval", "increment", "hresolution",
                            "horizontal_resolution", "x_interval", "xinterval", "sample_time", "sampling_time"})
_RATE_KEYS = frozenset({"sample_rate", "sampling_rate", "samplerate", "sampling_frequency", "sample_frequency",
                        "fs"})
_START_KEYS = frozenset({"t0", "start_time", "time_offset", "xorigin", "first_sample_time", "start",
                         "hoffset", "horizontal_offset", "x_offset", "xoffset", "start_x", "x_start"})
_LENGTH_KEYS = frozenset({"record_length", "number_of_points", "n_points", "points", "record_points", "samples",
                          "size", "memory_length", "record_size", "number_of_samples", "n_samples", "sample_count",
                          "data_points", "num_points", "length", "point_count"})
# A quantity with its unit in parentheses: "80000000(ps)".
_PAREN_UNIT = re.compile(r"^\s*([-+]?[0-9.]+(?:[eE][-+]?\d+)?)\s*\(\s*([^()]+?)\s*\)\s*$")
# What a channel of each role must be measured in.
ROLE_UNITS = {"supply": "V", "output": "V", "enable": "V", "supply_current": "A"}
LOWER_ENVELOPE, UPPER_ENVELOPE = "_min", "_max"  # channel names of a peak-detect pair

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
    warnings: list[str] = field(default_factory=list)  # what the reader noticed (a footer not read …)
    base_conditions: Conditions = field(default_factory=Conditions)  # below the preamble's
    sheet_conditions: Conditions = field(default_factory=Conditions)  # above the preamble's


def _is_index_name(key: str) -> bool:
    """``sample_#``, ``scan_no``, ``#``: only index words (a bare "#" is one)."""
    words = [w for w in re.split(r"[_#]+", key) if w] or ([key] if key else [])
    return bool(words) and all(w in INDEX_WORDS for w in words)


def _meta_text(table: RawTable, keys: frozenset[str]) -> str | None:
    """The value of the first preamble key that is one of ``keys``."""
    return next((value.strip() for key, value in table.metadata.items() if normal_key(key) in keys), None)


def horizontal_unit(table: RawTable) -> str | None:
    """The time axis's unit from the preamble (``Horizontal Units,ms``, ``HUnit,us``), when it is one in s."""
    text = _meta_text(table, HORIZONTAL_UNIT_KEYS)
    info = known_unit(text) if text else None
    return text if info and info[0] == "s" else None


def _meta_value(table: RawTable, keys: frozenset[str], unit: str, *, strict: bool = True) -> tuple[float, str] | None:
    """A quantity from the preamble whose key is one of ``keys`` (unit in the key or the value; a bare
    time is in the preamble's horizontal unit when it gives one).

    Not ``strict``: a value that is no quantity (a clock time under "Start Time") counts as absent.
    """
    for key, value in table.metadata.items():
        name, key_unit = split_name_unit(key)
        if normal_key(name) not in keys and normal_key(name).replace("_", "") not in keys:  # "X Increment" as "xincrement"
            continue
        text = value.strip()
        if "." not in text:
            text = text.replace(",", ".")
        text = _PAREN_UNIT.sub(r"\1 \2", text)
        if " " in text.strip() and all(_PAREN_UNIT.match(f"{w}(s)") for w in text.split()):
            text = text.split()[0]  # one value per channel ("2e-08 2e-08 4e-08"): the first channel's
        text = re.sub(r"\s*(S/s|Sa/s|sps|SPS)$", "Hz", text)
        bare_unit = key_unit or (horizontal_unit(table) if unit == "s" else None)
        if bare_unit and re.fullmatch(r"[-+0-9.eE]+", text):
            text = f"{text} {bare_unit}"
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


@dataclass
class _Findings:
    """What building a capture noticed beyond the table itself: warnings and provenance notes."""

    warnings: list[str] = field(default_factory=list)
    metadata: dict[str, str] = field(default_factory=dict)

    def warn(self, text: str, **meta: str) -> None:
        self.warnings.append(text)
        self.metadata.update(meta)


def _time_from_column(table: RawTable, t_col: int, factors: list[float], found: _Findings, *,
                      pairs: bool) -> TimeBase:
    path = table.source_path
    raw = table.columns[t_col]
    t = to_si(raw, factors[t_col])
    bad = ~np.isfinite(t) | (np.abs(raw) >= SCPI_INFINITY)
    if bad.any():
        k = _first_bad(bad)
        raise InputError(path, "time is missing or not a number", **table.place(k, t_col))
    _check_plausible(table, t, np.zeros(t.size, dtype=bool), t_col, "s")
    if pairs:
        t = t[0::2]
    steps = np.diff(t)
    increasing = bool((steps > 0).all())
    if increasing:
        base = TimeBase.from_times(t)
        if base.uniform:
            return base
    rebuilt = rebuild_rounded(t, _sample_interval(table))
    if rebuilt is None and _sample_interval(table) is not None:
        rebuilt = rebuild_rounded(t, None)
    if rebuilt is not None:
        base, q = rebuilt
        source = "the preamble's sample interval" if base.dt_s == _sample_interval(table) else "the time stamps"
        note = (f"time stamps printed with {q:.3g} s resolution; uniform time base rebuilt from {source} "
                f"(dt {base.dt_s:.9g} s, start {base.t0_s:.9g} s)")
        found.warn(note, time_base_rebuilt=note)
        return base
    if increasing:
        return base
    k = _first_bad(steps <= 0) + 1
    row = 2 * k if pairs else k
    raise InputError(path, f"time does not increase ({t[k]:.9g} s after {t[k - 1]:.9g} s)", **table.place(row, t_col))


def _time_without_column(table: RawTable, index_col: int | None, n: int) -> TimeBase:
    path = table.source_path
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


def _length_claim(table: RawTable) -> tuple[str, int] | None:
    """The first preamble line that says how many samples the record holds (Record Length, #Samples …)."""
    for key, value in table.metadata.items():
        if normal_key(split_name_unit(key)[0]) in _LENGTH_KEYS:
            # "2001", "2001 Points", "2.001000e+03" (a count printed like a float)
            m = re.fullmatch(r"\s*(\d+(?:\.\d*)?(?:[eE]\+?\d+)?)\s*(?:\(?\s*(?:pts|points|samples|sa|s)\s*\)?)?\s*",
                             value, re.IGNORECASE)
            if m and float(m.group(1)).is_integer():
                return key, int(float(m.group(1)))
    return None


def _check_length(table: RawTable, n_rows: int, n: int, channels: list[Channel], found: _Findings) -> None:
    """One rule for every length claim: import what is there, flagged ``truncated``, unless nothing moves."""
    claim = _length_claim(table)
    if claim is None or claim[1] in (n_rows, n):
        return
    key, expected = claim
    if expected > n:
        if not any(moves(c.values) for c in channels if c.unit == "V"):
            raise InputError(table.source_path, f"{key} is {expected} but the file holds {n} samples and none of "
                                                f"them moves: the cut removed the whole startup",
                             **table.metadata_place(key))
        found.warn(f"{key} is {expected} but the file holds {n} samples: imported as truncated",
                   truncated=f"{n} of {expected} samples")
    else:
        found.warn(f"{key} is {expected} but the file holds {n} samples: all of them imported")


def _channel_columns(table: RawTable, skip: set[int], pairs: bool, bases, factors):
    """(name, column, SI base, values) of every channel; a min/max pair column gives two."""
    out = []
    for k in range(len(table.names)):
        if k in skip:
            continue
        values = to_si(table.columns[k], factors[k])
        if pairs:  # peak detect: the lower and the upper envelope on one time base
            lower, upper = np.fmin(values[0::2], values[1::2]), np.fmax(values[0::2], values[1::2])
            out.append((f"{table.names[k]}{LOWER_ENVELOPE}", k, bases[k], lower))
            out.append((f"{table.names[k]}{UPPER_ENVELOPE}", k, bases[k], upper))
        else:
            out.append((table.names[k], k, bases[k], values))
    return out


def infer_roles(names: list[str], units: list[str | None], values: list[np.ndarray], time_base: TimeBase,
                options: IngestOptions, *, path: str, place: dict, all_columns: list[str]) -> list[tuple[str, str]]:
    """(role, role_source) per channel: flags, names, then waveform shapes (computed only when asked).

    The lower envelope of a min/max pair takes no role by name or shape: its upper twin does.
    """
    shapes: dict[int, ChannelShape] = {}

    def shape_of(j: int) -> ChannelShape:
        if j not in shapes:
            shapes[j] = channel_shape(time_base.array(), values[j])
        return shapes[j]

    lower = {n for n in names if n.endswith(LOWER_ENVELOPE)
             and n.removesuffix(LOWER_ENVELOPE) + UPPER_ENVELOPE in names}
    return assign_roles(names, options.picks(), path=path, place=place, all_columns=all_columns,
                        shape_of=shape_of, units=units, eligible=[n not in lower for n in names])


def check_role_unit(path: str, column: str, role: str, unit: str | None, place: dict) -> str | None:
    """The unit a role needs (None: any), refusing a column in another one."""
    want = ROLE_UNITS.get(role)
    if want and unit not in (None, "", want):
        what = f"has an unknown unit {unit!r}" if known_unit(unit) is None else f"is in {unit}"
        raise InputError(path, f"column {column!r} ({role}) {what}; it must be in {want}", **place)
    return want


def check_role_values(path: str, column: str, role: str, clipped: np.ndarray, place: dict) -> None:
    if role in ("supply", "output") and clipped.all():
        raise InputError(path, f"column {column!r} ({role}) holds no valid values", **place)


def assign_capture_roles(capture: Capture, options: IngestOptions) -> Capture:
    """Roles of a capture joined from several files, by the same rules as a single table's."""
    path = capture.provenance.source_path
    chans = capture.channels
    names = [c.name for c in chans]
    assigned = infer_roles(names, [c.unit or None for c in chans], [c.values for c in chans], capture.time,
                           options, path=path, place={}, all_columns=names)
    out = []
    for c, (role, source) in zip(chans, assigned):
        check_role_unit(path, c.name, role, c.unit, {})
        check_role_values(path, c.name, role, ~np.isfinite(c.values), {})
        out.append(dataclasses.replace(c, role=role, role_source=source))
    return dataclasses.replace(capture, channels=tuple(out))


def build_capture(table: RawTable, sha256: str, options: IngestOptions) -> Capture:
    """Check and convert a table; raise InputError naming the line or cell of any problem."""
    path = table.source_path
    n_rows = len(table.columns[0]) if table.columns else 0
    if n_rows < 2:
        raise InputError(path, f"{n_rows} data row{'s' if n_rows != 1 else ''}; a capture needs at least 2 samples",
                         **table.place(None, None))
    found = _Findings(warnings=list(table.warnings))
    units = list(table.units)
    bases, factors = _bases_and_factors(units)
    t_col, index_col = _time_and_index_columns(table, bases)
    _units_from_preamble(table, units, t_col, index_col)
    _names_from_preamble(table, t_col, index_col)
    bases, factors = _bases_and_factors(units)
    pairs = t_col is not None and min_max_pairs(table.columns[t_col])
    if t_col is not None:
        time_base = _time_from_column(table, t_col, factors, found, pairs=pairs)
    else:
        time_base = _time_without_column(table, index_col, n_rows)
    if pairs:
        found.metadata["peak_detect"] = "min/max pairs: every time written twice; channels NAME_min and NAME_max"

    columns = _channel_columns(table, {t_col, index_col}, pairs, bases, factors)
    assigned = infer_roles([c[0] for c in columns], [c[2] for c in columns], [c[3] for c in columns],
                           time_base, options, path=path, place=table.place(None, None),
                           all_columns=table.names)
    channels = []
    for (name, k, unit, values), (role, source) in zip(columns, assigned):
        want = check_role_unit(path, table.names[k], role, unit, table.place(None, k))
        raw = table.columns[k] if not pairs else values
        clipped = ~np.isfinite(values) | (np.abs(raw) >= SCPI_INFINITY)
        check_role_values(path, table.names[k], role, clipped, table.place(None, k))
        if want:
            _check_plausible(table, values, clipped, k, want)
        values = np.where(clipped, np.nan, values)
        channels.append(Channel(name=name, unit=unit or want or "", role=role, values=values,
                                clipped=clipped if clipped.any() else None, role_source=source))
    _check_length(table, n_rows, time_base.n, channels, found)

    from_file = typed_conditions(table.metadata, path=path, place=table.metadata_place, known_only=True)
    conditions = table.base_conditions.merged(from_file).merged(table.sheet_conditions)
    metadata = dict(table.metadata)
    if table.notes:
        metadata["notes"] = " | ".join(table.notes)
    if table.layout:
        metadata["layout"] = table.layout
    metadata.update(found.metadata)
    if found.warnings:
        metadata["warnings"] = " | ".join(found.warnings)
    provenance = Provenance(source_path=path, sha256=sha256, importer=table.importer,
                            imported_at=time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
                            locator=table.locator, metadata=metadata)
    return Capture(time=time_base, channels=tuple(channels), conditions=conditions, provenance=provenance)


def _bases_and_factors(units: list[str | None]) -> tuple[list[str | None], list[float]]:
    """SI base (None for an index marker or no unit) and factor to it, per column."""
    bases, factors = [], []
    for unit in units:
        info = known_unit(unit) if unit else None
        bases.append(None if is_index_unit(unit) else (info[0] if info else unit))
        factors.append(info[1] if info else 1.0)
    return bases, factors


def _units_from_preamble(table: RawTable, units: list[str | None], t_col: int | None, index_col: int | None) -> None:
    """Units the header leaves out, from the preamble (``units`` edited in place): the time axis's
    (``Horizontal Units,ms``) for the time column, the channels' (``Vertical Units,V``, one for all or
    one per channel in order) for the others."""
    if t_col is not None and units[t_col] is None:
        units[t_col] = horizontal_unit(table)
    vertical = (_meta_text(table, VERTICAL_UNIT_KEYS) or "").split()
    if not vertical or not all(known_unit(u) for u in vertical):
        return
    channels = [k for k in range(len(units)) if k not in (t_col, index_col)]
    if len(vertical) == 1:
        vertical = vertical * len(channels)
    if len(vertical) == len(channels):
        for k, unit in zip(channels, vertical):
            if units[k] is None:
                units[k] = unit


def _names_from_preamble(table: RawTable, t_col: int | None, index_col: int | None) -> None:
    """A table without a header: channel names from a preamble ``Source,CH2`` (one per channel, in order)."""
    if not all(re.fullmatch(r"column\d+", name) for name in table.names):
        return
    given = (_meta_text(table, CHANNEL_NAME_KEYS) or "").split()
    channels = [k for k in range(len(table.names)) if k not in (t_col, index_col)]
    if len(given) == len(channels) and len(set(given)) == len(given) and not set(given) & set(table.names):
        for k, name in zip(channels, given):
            table.names[k] = name


def _time_and_index_columns(table: RawTable, bases: list[str | None]) -> tuple[int | None, int | None]:
    """The time column (in seconds, or named like time) and the sample-index column, either may be None.

    A column of consecutive integers is an index, whatever its name, when the preamble gives the interval
    (so ``x`` or ``Time`` holding 0, 1, 2 … is never read as whole seconds). A table without a header
    takes its first column as time when it increases throughout. Beside a time column, a column of
    consecutive integers named like an index (``Scan``, ``Sample #``) or not named at all (the row
    numbers a data-frame library writes first) is an index, not a channel.
    """
    path = table.source_path
    keys = [normal_key(name) for name in table.names]
    t_col = next((k for k, b in enumerate(bases) if b == "s"), None)
    if t_col is None:
        t_col = next((k for k, key in enumerate(keys) if key in TIME_NAMES), None)
    if t_col is not None and bases[t_col] not in (None, "s"):
        raise InputError(path, f"column {table.names[t_col]!r} is in {bases[t_col]}; time must be in seconds",
                         **table.place(None, t_col))
    if t_col is not None and _is_index(table.columns[t_col]) and _sample_interval(table) is not None:
        return None, t_col
    headerless = all(re.fullmatch(r"column\d+", name) for name in table.names)

    def index_like(k: int) -> bool:  # named like an index, marked so in the units row, or unnamed beside names
        unnamed = not headerless and re.fullmatch(r"column\d+|unnamed_\d+", keys[k]) is not None
        return _is_index_name(keys[k]) or is_index_unit(table.units[k]) or unnamed

    index_col = next((k for k in range(len(keys)) if k != t_col and bases[k] is None and index_like(k)
                      and _is_index(table.columns[k])), None)
    if t_col is None:
        if index_col is not None:
            return None, index_col
        first = table.columns[0]
        if headerless and len(table.names) >= 2 and np.isfinite(first).all() and (np.diff(first) > 0).all():
            if _is_index(first) and _sample_interval(table) is not None:
                return None, 0
            return 0, None
    return t_col, index_col
