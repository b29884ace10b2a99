"""Views of what a campaign holds: counts by lot and condition, and one flat table for export."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pandas as pd

from labtool.atomic import write_atomic
from labtool.errors import UsageError
from labtool.store import Campaign

_INTERNAL = ("tags_json", "metadata_json", "channels_json")
EXPORT_FORMATS = (".parquet", ".csv")


def _value(v):
    """A JSON/table-friendly scalar: NaN/None → None, numpy scalars → Python."""
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return None
    return v.item() if hasattr(v, "item") else v


def overview(campaign: Campaign) -> dict:
    """What ``labtool show`` prints: totals, counts by lot, counts by (temperature, ramp)."""
    summary = campaign.summary()
    df: pd.DataFrame = summary["table"]
    out = {"campaign": str(campaign.root), "captures": summary["captures"], "versions": summary["versions"],
           "measurements": summary["measurements"], "parts": 0, "by_lot": [], "by_condition": []}
    if df.empty:
        return out
    parts = df[["lot", "part"]].dropna(subset=["part"]).drop_duplicates()
    out["parts"] = len(parts)
    for lot, group in df.groupby("lot", dropna=False, sort=True):
        out["by_lot"].append({"lot": _value(lot), "captures": len(group),
                              "parts": int(group["part"].nunique()), "wafers": int(group["wafer"].nunique()),
                              "clipped_captures": int((group["n_clipped"] > 0).sum())})
    for (temp, ramp), group in df.groupby(["temperature_c", "ramp_s"], dropna=False, sort=True):
        out["by_condition"].append({"temperature_c": _value(temp), "ramp_s": _value(ramp), "captures": len(group),
                                    "lots": int(group["lot"].nunique())})
    return out


def export_table(campaign: Campaign) -> pd.DataFrame:
    """The catalog (conditions, tags and provenance as columns) with the newest measurements joined on."""
    df = campaign.captures()
    if df.empty:
        return df
    catalog_columns = set(df.columns)
    df = df.copy()
    df["channels"] = [",".join(f"{c['name']}:{c['role']}" for c in json.loads(s)) for s in df["channels_json"]]
    df = df.drop(columns=[c for c in _INTERNAL if c in df.columns])
    measured = campaign.measurements()
    if not measured.empty:
        extra = ["capture_id"] + [c for c in measured.columns if c not in catalog_columns]
        df = df.merge(measured[extra], on="capture_id", how="left")
    for col in df.columns:
        if df[col].dtype == object and df[col].map(lambda v: isinstance(v, (dict, list, tuple))).any():
            df[col] = df[col].map(lambda v: json.dumps(v, default=str) if isinstance(v, (dict, list, tuple)) else v)
    return df


def write_table(df: pd.DataFrame, target: str) -> None:
    """Write ``df`` as Parquet or CSV by extension, atomically (temporary file, then rename)."""
    suffix = Path(target).suffix.lower()
    if suffix not in EXPORT_FORMATS:
        raise UsageError(f"--to {target!r}: the file must end in .parquet or .csv")
    final = Path(target)
    if final.parent and not final.parent.exists():
        raise UsageError(f"--to {target!r}: folder {final.parent} does not exist")
    if suffix == ".parquet":
        write_atomic(final, lambda tmp: df.to_parquet(tmp, index=False), "table")
    else:
        write_atomic(final, lambda tmp: df.to_csv(tmp, index=False), "table")
