"""The report's figures for notebooks: each function returns a matplotlib ``Figure`` (drawn on the Agg
canvas, no pyplot state), which a notebook shows inline and ``fig.savefig(...)`` writes."""

from __future__ import annotations

from typing import TYPE_CHECKING

import pandas as pd

from labtool._api.results import CompareResult, Source, _Opened, triage
from labtool.report import build, plots
from labtool.stats.triage.result import TriageReport

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from labtool._api.campaigns import Campaign


def _title(table: pd.DataFrame, title: str | None) -> str:
    if title is not None:
        return title
    lots = table["lot"].dropna().unique() if "lot" in table.columns else []
    return f"lot {lots[0]}" if len(lots) == 1 else "all captures"


def plot_delays(source: Source, *, title: str | None = None, spec_max_delay_s: float | None = None,
                predictions: CompareResult | pd.DataFrame | None = None) -> "Figure":
    """The report's delay histogram: one panel per set-up (ramp × temperature × supply) of the captures
    whose output came up and stayed, the failures by verdict in the last panel; with ``predictions``
    (a :class:`~labtool.CompareResult` or a predictions table) the model's distribution over each panel.
    ``source``: a campaign, or a measurement table (filter it to one lot for that lot's histogram)."""
    predicted = predictions.predictions if isinstance(predictions, CompareResult) else predictions
    with _Opened(source) as opened:
        table = opened.table
    return plots.delay_histogram(table, title=_title(table, title), spec_max_delay_s=spec_max_delay_s,
                                 predicted_delays_s=build.predicted_by_setup(table, predicted)).figure


def plot_overlay(campaign: "Campaign", rows: pd.DataFrame | None = None, *, title: str | None = None) -> "Figure":
    """The report's waveform overlay: the outputs (and supplies) of up to 40 of ``rows``' captures (the
    failures first), aligned on supply valid, median and p05–p95 band bold, the measured instants marked.
    ``rows``: measurement-table rows of the campaign (default all; one set-up reads best)."""
    from labtool._api.campaigns import store_of

    store = store_of(campaign)
    table = campaign.measurements() if rows is None else rows
    ids = build.pick_traces(table.set_index("capture_id")["verdict"])
    traces = build.load_traces(str(store.root), store.records(ids), table)
    return plots.waveform_overlay(traces, title=_title(table, title),
                                  note=f"{len(traces)} of {len(table)} captures").figure


def plot_wafer_map(source: Source, *, title: str | None = None) -> "Figure":
    """The report's die maps per wafer: the median startup delay at the set-up with the most delays,
    and the most severe verdict of each die (needs ``die_x``/``die_y`` conditions)."""
    with _Opened(source) as opened:
        table = opened.table
    return plots.wafer_map(table, title=_title(table, title)).figure


def plot_triage(campaign: "Campaign", part: str, report: TriageReport | None = None) -> "Figure":
    """The report's triage sheet of a returned part (``"LOT/PART"``): its traces against its lot's at its
    ramp times, its captures, the ranked hypotheses and the next experiment. ``report``: a triage
    already made (:func:`labtool.triage`); by default the part is triaged here."""
    from labtool._api.campaigns import store_of

    store = store_of(campaign)
    report = report if report is not None else triage(campaign, part)
    job = build.part_job(campaign.measurements(), part, store, root=str(store.root))
    (sheet, _caption), = build.part_plots(job, report)
    return sheet.figure
