"""Write small delimited-text fixtures from arrays, in any of the shapes the importers read.

Invented data for stating properties (what we write, we read back), not a reference.
"""

from __future__ import annotations

import gzip
from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class Shape:
    delimiter: str = ","  # ",", ";", "\t" or " " (spaces, aligned)
    decimal: str = "."
    units: str = "brackets"  # "brackets", "parens", "row", "suffix", "slash" or "none"
    preamble: tuple[str, ...] = ()
    crlf: bool = False
    bom: bool = False
    gzip: bool = False
    trailing_delimiter: bool = False
    time_unit: tuple[str, float] = ("s", 1.0)  # (unit, factor to SI)
    columns: tuple[tuple[str, str], ...] = field(default=(("vdd", "V"), ("vref", "V")))


def header_cells(shape: Shape) -> tuple[list[str], list[str] | None]:
    named = [("time", shape.time_unit[0]), *shape.columns]
    if shape.units == "brackets":
        return [f"{n} [{u}]" for n, u in named], None
    if shape.units == "parens":
        return [f"{n} ({u})" for n, u in named], None
    if shape.units == "slash":
        return [f"{n}/{u}" for n, u in named], None
    if shape.units == "suffix":
        return [f"{n}_{u.lower()}" for n, u in named], None
    if shape.units == "row":
        return [n for n, _ in named], [u for _, u in named]
    return [n for n, _ in named], None


def number(value: float, decimal: str) -> str:
    text = repr(float(value))
    return text.replace(".", ",") if decimal == "," else text


def render(shape: Shape, t_written: np.ndarray, channels: list[np.ndarray]) -> bytes:
    """File bytes for the time column and channels, numbers as given (times in ``shape.time_unit``)."""
    header, units = header_cells(shape)
    rows = [header] + ([units] if units else [])
    for k in range(len(t_written)):
        rows.append([number(t_written[k], shape.decimal)] + [number(c[k], shape.decimal) for c in channels])
    if shape.delimiter == " ":
        body = ["".join(cell.rjust(26) for cell in row) for row in rows]
    else:
        tail = shape.delimiter if shape.trailing_delimiter else ""
        body = [shape.delimiter.join(row) + tail for row in rows]
    newline = "\r\n" if shape.crlf else "\n"
    data = (newline.join([*shape.preamble, *body]) + newline).encode("utf-8")
    if shape.bom:
        data = b"\xef\xbb\xbf" + data
    if shape.gzip:
        data = gzip.compress(data, mtime=0)
    return data


def startup_arrays(n: int = 50, dt_s: float = 1e-6, seed: int = 0):
    """A supply ramp and a delayed first-order output (invented), on a uniform time base."""
    rng = np.random.default_rng(seed)
    t = -5e-6 + dt_s * np.arange(n)
    vdd = np.clip(t / 20e-6, 0, 1) * 1.8 + rng.normal(0, 1e-3, n)
    vref = 1.2 * (1 - np.exp(-np.clip(t - 10e-6, 0, None) / 5e-6)) + rng.normal(0, 1e-3, n)
    return t, vdd, vref


def write_workbook(path, sheets: dict[str, list[tuple]]) -> str:
    """An XLSX file with one sheet per entry, rows appended as given."""
    import openpyxl

    wb = openpyxl.Workbook()
    wb.remove(wb.active)
    for title, rows in sheets.items():
        ws = wb.create_sheet(title)
        for row in rows:
            ws.append(row)
    wb.save(path)
    return str(path)
