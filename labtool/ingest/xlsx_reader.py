"""XLSX workbooks → one Capture per sheet that holds a capture table.

openpyxl in read-only mode with cached values only: formulas are never evaluated and macros never
loaded. A sheet named like ``conditions`` gives conditions, either as key/value rows (for every
capture of the workbook) or as a table with a ``sheet`` column (one row per capture sheet). Key/value
cells above a sheet's header are that sheet's own conditions, like a CSV preamble.
"""

from __future__ import annotations

import datetime as _dt
import io
import re
import zipfile
import zlib

import numpy as np
import openpyxl
import pyarrow as pa
from openpyxl.utils import get_column_letter
from openpyxl.utils.cell import column_index_from_string, coordinate_from_string
from openpyxl.utils.exceptions import InvalidFileException

from labtool.capture import Capture, Conditions, sha256_bytes
from labtool.errors import InputError
from labtool.ingest.conditions import typed_conditions
from labtool.ingest.options import IngestOptions
from labtool.ingest.sniff import (HEAD_LINES, MAX_COLUMNS, MAX_DECOMPRESSED_BYTES, column_names_and_units,
                                  locate_table, parse_preamble, shorten)
from labtool.ingest.stamps import parse_stamps, seconds_from_objects, stamp_kind
from labtool.ingest.table import RawTable, build_capture

CONDITION_SHEETS = frozenset({"conditions", "condition", "run_conditions", "setup", "run_info", "metadata"})
MAX_CELLS = 20_000_000  # per sheet; a capture sheet never needs more, a hostile one gets a clear no
_WORKBOOK_ERRORS = (zipfile.BadZipFile, zlib.error, KeyError, ValueError, TypeError, SyntaxError, EOFError,
                    OSError, LookupError, InvalidFileException)


def unreadable(path: str, exc: Exception) -> InputError:
    """One line for a workbook the libraries refused; the cause when openpyxl wraps it in prose."""
    from defusedxml import DefusedXmlException

    chain = [exc]
    while chain[-1].__cause__ is not None or chain[-1].__context__ is not None:
        chain.append(chain[-1].__cause__ or chain[-1].__context__)
    if any(isinstance(e, DefusedXmlException) for e in chain):
        what = "XML entity declarations are refused: a possible entity-expansion attack"
    else:
        text = str(exc).strip().splitlines()
        what = f"{type(exc).__name__}: {text[0] if text else ''}".rstrip(": ")
    return InputError(path, f"not a readable XLSX workbook ({what})")


def open_workbook(data: bytes, path: str):
    try:
        declared = sum(member.file_size for member in zipfile.ZipFile(io.BytesIO(data)).infolist())
    except _WORKBOOK_ERRORS as exc:
        raise unreadable(path, exc) from None
    # A member bigger than it declares fails its CRC check in zipfile, so the declared sizes bound the work.
    if declared > MAX_DECOMPRESSED_BYTES:
        raise InputError(path, f"workbook decompresses to more than {MAX_DECOMPRESSED_BYTES >> 20} MiB (refused unread)")
    try:
        return openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True, keep_vba=False,
                                      keep_links=False)
    except _WORKBOOK_ERRORS as exc:
        raise unreadable(path, exc) from None


def cell_text(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, (_dt.datetime, _dt.date, _dt.time)):
        return value.isoformat()
    return str(value)


def _normal(text: str) -> str:
    return re.sub(r"[^0-9a-z]+", "_", text.lower()).strip("_")


def _cell(title: str, col: int, row: int) -> str:
    """Sheet!A1 reference for 0-based column and row."""
    return f"{title}!{get_column_letter(col + 1)}{row + 1}"


def _too_wide(path: str, ws, width: int | None) -> None:
    if width is not None and width > MAX_COLUMNS:
        raise InputError(path, f"sheet is {width} columns wide; at most {MAX_COLUMNS} are read (split the export)",
                         field=ws.title)


def _sheet_rows(ws, path: str) -> list[tuple]:
    _too_wide(path, ws, ws.max_column)  # the declared dimension, before any row is expanded to it
    rows, cells = [], 0
    for row in ws.iter_rows(values_only=True):
        _too_wide(path, ws, len(row))
        rows.append(row)
        cells += len(row)
        if cells > MAX_CELLS:
            raise InputError(path, f"sheet has more than {MAX_CELLS:,} cells", field=ws.title)
    while rows and all(v is None for v in rows[-1]):
        rows.pop()
    return rows


def read_xlsx(path: str, data: bytes, options: IngestOptions) -> list[Capture]:
    """Every capture sheet of a workbook, each with the workbook's and its own conditions."""
    sha = sha256_bytes(data)
    wb = open_workbook(data, path)
    try:
        sheets = [(ws.title, _sheet_rows(ws, path)) for ws in wb.worksheets]
    except _WORKBOOK_ERRORS as exc:
        raise unreadable(path, exc) from None
    finally:
        wb.close()
    titles = {title for title, _ in sheets}
    common, per_sheet = Conditions(), {}
    for title, rows in sheets:
        if _normal(title) in CONDITION_SHEETS:
            c, p = _conditions_sheet(path, title, rows, titles)
            common = common.merged(c)
            per_sheet.update(p)
    tables = []
    for title, rows in sheets:
        if _normal(title) in CONDITION_SHEETS:
            continue
        table = _capture_table(path, title, rows)
        if table is not None:
            table.base_conditions = common
            table.sheet_conditions = per_sheet.get(title, Conditions())
            tables.append(table)
    for table in tables:
        _refuse_uncached_formulas(path, data, table)
    if not tables:
        raise InputError(path, "no sheet holds a capture table (a header row above columns of numbers)")
    return [build_capture(t, sha, options) for t in tables]


def _conditions_sheet(path: str, title: str, rows: list[tuple], titles: set[str]):
    """Key/value rows → conditions for all sheets; a table with a ``sheet`` column → per sheet."""
    text = [[cell_text(v).strip() for v in row] for row in rows]
    filled = [(r, cells) for r, cells in enumerate(text) if any(cells)]
    if not filled:
        return Conditions(), {}
    head_row, header = filled[0]
    lowered = [_normal(c) for c in header]
    if "sheet" in lowered:
        sheet_col = lowered.index("sheet")
        per_sheet = {}
        for r, cells in filled[1:]:
            cells = cells + [""] * (len(header) - len(cells))
            name = cells[sheet_col]
            if name not in titles:
                raise InputError(path, f"names sheet {name!r}, which is not in the workbook",
                                 field=_cell(title, sheet_col, r))
            pairs = {header[k]: cells[k] for k in range(len(header)) if k != sheet_col and header[k] and cells[k]}
            cols = {header[k]: k for k in range(len(header))}
            per_sheet[name] = typed_conditions(pairs, path=path,
                                               place=lambda key, r=r: {"field": _cell(title, cols[key], r)})
        return Conditions(), per_sheet
    pairs, places = {}, {}
    for r, cells in filled:
        values = [(k, c) for k, c in enumerate(cells) if c]
        if len(values) >= 2:
            pairs[values[0][1]] = values[1][1]
            places[values[0][1]] = {"field": _cell(title, values[1][0], r)}
    return typed_conditions(pairs, path=path, place=lambda key: places.get(key, {})), {}


def _capture_table(path: str, title: str, rows: list[tuple]) -> RawTable | None:
    head = [[cell_text(v) for v in row] for row in rows[:HEAD_LINES]]
    where = locate_table(head)
    if where is None:
        return None
    end = where.data
    while end < len(rows) and any(v is not None and str(v).strip() for v in rows[end]):
        end += 1
    block = rows[where.data:end]
    top = where.header if where.header is not None else where.data
    span = [head[where.header]] if where.header is not None else []
    span += head[where.data:where.data + 4]
    first = min((k for row in span for k, c in enumerate(row) if c.strip()), default=0)
    names, units, repeated = column_names_and_units(head, where)
    names, units = names[first:], units[first:]
    header_row = top

    def place(row: int | None, col: int | None) -> dict:
        r = header_row if row is None else where.data + row
        return {"field": _cell(title, first + (col or 0), r)}

    columns, metadata = [], {}
    for k in range(len(names)):
        values, stamp_metadata = _numeric_column(path, title, block, first + k, where.data)
        columns.append(values)
        if stamp_metadata is not None:  # dates and times, times of day or durations: seconds from the first
            units[k] = "s"
            metadata.update(stamp_metadata)
    meta_place, notes = {}, []
    for r in range(top):
        cells = [(k, cell_text(v).strip()) for k, v in enumerate(rows[r]) if cell_text(v).strip()]
        pairs, row_notes = parse_preamble(["\t".join(c for _, c in cells)], "\t")
        notes += row_notes
        for key, value in pairs.items():
            metadata[key] = value
            meta_place[key] = {"field": _cell(title, cells[1][0] if len(cells) > 1 else cells[0][0], r)}
    return RawTable(source_path=path, importer="xlsx", names=names, units=units, columns=columns, place=place,
                    locator=title, metadata=metadata, metadata_place=lambda key: meta_place.get(key, {}),
                    notes=notes, warnings=repeated,
                    layout=f"sheet {title!r}, data from row {where.data + 1}")


def _refuse_uncached_formulas(path: str, data: bytes, table: RawTable) -> None:
    """A formula cell without a cached value reads as empty: name it instead of storing a gap.

    Formulas are never evaluated. Only a table with empty cells costs a second, formula-mode pass
    over its rows (the cached-value pass cannot tell an empty cell from an uncalculated formula).
    """
    empty: set[tuple[int, int]] = set()
    for col, values in enumerate(table.columns):
        for row in np.flatnonzero(np.isnan(values))[:10_000]:
            ref = table.place(int(row), col)["field"].rpartition("!")[2]
            letters, number = coordinate_from_string(ref)
            empty.add((number, column_index_from_string(letters)))
    if not empty:
        return
    wb = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=False, keep_vba=False,
                                keep_links=False)
    try:
        first, last = min(r for r, _ in empty), max(r for r, _ in empty)
        for r, row in enumerate(wb[table.locator].iter_rows(min_row=first, max_row=last), start=first):
            for c, cell in enumerate(row, start=1):
                if (r, c) in empty and isinstance(cell.value, str) and cell.value.startswith("="):
                    raise InputError(path, f"formula {shorten(cell.value)} has no cached value (formulas are never "
                                           f"evaluated: recalculate and save the workbook, or export CSV)",
                                     field=f"{table.locator}!{get_column_letter(c)}{r}")
    finally:
        wb.close()


def _numeric_column(path: str, title: str, block: list[tuple], col: int, first_row: int
                    ) -> tuple[np.ndarray, dict[str, str] | None]:
    """A column's values as float64, or a time-stamp column in seconds with its metadata."""
    values = np.array([row[col] if col < len(row) else None for row in block], dtype=object)
    try:
        if any(isinstance(v, (bool, _dt.date, _dt.time, _dt.timedelta)) for v in values):
            raise TypeError
        return values.astype(np.float64), None
    except (TypeError, ValueError):
        pass
    stamps = seconds_from_objects(list(values))
    if stamps is None and all(isinstance(v, str) or v is None for v in values):
        texts = [v.strip() if v is not None else None for v in values]
        if stamp_kind([t for t in texts if t]) in ("datetime", "clock"):
            stamps = parse_stamps(pa.array(texts, type=pa.string()))
            if stamps.bad is not None:
                raise InputError(path, f"{shorten(texts[stamps.bad])!r} is not a date and time",
                                 field=_cell(title, col, first_row + stamps.bad))
    if stamps is not None:
        return stamps.seconds, stamps.metadata
    for r, v in enumerate(values):
        ok = v is None or (isinstance(v, (int, float)) and not isinstance(v, bool))
        if not ok:
            try:
                float(str(v))
                continue
            except ValueError:
                pass
            raise InputError(path, f"{shorten(cell_text(v))!r} is not a number", field=_cell(title, col, first_row + r))
    raise AssertionError("a column failed to convert but every cell is a number")  # pragma: no cover
