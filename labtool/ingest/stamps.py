"""Time stamps written as dates and clock times → seconds from the first sample.

Data loggers write the time of each scan as a calendar date and time of day (``2026-11-02
13:01:02.125``, ``2026-11-02T13:01:02.125Z``, ``11/02/2026 1:01:02.125 PM``, ``02.11.2026
13:01:02,125``), as a date column followed by a time-of-day column, or as an elapsed time
``hh:mm:ss.fff``. Each becomes a time in seconds from the first sample; the first stamp as written is
kept (``time_origin``), and a calendar start as ISO 8601 (``start_datetime``).

A day/month order is read from the values: a first number above 12 is a day (day first), a second one
above 12 is a day (month first); when neither occurs, dotted and dashed dates are day first and
slashed ones month first (common practice, no source), and the provenance says it was assumed. Time zones are ignored (times are relative).
Clock times of day that fall back by more than half a day have passed midnight.

The cell patterns are shared with the sniffer, which must tell a stamp column from text.
"""

from __future__ import annotations

import datetime as _dt
import re
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

_DATE = r"(?:\d{4}[-/.]\d{1,2}[-/.]\d{1,2}|\d{1,2}[-/.]\d{1,2}[-/.]\d{2,4})"
_CLOCK = r"\d{1,3}:\d{2}:\d{2}(?:[.,]\d+)?(?:\s*[AaPp][Mm])?"
_ZONE = r"(?:\s*(?:Z|[+-]\d{2}:?\d{2}))?"
# A date alone is a stamp only next to a clock column (``Date,Time``): the sniffer treats it as a value.
STAMP_CELL = rf"(?:{_DATE}(?:(?:T|\s+){_CLOCK}{_ZONE})?|{_CLOCK}{_ZONE})\Z"
DATE_CELL = re.compile(rf"{_DATE}\Z")
CLOCK_CELL = re.compile(rf"{_CLOCK}{_ZONE}\Z")
DATETIME_CELL = re.compile(rf"{_DATE}(?:T|\s+){_CLOCK}{_ZONE}\Z")

_PARTS = re.compile(  # named parts of one stamp (RE2 syntax, for pyarrow.compute.extract_regex)
    r"^\s*(?:(?P<y>\d{4})[-/.](?P<mo>\d{1,2})[-/.](?P<d>\d{1,2})|(?P<a>\d{1,2})(?P<sep>[-/.])(?P<b>\d{1,2})[-/.]"
    r"(?P<yy>\d{2,4}))?(?:T|\s+)?(?P<h>\d{1,3}):(?P<mi>\d{2}):(?P<s>\d{2}(?:[.,]\d*)?)\s*(?P<ap>[AaPp][Mm])?"
    r"\s*(?:Z|[+-]\d{2}:?\d{2})?\s*$")
DAY_S = 86400.0


def stamp_kind(cells: list[str]) -> str | None:
    """``"datetime"``, ``"date"`` or ``"clock"`` when every filled cell is one, else None."""
    filled = [c for c in cells if c]
    if not filled:
        return None
    for kind, pattern in (("datetime", DATETIME_CELL), ("clock", CLOCK_CELL), ("date", DATE_CELL)):
        if all(pattern.match(c) for c in filled):
            return kind
    return None


@dataclass(frozen=True)
class StampSeconds:
    """Seconds from the first stamp (NaN where a cell is empty); ``bad``: index of the first cell that is
    no valid date or time, else None; ``metadata``: ``time_origin`` and, for dates, ``start_datetime``
    (and ``date_order`` when it was assumed)."""

    seconds: np.ndarray
    bad: int | None
    metadata: dict[str, str]


def _numbers(parts: pa.StructArray, name: str, kind=pa.int64()) -> np.ndarray:
    field = pc.struct_field(parts, name)
    field = pc.replace_substring_regex(pc.replace_substring(field, ",", "."), "^$", "0")
    return pc.cast(pc.fill_null(field, "0"), kind).to_numpy(zero_copy_only=False)


def _date_order(a: np.ndarray, b: np.ndarray, sep: str) -> tuple[bool, bool]:
    """(day first, assumed) for dates written d/m/y or m/d/y."""
    if (a > 12).any():
        return True, False
    if (b > 12).any():
        return False, False
    return sep in ".-", True


def _days(years: np.ndarray, months: np.ndarray, days: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Day numbers since 1970 (proleptic Gregorian) and whether each date exists."""
    ok = (months >= 1) & (months <= 12) & (days >= 1) & (years >= 1) & (years <= 9999)
    m = np.where(ok, months, 1)
    first = (np.where(ok, years, 1970) - 1970).astype("datetime64[Y]").astype("datetime64[M]") + (m - 1)
    length = ((first + 1).astype("datetime64[D]") - first.astype("datetime64[D]")).astype(np.int64)
    ok &= days <= length
    return first.astype("datetime64[D]").astype(np.int64) + np.where(ok, days, 1) - 1, ok


def parse_stamps(texts: pa.Array) -> StampSeconds:
    """Stamp cells (strings, nulls for empty cells) → seconds from the first one."""
    texts = pc.utf8_trim_whitespace(texts.cast(pa.string()))
    parts = pc.extract_regex(texts, _PARTS.pattern)
    empty = pc.fill_null(pc.equal(texts, ""), True).to_numpy(zero_copy_only=False)
    matched = parts.is_valid().to_numpy(zero_copy_only=False)
    hours, minutes = _numbers(parts, "h"), _numbers(parts, "mi")
    seconds = _numbers(parts, "s", pa.float64())
    meridiem = pc.utf8_lower(pc.fill_null(pc.struct_field(parts, "ap"), "")).to_numpy(zero_copy_only=False)
    has_meridiem = meridiem != ""
    hours = np.where(has_meridiem, hours % 12 + np.where(meridiem == "pm", 12, 0), hours)
    iso = pc.struct_field(parts, "y").to_numpy(zero_copy_only=False)
    dmy = pc.struct_field(parts, "a").to_numpy(zero_copy_only=False)
    dated = (iso != "") | (dmy != "")
    first = int(np.argmax(~empty)) if (~empty).any() else 0
    with_date = bool(dated[first])
    valid = matched & (dated == with_date) & (minutes < 60) & (seconds < 61) & (~has_meridiem | (hours < 24))
    metadata = {"time_origin": str(texts[first].as_py() or "")}
    if with_date:
        valid &= hours < 24
        years, months, days = _numbers(parts, "y"), _numbers(parts, "mo"), _numbers(parts, "d")
        written = dmy != ""
        if written.any():
            a, b, yy = _numbers(parts, "a"), _numbers(parts, "b"), _numbers(parts, "yy")
            sep = pc.struct_field(parts, "sep")[int(np.argmax(written))].as_py()
            day_first, assumed = _date_order(a[written & matched], b[written & matched], sep)
            years = np.where(written, np.where(yy < 100, yy + 2000, yy), years)
            months = np.where(written, b if day_first else a, months)
            days = np.where(written, a if day_first else b, days)
            if assumed:
                written_as = {".": "dotted", "-": "dashed", "/": "slashed"}[sep]
                metadata["date_order"] = (f"{'day/month' if day_first else 'month/day'} (assumed: no day above 12; "
                                          f"{written_as} dates)")
        day_number, exists = _days(years, months, days)
        valid &= exists
        clock = hours * 3600.0 + minutes * 60.0 + seconds
        total = (day_number - day_number[first]) * DAY_S + clock
    else:
        total = hours * 3600.0 + minutes * 60.0 + seconds
        if (hours < 24).all():  # a clock time of day: past midnight it starts again from zero
            back = np.diff(total, prepend=total[:1]) < -0.5 * DAY_S
            total = total + DAY_S * np.cumsum(back)
    problem = ~valid & ~empty
    bad = int(np.argmax(problem)) if problem.any() else None
    out = np.where(empty | ~valid, np.nan, total - total[first])
    if with_date and bad is None:
        metadata["start_datetime"] = _iso(int(day_number[first]), float(clock[first]))
    return StampSeconds(out, bad, metadata)


def _iso(day_number: int, clock_s: float) -> str:
    start = _dt.datetime(1970, 1, 1) + _dt.timedelta(days=day_number, seconds=clock_s)
    return start.isoformat(timespec="microseconds" if start.microsecond else "seconds")


def seconds_from_objects(values: list) -> StampSeconds | None:
    """Workbook cells holding dates with times, times of day or durations → seconds from the first;
    None when the filled cells are not all of one such kind."""
    filled = [(k, v) for k, v in enumerate(values) if v is not None]
    if not filled:
        return None
    kinds = {type(v) for _, v in filled}
    n = len(values)
    out = np.full(n, np.nan)
    if kinds <= {_dt.datetime}:
        origin = filled[0][1]
        for k, v in filled:
            out[k] = (v - origin).total_seconds()
        meta = {"time_origin": origin.isoformat(), "start_datetime": origin.isoformat()}
    elif kinds <= {_dt.time} or kinds <= {_dt.timedelta}:
        secs = [(k, v.hour * 3600 + v.minute * 60 + v.second + v.microsecond * 1e-6) if isinstance(v, _dt.time)
                else (k, v.total_seconds()) for k, v in filled]
        for k, s in secs:
            out[k] = s - secs[0][1]
        meta = {"time_origin": str(filled[0][1])}
    else:
        return None
    return StampSeconds(out, None, meta)
