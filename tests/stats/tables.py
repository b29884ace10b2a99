"""Builders of measurement tables shaped like ``Campaign.measurements()`` (invented data, for stating
properties; not a reference)."""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd


def measurement_table(*, lots=("ZR24A",), parts=8, ramps=(1e-5, 1e-3), temps=(-40.0, 25.0, 125.0), repeats=3,
                      delay_s=lambda rng, n: rng.lognormal(np.log(6e-6), 0.2, n), seed=0) -> pd.DataFrame:
    """Every part started at every set-up: one row per capture with a lognormal delay."""
    rng = np.random.default_rng(seed)
    rows = [{"lot": lot, "wafer": "W03", "part": f"p{p:02d}", "ramp_s": r, "temperature_c": t, "vdd_v": 1.8,
             "repeat": k}
            for lot, p, r, t, k in itertools.product(lots, range(1, parts + 1), ramps, temps, range(repeats))]
    df = pd.DataFrame(rows)
    df["capture_id"] = [f"c{i:05d}" for i in range(len(df))]
    df["verdict"] = "started"
    df["delay_s"] = delay_s(rng, len(df))
    df["overshoot_pct"] = rng.normal(2.0, 0.3, len(df))
    df["vout_final_v"] = rng.normal(1.2, 0.002, len(df))
    df["ring_hz"] = np.nan
    df["t_supply_s"] = df["ramp_s"] * 0.9
    return df


def set_verdict(df: pd.DataFrame, mask, verdict: str) -> pd.DataFrame:
    """Mark rows as ``verdict``; stuck and no-supply rows have no delay."""
    df = df.copy()
    df.loc[mask, "verdict"] = verdict
    if verdict in ("stuck_at_zero", "no_supply", "recollapse"):
        df.loc[mask, "delay_s"] = np.nan
    return df


def campaign_from_table(path, df: pd.DataFrame) -> str:
    """A campaign store holding one tiny capture per row of ``df`` and ``df``'s results as measurements."""
    from labtool.capture import Conditions
    from labtool.store import Campaign
    from tests.builders import make_capture

    result_cols = [c for c in df.columns if c not in ("lot", "wafer", "part", "ramp_s", "temperature_c", "vdd_v",
                                                      "repeat", "capture_id")]
    rows = []
    with Campaign.open(path, create=True) as camp:
        for i, rec in enumerate(df.to_dict("records")):
            cond = Conditions(lot=rec["lot"], wafer=rec["wafer"], part=rec["part"], ramp_s=rec["ramp_s"],
                              temperature_c=rec["temperature_c"], vdd_v=rec["vdd_v"], repeat=rec["repeat"])
            cap = make_capture(np.linspace(0, 1.8, 8), np.full(8, 1e-3 * i), 1e-6, conditions=cond,
                               source=f"{rec['lot']}_{rec['part']}_{i}.csv")
            camp.add_capture(cap)
            row = {"capture_id": cap.capture_id, "file": cap.provenance.source_path}
            row.update({c: (None if isinstance(rec[c], float) and np.isnan(rec[c]) else rec[c]) for c in result_cols})
            rows.append(row)
        camp.save_measurements(rows, limits_key="test", limits_json="{}")
    return str(path)
