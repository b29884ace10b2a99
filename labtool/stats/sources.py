"""The edge of the statistics package: measurement tables from a campaign, text tables for the CLI."""

from __future__ import annotations

import json
from typing import Iterable, Sequence

import pandas as pd

from labtool.display import format_cell
from labtool.errors import UsageError
from labtool.stats.table import plain, startup_rows


def load_measurements(campaign_path: str) -> pd.DataFrame:
    """``Campaign.measurements()`` of a campaign directory (newest limits), refusing an empty table."""
    return load_measured(campaign_path)[0]


def load_measured(campaign_path: str):
    """(measurement table of the startups, the :class:`~labtool.measure.Limits` it was measured with) of
    a campaign directory: what the model must be run with to be compared with it. Supply-dip and
    power-down rows are left out (:func:`labtool.stats.table.startup_rows`)."""
    from labtool.store import Campaign

    with Campaign.open(campaign_path) as camp:
        measured = camp.measurements()
        if measured.empty:
            raise UsageError(f"{campaign_path}: no measurements yet; run `labtool measure {campaign_path}` first")
        table = startup_rows(measured)
        if table.empty:
            raise UsageError(f"{campaign_path}: no startup measurements (only supply-dip or power-down captures)")
        return table, measured_limits(camp, table)


def measured_limits(campaign, table: pd.DataFrame):
    """The stored limits of ``table``'s measurement set (``Campaign.limits``) as Limits; defaults for
    fields a store does not hold."""
    import dataclasses

    from labtool.measure import Limits

    key = str(table["limits_key"].iloc[0]) if "limits_key" in table.columns and len(table) else None
    stored = campaign.limits(key) if key else {}
    known = {f.name for f in dataclasses.fields(Limits)}
    return Limits(**{k: v for k, v in stored.items() if k in known})


def plain_record(record: dict) -> dict:
    """A result row with JSON-safe values (numpy scalars to Python, NaN to None): a ``--json`` line's object."""
    return {k: plain(v) if not isinstance(v, (dict, list)) else v for k, v in record.items()}


def json_line(record: dict) -> str:
    return json.dumps(plain_record(record), allow_nan=False)


def text_table(records: Iterable[dict], columns: Sequence[str]) -> str:
    """Fixed-width columns, one header line; missing values as ``-``."""
    rows = [[format_cell(c, r.get(c), missing="-") for c in columns] for r in records]
    widths = [max([len(c), *(len(r[i]) for r in rows)]) for i, c in enumerate(columns)]
    lines = ["  ".join(c.ljust(w) for c, w in zip(columns, widths)).rstrip()]
    lines += ["  ".join(v.ljust(w) for v, w in zip(r, widths)).rstrip() for r in rows]
    return "\n".join(lines)


def add_monte_carlo_options(parser, *, samples: int, samples_help: str) -> None:
    """``--samples N``, ``--seed S`` and ``--scheduler SPEC`` for commands that run the model's Monte Carlo."""
    from labtool.execute import add_scheduler_option

    parser.add_argument("--samples", type=int, default=samples, metavar="N", help=f"{samples_help} (default {samples})")
    parser.add_argument("--seed", type=int, default=1,
                        help="Monte Carlo seed: the same simulated parts at every set-up and step (default 1)")
    add_scheduler_option(parser)
