"""Shared helpers over the measurement table (``Campaign.measurements()``): column checks, grouping,
part identity, JSON-safe values."""

from __future__ import annotations

from typing import Iterator, Sequence

import numpy as np
import pandas as pd

from labtool.display import plain_scalar as plain  # noqa: F401  (numpy → Python, NaN → None)
from labtool.errors import UsageError

# Verdict names from the measurement engine (CONTRACTS: labtool/measure/verdict.py VERDICTS).
STUCK = "stuck_at_zero"
# The output reached a level (maybe late, ringing or wrong) versus never held one.
CAME_UP = frozenset({"started", "slow_start", "ringing", "wrong_level"})
FAILED_TO_HOLD = frozenset({"stuck_at_zero", "recollapse"})
# Rows that are startups (labtool.measure CAPTURE_KINDS); dip and power-down rows are other experiments.
STARTUP_KINDS = ("ramp", "enable")
# Conditions that define one bench set-up of a part; power cycles at one set-up are repeats.
CELL_KEYS = ("ramp_s", "temperature_c", "vdd_v")


def require_columns(df: pd.DataFrame, columns: Sequence[str], what: str) -> None:
    missing = [c for c in columns if c not in df.columns]
    if missing:
        shown = ", ".join(map(str, df.columns)) or "none"
        raise UsageError(f"{what}: no column {', '.join(missing)} in the measurement table (columns: {shown})")


def parse_keys(text: str | Sequence[str] | None, default: Sequence[str] = ("lot",)) -> tuple[str, ...]:
    """``"lot,temperature_c"`` → ("lot", "temperature_c")."""
    if text is None:
        return tuple(default)
    if isinstance(text, str):
        keys = tuple(k.strip() for k in text.split(",") if k.strip())
    else:
        keys = tuple(text)
    if not keys:
        raise UsageError("--by: give at least one column name")
    return keys


def groups(df: pd.DataFrame, by: Sequence[str], what: str) -> Iterator[tuple[dict, pd.DataFrame]]:
    """Yield ({key: value}, rows) per group, missing values kept as their own group (None)."""
    require_columns(df, by, what)
    if not by:
        yield {}, df
        return
    for values, rows in df.groupby(list(by), dropna=False, sort=True):
        values = values if isinstance(values, tuple) else (values,)
        yield {k: plain(v) for k, v in zip(by, values)}, rows


def cell_keys(df: pd.DataFrame) -> list[str]:
    return [k for k in CELL_KEYS if k in df.columns]


def part_labels(df: pd.DataFrame) -> pd.Series:
    """``LOT/PART`` per row (the way the CLI names a part); empty where the part is unknown."""
    if "part" not in df.columns:
        return pd.Series("", index=df.index)
    part = df["part"].astype("string")
    if "lot" not in df.columns:
        return part.fillna("")
    lot = df["lot"].astype("string")
    return (lot.fillna("") + "/" + part).where(part.notna() & lot.notna(), part).fillna("")


def part_units(df: pd.DataFrame) -> pd.Series:
    """The unit of a yield statement per row: the part (``LOT/PART``); a capture whose part is not
    known counts as a part of its own (``capture:<id>``)."""
    labels = part_labels(df)
    if "capture_id" not in df.columns:
        return labels.where(labels != "", pd.Series([f"row:{i}" for i in range(len(df))], index=df.index))
    return labels.where(labels != "", "capture:" + df["capture_id"].astype(str))


def delays(rows: pd.DataFrame) -> np.ndarray:
    if "delay_s" not in rows.columns:
        return np.empty(0)
    d = pd.to_numeric(rows["delay_s"], errors="coerce").to_numpy(dtype=np.float64)
    return d[np.isfinite(d)]


def leading(frame: pd.DataFrame, first: Sequence[str]) -> pd.DataFrame:
    """``frame`` with the columns ``first`` (those it has) in front, the others after in their order."""
    lead = [c for c in dict.fromkeys(first) if c in frame.columns]
    return frame[[*lead, *(c for c in frame.columns if c not in lead)]]


def startup_rows(df: pd.DataFrame) -> pd.DataFrame:
    """The rows of a measurement table that are startups (ramp or enable edge): a supply-dip row's
    ``stuck_at_zero`` or a power-down row is not a failed start. Rows measured before capture kinds
    existed (no ``capture_kind``) are startups."""
    if "capture_kind" not in df.columns:
        return df
    kind = df["capture_kind"]
    return df[kind.isna() | kind.isin(STARTUP_KINDS)]
