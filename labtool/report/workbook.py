"""The report workbook (openpyxl, streamed): summary per group, every measurement, failures, limits.

Values only: no formulas (a text cell that starts with "=" is written as text, never as a formula),
no macros. Numbers stay in SI, exactly as in the measurement table, so the sheet reads back equal to
it; each column's number format shows its unit (``delay_s`` displays as "12.3E-6 s").
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd
from openpyxl import Workbook
from openpyxl.cell import WriteOnlyCell
from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE
from openpyxl.styles import Alignment, Font, PatternFill
from openpyxl.utils import get_column_letter

from labtool.display import excel_number_format
from labtool.report import style
from labtool.atomic import write_atomic

# Catalog columns that describe the store's own files, not the capture: left out of the sheets.
STORE_INTERNAL_COLUMNS = ("tags_json", "metadata_json", "channels_json", "waveform_path", "waveform_sha256")

LEADING_COLUMNS = ("capture_id", "file", "source_path", "locator", "lot", "wafer", "die_x", "die_y", "part",
                   "temperature_c", "ramp_s", "vdd_v", "repeat", "verdict")

FAILURE_COLUMNS = ("capture_id", "source_path", "lot", "wafer", "die_x", "die_y", "part", "temperature_c",
                   "ramp_s", "repeat", "verdict", "t_supply_s", "delay_s", "settle_s", "overshoot_pct",
                   "vout_final_v", "vsupply_final_v", "supply_at_start_v", "vsupply_at_valid_v", "evidence")

HEADER_FONT = Font(bold=True, color="FFFFFF")
HEADER_FILL = PatternFill("solid", fgColor=style.INKS.ink.lstrip("#"))
MAX_CELL_CHARS = 32_767  # the most a spreadsheet cell holds (common practice, no source)


def number_format(column: str) -> str | None:
    """The number format that shows the column's unit (labtool.display), None without one."""
    return excel_number_format(column)


def measurement_columns(table: pd.DataFrame) -> list[str]:
    """Columns of the Measurements sheet: conditions and result fields first, store internals dropped."""
    present = [c for c in table.columns if c not in STORE_INTERNAL_COLUMNS]
    lead = [c for c in LEADING_COLUMNS if c in present]
    return lead + [c for c in present if c not in lead]


def cell_value(value: Any) -> Any:
    """A Python value openpyxl stores as a value: None for missing, JSON text for dicts and lists."""
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, (dict, list, tuple)):
        return _text(json.dumps(value, sort_keys=True, default=str))
    if isinstance(value, np.ndarray):
        return _text(json.dumps(value.tolist()))
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, (bool, int, float)):
        return value
    if isinstance(value, pd.Timestamp):
        return value.isoformat()
    return _text(str(value))


def _text(text: str) -> str:
    """Characters XML cannot hold dropped; cut to the 32,767 characters a spreadsheet cell holds."""
    text = ILLEGAL_CHARACTERS_RE.sub("", text)
    if len(text) <= MAX_CELL_CHARS:
        return text
    note = f" … (cut: {len(text)} characters; the HTML report and the store have all of it)"
    return text[: MAX_CELL_CHARS - len(note)] + note


def _cell(ws, value: Any, fmt: str | None = None) -> WriteOnlyCell:
    c = WriteOnlyCell(ws, cell_value(value))
    if isinstance(c.value, str):
        c.data_type = "s"  # text stays text, even "=…": values only, never a formula
    elif fmt and isinstance(c.value, (int, float)) and not isinstance(c.value, bool):
        c.number_format = fmt
    return c


def _write_table(wb: Workbook, title: str, frame: pd.DataFrame, columns: Sequence[str] | None = None) -> None:
    ws = wb.create_sheet(title)
    columns = list(columns if columns is not None else frame.columns)
    ws.freeze_panes = "B2" if len(columns) > 1 else "A2"
    widths = [max(10, min(44, len(str(c)) + 3)) for c in columns]
    for i, c in enumerate(columns):
        sample = frame[c].head(200).map(lambda v: len(str(cell_value(v) or ""))) if len(frame) else []
        widths[i] = max(widths[i], min(44, int(max(sample, default=0)) + 2))
        ws.column_dimensions[get_column_letter(i + 1)].width = widths[i]
    header = []
    for c in columns:
        cell = WriteOnlyCell(ws, str(c))
        cell.data_type = "s"
        cell.font, cell.fill = HEADER_FONT, HEADER_FILL
        cell.alignment = Alignment(horizontal="center")
        header.append(cell)
    ws.append(header)
    formats = [number_format(str(c)) for c in columns]
    for row in frame[columns].itertuples(index=False, name=None):
        ws.append([_cell(ws, v, f) for v, f in zip(row, formats)])
    ws.auto_filter.ref = f"A1:{get_column_letter(len(columns))}{len(frame) + 1}"


def _key_values(wb: Workbook, title: str, items: Iterable[tuple[str, Any]]) -> None:
    frame = pd.DataFrame(list(items), columns=["item", "value"])
    _write_table(wb, title, frame)


def flatten(mapping: Mapping[str, Any], prefix: str = "") -> list[tuple[str, Any]]:
    out: list[tuple[str, Any]] = []
    for k, v in mapping.items():
        if isinstance(v, Mapping):
            out.extend(flatten(v, f"{prefix}{k}."))
        else:
            out.append((f"{prefix}{k}", v))
    return out


def write_workbook(path: str | os.PathLike, measurements: pd.DataFrame, *, summary: pd.DataFrame | None = None,
                   comparison: pd.DataFrame | None = None, limits: Mapping[str, Any] | None = None,
                   about: Mapping[str, Any] | None = None, triage: pd.DataFrame | None = None) -> Path:
    """Write the workbook atomically (temp file, then rename) and return its path.

    ``summary``: one row per group (lot statistics); ``comparison``: one row per group against the
    model; ``limits``: the measurement limits used; ``about``: tool version, campaign, time, …;
    ``triage``: the returned parts' ranked hypotheses (a Triage sheet after Failures).
    """
    path = Path(path)
    wb = Workbook(write_only=True)
    if summary is not None:
        _write_table(wb, "Summary", summary)
    if comparison is not None and len(comparison):
        _write_table(wb, "Comparison", comparison)
    _write_table(wb, "Measurements", measurements, measurement_columns(measurements))
    failures = measurements[measurements["verdict"] != "started"] if "verdict" in measurements else measurements
    _write_table(wb, "Failures", failures, [c for c in FAILURE_COLUMNS if c in measurements.columns])
    if triage is not None and len(triage):
        _write_table(wb, "Triage", triage)
    _key_values(wb, "Limits", [*flatten(about or {}), *flatten(limits or {}, "limits.")])
    return write_atomic(path, wb.save, "workbook")
