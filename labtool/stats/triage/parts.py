"""Which rows belong to a part, which parts are returned, and the current version of each capture."""

from __future__ import annotations

import json

import pandas as pd

from labtool.errors import UsageError
from labtool.stats.table import part_labels

RETURNED = "returned"
_YES = ("1", "true", "yes", "y", RETURNED)


def split_part(part: str, lot: str | None = None) -> tuple[str | None, str]:
    """``LOT/PART`` → (lot, part); a bare ``PART`` keeps ``lot``."""
    if "/" in part and lot is None:
        lot, part = part.split("/", 1)
    if not part:
        raise UsageError("--part: expected LOT/PART, e.g. ZR24A/p07")
    return lot, part


def current_versions(table: pd.DataFrame) -> pd.DataFrame:
    """Only the newest version of each capture (source path and locator), when versions are recorded."""
    if not {"version", "source_path", "locator"} <= set(table.columns) or table.empty:
        return table
    newest = table.groupby(["source_path", "locator"], dropna=False)["version"].transform("max")
    return table[(table["version"] == newest).to_numpy(bool)]


def select_part(measurements: pd.DataFrame, part: str, lot: str | None = None
                ) -> tuple[str | None, str, pd.Series]:
    """(lot, part, mask of the part's rows); errors name the part as the user wrote it."""
    lot, part = split_part(part, lot)
    mine = measurements["part"].astype("string") == part
    if lot is not None:
        if "lot" not in measurements.columns:
            raise UsageError(f"--part {lot}/{part}: the measurement table has no lot column; give the part alone")
        mine &= measurements["lot"].astype("string") == lot
    elif "lot" in measurements.columns:
        lots = sorted(measurements.loc[mine.fillna(False).to_numpy(bool), "lot"].dropna().astype(str).unique())
        if len(lots) > 1:
            raise UsageError(f"--part {part}: in lots {', '.join(lots)}; give LOT/PART")
        lot = lots[0] if lots else None
    mine = mine.fillna(False).astype(bool)
    if not mine.any():
        raise UsageError(f"--part {lot + '/' if lot else ''}{part}: no measured captures of that part")
    return lot, part, mine


def returned_parts(table: pd.DataFrame) -> list[str]:
    """``LOT/PART`` of parts with a capture tagged returned: a tag named ``returned`` with a yes-like
    value (1, true, yes, y, returned), or any tag whose value is ``returned`` (e.g. ``status``)."""
    tag_cols: set[str] = set()
    for text in table.get("tags_json", pd.Series(dtype=object)).dropna().unique():
        tag_cols |= set(json.loads(text))
    flagged = pd.Series(False, index=table.index)
    for col in sorted(tag_cols & set(table.columns)):
        values = table[col].astype("string").str.strip().str.lower()
        if col.lower() == RETURNED:
            flagged |= values.isin(_YES).fillna(False)
        else:
            flagged |= (values == RETURNED).fillna(False)
    labels = part_labels(table)
    return sorted(set(labels[flagged & (labels != "")]))
