"""Lot statistics: per group (lot, or any grouping) the yield figures with the part as the unit, and per
set-up inside the group the delay figures.

Group figures: captures, parts, the count per verdict, parts with any stuck-at-zero start and the
one-sided 95 % Clopper–Pearson bound on that fraction of parts, the per-start stuck rate with a bound
that allows for repeated starts of one part (:func:`labtool.stats.intervals.clustered_rate`), and
intermittent parts (a part that, at one set-up, both came up and failed to hold: power cycles that
disagree). Captures whose supply never came up (``no_supply``) say nothing about the chip: they are
counted, but are no start of a part.

Set-up figures (ramp × temperature × supply, :mod:`labtool.stats.setups`): delay quantiles and
moments, the best-fitting law, Cpk against an upper delay spec, outliers, the supply at which the
output became valid. A group row carries delay figures only when the group holds exactly one set-up.
docs/statistics.md says what each figure means.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
import pandas as pd

from labtool.errors import UsageError
from labtool.measure.verdict import VERDICTS
from labtool.stats.intervals import ClusteredRate, clustered_rate, upper_bound
from labtool.stats.setups import SETUP_KEYS, SetupSummary, summarise_setups
from labtool.stats.table import (CAME_UP, FAILED_TO_HOLD, STUCK, cell_keys, leading, part_labels, part_units,
                                 plain, require_columns)

# Keys of a group row that describe one set-up's delays: null unless the group holds exactly one.
_ONE_SETUP_KEYS = ("delay_n", "delay_median_s", "delay_p05_s", "delay_p95_s", "delay_mean_s", "delay_std_s",
                   "delay_fit", "cpk", "outliers", "ready_before_supply_valid", "vsupply_at_valid_median_v")


@dataclass(frozen=True)
class LotStats:
    """One group: yield figures over its parts and starts, and one :class:`SetupSummary` per set-up."""

    group: Mapping[str, object] = field(hash=False)
    n_captures: int
    n_parts: int
    n_parts_tested: int  # parts with at least one capture whose supply came up
    n_parts_stuck: int
    parts_stuck_upper95: float
    start_stuck: ClusteredRate
    counts: Mapping[str, int] = field(hash=False)  # n_<verdict>
    intermittent_parts: tuple[str, ...]
    spec_max_delay_s: float | None
    setups: tuple[SetupSummary, ...]

    @property
    def parts_stuck_ppm_upper95(self) -> float:
        return self.parts_stuck_upper95 * 1e6

    def to_json_dict(self) -> dict:
        """The group row."""
        one = self.setups[0].to_json_dict() if len(self.setups) == 1 else {}
        return {"row": "group", **self.group, "n_captures": self.n_captures, "n_parts": self.n_parts,
                "n_parts_tested": self.n_parts_tested, "n_parts_stuck": self.n_parts_stuck,
                "parts_stuck_upper95": self.parts_stuck_upper95,
                "parts_stuck_ppm_upper95": self.parts_stuck_ppm_upper95, "n_starts": self.start_stuck.n,
                "start_stuck_rate": self.start_stuck.rate, "start_stuck_upper95": self.start_stuck.upper95,
                "start_stuck_design_effect": self.start_stuck.design_effect, **self.counts,
                "n_setups": len(self.setups), "n_intermittent_parts": len(self.intermittent_parts),
                "intermittent_parts": list(self.intermittent_parts), "spec_max_delay_s": self.spec_max_delay_s,
                **{k: one.get(k) for k in _ONE_SETUP_KEYS}}

    def setup_rows(self) -> list[dict]:
        return [{"row": "setup", **self.group, **s.to_json_dict()} for s in self.setups]

    def json_rows(self) -> list[dict]:
        """The group row, then one row per set-up (the ``labtool lot --json`` lines)."""
        return [self.to_json_dict(), *self.setup_rows()]


def intermittent_flags(df: pd.DataFrame, labels: pd.Series, by: Sequence[str] = ()) -> np.ndarray:
    """True per row of a part that, within its group and set-up cell, both came up and failed to hold."""
    keys = [*by, *(k for k in cell_keys(df) if k not in by)]
    frame = pd.DataFrame({"label": labels.to_numpy(), "up": df["verdict"].isin(CAME_UP).to_numpy(),
                          "failed": df["verdict"].isin(FAILED_TO_HOLD).to_numpy()})
    for k in keys:
        frame[k] = df[k].to_numpy()
    g = frame.groupby(["label", *keys], dropna=False, sort=False)
    both = g["up"].transform("any") & g["failed"].transform("any")
    return (both & (frame["label"] != "")).to_numpy()


def lot_statistics(measurements: pd.DataFrame, by: Sequence[str] = ("lot",),
                   spec_max_delay_s: float | None = None) -> list[LotStats]:
    """One :class:`LotStats` per group of ``by`` (any condition or tag columns), in sorted group order.
    Every group is summarised in one pass over the table (thousands of groups and set-ups are usual)."""
    if measurements.empty:
        raise UsageError("no measurements: run `labtool measure CAMPAIGN` first")
    require_columns(measurements, ["verdict"], "lot statistics")
    require_columns(measurements, by, "--by")
    labels = part_labels(measurements)
    units = part_units(measurements)
    setups = summarise_setups(measurements, by, units, spec_max_delay_s)
    codes = measurements.groupby(list(by), dropna=False, sort=True).ngroup().to_numpy() if by \
        else np.zeros(len(measurements), int)
    first = np.unique(codes, return_index=True)[1]
    verdict = measurements["verdict"].to_numpy()
    powered = verdict != "no_supply"
    per_part = pd.DataFrame({"group": codes, "unit": units.to_numpy(), "k": powered & (verdict == STUCK),
                             "n": powered}).groupby(["group", "unit"], sort=False).sum()
    per_group = dict(tuple(per_part.groupby(level="group")))
    counts = pd.crosstab(codes, verdict).reindex(columns=list(VERDICTS), fill_value=0)
    n_rows = np.bincount(codes)
    flagged = intermittent_flags(measurements, labels, by)
    intermittent = pd.Series(labels.to_numpy()[flagged]).groupby(codes[flagged]).agg(lambda x: tuple(sorted(set(x))))
    out = []
    for code, i in enumerate(first):
        group = {k: plain(measurements[k].iloc[i]) for k in by}
        parts = per_group[code]
        tested = parts[parts["n"] > 0]
        n_stuck_parts = int((tested["k"] > 0).sum())
        out.append(LotStats(
            group=group, n_captures=int(n_rows[code]),
            n_parts=len(parts), n_parts_tested=len(tested), n_parts_stuck=n_stuck_parts,
            parts_stuck_upper95=upper_bound(n_stuck_parts, len(tested)),
            start_stuck=clustered_rate(tested["k"].to_numpy(), tested["n"].to_numpy()),
            counts={f"n_{v}": int(counts.loc[code, v]) for v in VERDICTS},
            intermittent_parts=intermittent.get(code, ()), spec_max_delay_s=spec_max_delay_s,
            setups=tuple(setups[tuple(group.values())])))
    return out


def _flat(record: dict) -> dict:
    """A JSON row as a table row: the delay fit as delay_fit_* columns, lists comma-joined."""
    rec = dict(record)
    fit = rec.pop("delay_fit", None)
    for key in ("distribution", "aic", "ks_pvalue", "ad_stat", "ad_pvalue", "ad_pvalue_bound"):
        rec[f"delay_fit_{key}"] = fit.get(key) if fit else None
    for key in ("outliers", "intermittent_parts"):
        if isinstance(rec.get(key), list):
            rec[key] = ",".join(rec[key])
    return {k: plain(v) if not isinstance(v, (dict, list)) else v for k, v in rec.items()}


def lot_table(stats: Sequence[LotStats]) -> pd.DataFrame:
    """DataFrame form: each group row followed by its set-up rows (column ``row``: group or setup);
    the group keys and the set-up keys lead."""
    stats = list(stats)
    frame = pd.DataFrame.from_records([_flat(r) for s in stats for r in s.json_rows()])
    return leading(frame, ["row", *(stats[0].group if stats else ()), *SETUP_KEYS])



def setup_table(stats: Sequence[LotStats]) -> pd.DataFrame:
    """The set-up rows only, as a table."""
    return pd.DataFrame.from_records([_flat(r) for s in stats for r in s.setup_rows()])
