"""Captures from files, and their startup measurement: ``labtool.read``, ``labtool.measure``."""

from __future__ import annotations

import os
import warnings
from pathlib import Path
from typing import TYPE_CHECKING, Any, Mapping, Sequence, Union

from labtool.capture import Capture, Conditions
from labtool.errors import UsageError
from labtool.ingest import IngestOptions, read_path
from labtool.measure.engine import RESULT_FIELDS, StartupResult, measure_arrays, measure_capture
from labtool.measure.limits import Limits

if TYPE_CHECKING:
    import pandas as pd

PathArg = Union[str, "os.PathLike[str]"]
LimitsArg = Union[Limits, Mapping[str, Any], PathArg, None]
# The columns of `labtool measure --json`, in its order.
MEASURE_COLUMNS = ("capture_id", "file", *RESULT_FIELDS, "evidence", "fit")


def as_limits(limits: LimitsArg) -> Limits:
    """Limits from a Limits, a mapping of its fields (values as numbers or text: ``{"max_delay_s": "50us"}``),
    a TOML limits file, or None (the defaults)."""
    if limits is None:
        return Limits()
    if isinstance(limits, Limits):
        return limits
    if isinstance(limits, (str, os.PathLike)):
        return Limits.from_toml(limits)
    if isinstance(limits, Mapping):
        return Limits().merged(**limits)
    raise UsageError(f"limits: expected Limits, a mapping of its fields or a TOML file, not {type(limits).__name__}")


def ingest_options(*, supply: str | None = None, output: str | None = None, enable: str | None = None,
                   supply_current: str | None = None, supply_valid_at_s: float | str | None = None,
                   name_pattern: str | None = None, conditions: Mapping[str, Any] | None = None,
                   **more: Any) -> IngestOptions:
    """IngestOptions from the API's keywords: column picks by role, the supply-valid instant of an
    output-only record (seconds, or text such as ``"20us"``), a name pattern and extra conditions."""
    from labtool.units import parse_quantity

    valid = None if supply_valid_at_s is None else parse_quantity(supply_valid_at_s, "s", what="supply_valid_at_s")
    extra = Conditions.from_mapping(conditions, what="conditions") if conditions else None
    return IngestOptions(supply=supply, output=output, enable=enable, supply_current=supply_current,
                         supply_valid_at_s=valid, name_pattern=name_pattern, extra_conditions=extra, **more)


def read_all(path: PathArg, **picks: Any) -> list[Capture]:
    """Every capture of one file (CSV, CSV.gz, XLSX: a workbook may hold one per sheet).

    Keywords: ``supply``, ``output``, ``enable``, ``supply_current`` (column names, as the CLI's
    ``--supply`` …), ``supply_valid_at_s``, ``name_pattern`` and ``conditions`` (a mapping laid over
    the file's own). Raises :class:`labtool.LabtoolError` (an ``InputError`` naming the file and place).
    """
    return read_path(os.fspath(path), ingest_options(**picks))


def read(path: PathArg, *, locator: str | None = None, **picks: Any) -> Capture:
    """The capture of one file; ``locator`` picks one of several (an XLSX sheet name). Keywords as
    :func:`read_all`."""
    captures = read_all(path, **picks)
    if locator is not None:
        captures = [c for c in captures if c.provenance.locator == locator]
        if not captures:
            raise UsageError(f"{path}: no capture at {locator!r}")
    if len(captures) != 1:
        where = ", ".join(repr(c.provenance.locator) for c in captures)
        raise UsageError(f"{path}: holds {len(captures)} captures ({where}); give locator= or use read_all")
    return captures[0]


def measure(source: Capture | PathArg | tuple | Sequence[Capture | PathArg], limits: LimitsArg = None, *,
            scheduler: str | None = None, **picks: Any) -> StartupResult | "pd.DataFrame":
    """Startup metrics and verdict.

    ``source``: a :class:`~labtool.Capture`, a capture file, or a tuple of arrays ``(t_s, output_v)`` /
    ``(t_s, supply_v, output_v)`` (supply may be None) → the frozen :class:`~labtool.StartupResult`.
    A list of files and captures → a DataFrame with the columns of ``labtool measure --json``, one row
    per capture; files that fail are warned about and listed in ``attrs["failed"]``, the others measured.
    ``scheduler``: ``"local:N"`` or ``"tcp://HOST:PORT"`` to read the files in workers (default: here).
    ``limits``: :class:`~labtool.Limits`, a mapping of its fields, or a TOML limits file.
    """
    chosen = as_limits(limits)
    if isinstance(source, Capture):
        return measure_capture(source, chosen)
    if isinstance(source, (str, os.PathLike)):
        return measure_capture(read(source, **picks), chosen)
    if isinstance(source, tuple) and 2 <= len(source) <= 3 and not isinstance(source[0], (str, os.PathLike, Capture)):
        t, supply, output = source if len(source) == 3 else (source[0], None, source[1])
        return measure_arrays(t, supply, output, chosen)
    if isinstance(source, (list, tuple)):
        return _measure_batch(source, chosen, scheduler, ingest_options(**picks))
    raise UsageError(f"measure: expected a Capture, a file, a tuple of arrays or a list, not {type(source).__name__}")


def _measure_batch(items: Sequence[Capture | PathArg], limits: Limits, scheduler: str | None,
                   options: IngestOptions) -> "pd.DataFrame":
    import pandas as pd

    from labtool.errors import MeasurementError
    from labtool.execute import parse_scheduler
    from labtool.measure.batch import measure_files, result_rows

    workers = parse_scheduler(scheduler) if scheduler is not None else None
    rows: list[dict] = []
    failed: list[str] = []
    pending: list[str] = []

    def flush() -> None:
        for status, item in measure_files(pending, options, limits, workers):
            (rows if status == "ok" else failed).append(item)
        pending.clear()

    for item in items:
        if isinstance(item, Capture):
            flush()
            try:
                rows.extend(result_rows(item, limits))
            except MeasurementError as exc:
                failed.append(str(exc))
        elif isinstance(item, (str, os.PathLike)):
            if (Path(item) / "catalog.sqlite").is_file():
                raise UsageError(f"{item}: a campaign; measure it with labtool.open_campaign({str(item)!r}).measure()")
            pending.append(os.fspath(item))
        else:
            raise UsageError(f"measure: a list of files and captures, not of {type(item).__name__}")
    flush()
    for message in failed:
        warnings.warn(message, stacklevel=4)  # the caller of labtool.measure
    frame = pd.DataFrame.from_records(rows, columns=list(MEASURE_COLUMNS))
    frame.attrs["failed"] = failed
    return frame
