"""How labtool shows numbers to people: the one place every readable table, report page, plot label
and workbook number format takes its units and SI prefixes from.

A column's unit comes from its name's suffix (the house's unit-suffixed fields: ``delay_s``,
``vout_final_v``, ``overshoot_pct``); values stay in SI everywhere else and are only turned into
text here. SI prefixes follow the BIPM SI Brochure, 9th ed. (2019), §3 table 7 (``labtool.units``).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd

from labtool.units import format_si

MISSING = "—"
FRACTION = "fraction"  # shown as a percentage; stored as a fraction (0.05 → "5 %")

# Unit per column-name suffix; the first match wins, so compound suffixes come first.
COLUMN_UNITS: tuple[tuple[str, str], ...] = (
    ("_v_per_s", "V/s"), ("_ppm_upper95", "ppm"), ("_ppm_low", "ppm"), ("_ppm_high", "ppm"), ("_ppm", "ppm"),
    ("_pct", "%"), ("_hz", "Hz"), ("_ohm", "Ω"), ("_a", "A"), ("_v", "V"), ("_c", "°C"), ("_s", "s"),
    ("_rate", FRACTION), ("_upper95", FRACTION), ("_lower95", FRACTION),
)
_SI_UNITS = frozenset({"s", "V", "A", "Hz", "V/s", "Ω"})

# Spreadsheet number formats per unit: numbers stay in SI in the cell, the format shows the unit.
# "##0.0##E+0" is engineering notation (exponent a multiple of three).
_EXCEL_FORMATS = {"V/s": '##0.0##E+0" V/s"', "ppm": '0.0" ppm"', "%": '0.00" %"', "Hz": '##0.0##E+0" Hz"',
                  "Ω": '##0.0##E+0" Ω"', "A": '##0.0##E+0" A"', "V": '0.0000" V"', "°C": '0.0" °C"',
                  "s": '##0.0##E+0" s"', FRACTION: "0.00%"}


def column_unit(column: str) -> str | None:
    """The unit a column's name says (``delay_s`` → "s"), None for a column without one."""
    low = str(column).lower()
    return next((unit for suffix, unit in COLUMN_UNITS if low.endswith(suffix)), None)


def format_quantity(value: float, unit: str | None, digits: int = 3) -> str:
    """One number in its unit: SI prefixes for s, V, A, Hz, V/s, Ω; % and °C as they are; ppm with
    thousands separators; a fraction as a percentage; no unit as ``digits`` significant digits."""
    if value is None or not math.isfinite(value):
        return MISSING
    if unit in _SI_UNITS:
        return format_si(value, unit, digits)
    if unit == "%":
        return f"{value:.{digits}g} %"
    if unit == FRACTION:
        return f"{100.0 * value:.{digits}g} %"
    if unit == "°C":
        return f"{value:g} °C"
    if unit == "ppm":
        return f"{value:,.0f} ppm" if abs(value) >= 1000 else f"{value:.{digits}g} ppm"
    return f"{value:.{digits}g}"


def plain_scalar(value: Any) -> Any:
    """numpy scalars → Python; None, NA and non-finite floats → None."""
    if value is None or value is pd.NA:
        return None
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def format_cell(column: str, value: Any, digits: int = 3, missing: str = MISSING) -> str:
    """A table cell as text: the column's unit for numbers, lists comma-joined, ``missing`` for none."""
    value = plain_scalar(value)
    if value is None:
        return missing
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return format_quantity(value, column_unit(column), digits)
    if isinstance(value, (list, tuple)):
        return ",".join(map(str, value)) or missing
    return str(value)


def format_pvalue(p: float | None, bound: str | None = None, digits: int = 2) -> str:
    """A p-value; one read from the end of a table is shown as the bound it is: "≥ 0.25", "≤ 0.01".

    ``bound``: None (an interpolated value), "lower" (the true value is at least ``p``) or "upper"
    (at most ``p``).
    """
    if p is None or not math.isfinite(p):
        return MISSING
    sign = {"lower": "≥ ", "upper": "≤ "}.get(bound or "", "")
    return f"{sign}{p:.{digits}g}"


def excel_number_format(column: str) -> str | None:
    """The spreadsheet number format that shows a column's unit, None for a column without one."""
    unit = column_unit(column)
    return _EXCEL_FORMATS.get(unit) if unit else None
