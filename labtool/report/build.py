"""Write a campaign's report: PNG plots, the workbook and the self-contained HTML page.

The drawing is batch work (one item per group, one per returned part, one for the overview), run
through :func:`labtool.execute.run_batch`, so ``--scheduler`` spreads it over processes or a Dask
cluster; workers read waveforms from the campaign path themselves. A group whose plots fail is listed
in the report and in :attr:`ReportFiles.failed`; the others are still written.
"""

from __future__ import annotations

import os
import re
import time
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from labtool import __version__
from labtool.atomic import write_atomic
from labtool.display import format_pvalue
from labtool.errors import LabtoolError, UsageError
from labtool.execute import Scheduler, run_batch
from labtool.measure.limits import Limits
from labtool.report import html as report_html
from labtool.report import plots
from labtool.report.traces import Trace, envelope, trace_from_capture
from labtool.report.workbook import write_workbook
from labtool.stats.compare import comparison_table, compare
from labtool.stats.lot import lot_statistics, lot_table, setup_table
from labtool.stats.setups import SETUP_KEYS, counted, setup_tuple, split_setups
from labtool.stats.sources import measured_limits
from labtool.stats.table import CAME_UP, groups, parse_keys, part_labels
from labtool.stats.triage import load_resolution, returned_parts, triage
from labtool.units import format_si

MAX_OVERLAYS = 4  # set-ups whose waveforms are drawn per group
MAX_TRACES = 120  # traces per overlay; failures first, then starts evenly spread
MAX_HTML_ROWS = 2000


@dataclass(frozen=True)
class ReportFiles:
    html: Path
    workbook: Path
    plots: tuple[Path, ...]
    failed: tuple[tuple[str, str], ...] = ()  # (what, one-line reason)
    triage: tuple = ()  # the returned parts' triage reports, in part order


@dataclass(frozen=True)
class Rendered:
    """What a worker drew: (file name, caption, PNG bytes) per figure, and a returned part's triage
    report. The parent writes the files, so workers on other machines need no shared output folder."""

    files: tuple[tuple[str, str, bytes], ...] = field(repr=False)
    triage: Any = None


@dataclass(frozen=True)
class _Job:
    """One item of drawing work; everything a worker needs, picklable."""

    kind: str  # "overview", "group" or "part"
    label: str
    stem: str
    rows: pd.DataFrame = field(repr=False)
    root: str | None = None  # campaign path (or URL) when waveforms can be read
    records: tuple[dict, ...] = field(default=(), repr=False)  # catalog records of the traces to draw
    baseline_records: tuple[dict, ...] = field(default=(), repr=False)
    baseline_rows: pd.DataFrame | None = field(default=None, repr=False)
    predicted_by_setup: Mapping | None = field(default=None, repr=False)  # set-up tuple → predicted delays
    predictions: pd.DataFrame | None = field(default=None, repr=False)
    spec_max_delay_s: float | None = None
    triage_rows: pd.DataFrame | None = field(default=None, repr=False)  # the part's lot, for triage
    triage_model: Any = field(default=None, repr=False)  # the model's Monte Carlo at the parts' set-ups
    supply_valid: str = ""  # what "supply valid" meant for these measurements, for the captions


def slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "-", text.replace("µ", "u")).strip("-").lower() or "all"


def group_label(key: Mapping[str, Any]) -> str:
    """``lot ZR24A · ramp_s 20 µs``: each key with its value as the report shows it."""
    return " · ".join(f"{k} {report_html.display(k, v)}" for k, v in key.items())


# -- workers ------------------------------------------------------------------------------------
def render_job(job: _Job) -> Rendered:
    """Draw and save the job's figures (a returned part's triage runs here too, in the worker)."""
    try:
        report = None
        if job.kind == "part":
            resolution = load_resolution(job.root, job.records) if job.root is not None else None
            report = triage(job.triage_rows, job.label, resolution=resolution, model=job.triage_model)
        drawers = {"overview": _overview_plots, "group": _group_plots, "part": part_plots}
        drawn = drawers[job.kind](job, report) if job.kind == "part" else drawers[job.kind](job)
    except LabtoolError:
        raise
    except Exception as exc:  # a figure that cannot be drawn fails its group, not the report
        raise LabtoolError(f"{job.label}: could not draw the plots ({type(exc).__name__}: {exc})") from None
    out, seen = [], Counter()
    for plot, caption in drawn:
        seen[plot.name] += 1
        name = f"{job.stem}-{plot.name}{'' if seen[plot.name] == 1 else f'-{seen[plot.name]}'}.png"
        out.append((name, caption, plot.png()))
    return Rendered(tuple(out), report)


def supply_valid_text(limits: Limits) -> str:
    """What "supply valid" was for these measurements: "supply at 90 % of its final level" or "supply at 1.62 V"."""
    kind, value = limits.supply_ref_level()
    return f"supply at {100 * value:g} % of its final level" if kind == "fraction" else f"supply at {format_si(value, 'V')}"


def _overview_plots(job: _Job):
    return [(plots.delay_vs_conditions(job.rows, title="Startup delay against ramp time and temperature",
                                       predicted=job.predictions),
             "Every capture whose output came up and stayed as a point; per set-up the median and p05–p95; stuck "
             "captures counted along the top; below 0 the output was ready before supply valid "
             f"({job.supply_valid})" + ("; dashed: the model's median." if job.predictions is not None else "."))]


def _group_plots(job: _Job):
    rows = job.rows
    out = [(plots.delay_histogram(rows, title=job.label, spec_max_delay_s=job.spec_max_delay_s,
                                  predicted_delays_s=job.predicted_by_setup),
            f"Startup delay from supply valid ({job.supply_valid}) to the output's 90 % crossing, one panel per "
            "set-up, of the captures whose output came up and stayed; a negative delay: ready before supply "
            "valid. Failures by verdict in the last panel.")]
    for setup, sub_records, n_total in _overlay_sets(job):
        traces = load_traces(job.root, sub_records, rows)
        if traces:
            what = plots.setup_title(setup)
            out.append((plots.waveform_overlay(traces, title=f"{job.label} · {what}",
                                               note=f"{len(traces)} of {n_total} captures"),
                        f"Reference output of {len(traces)} captures ({what}), aligned on supply valid: median bold "
                        f"over the p05–p95 band; ▲ supply valid ({job.supply_valid}), ● output at 90 % of its "
                        "final level, ■ settled."))
    if {"die_x", "die_y"} <= set(rows.columns) and rows[["die_x", "die_y"]].notna().all(axis=1).any():
        shown = plots.setup_title(plots.map_setup(rows) or {})
        out.append((plots.wafer_map(rows, title=job.label),
                    f"By die position: median startup delay at {shown} (the set-up with the most delays), and the "
                    "most severe verdict of the die over every set-up."))
    pairs = [(plots.setup_title(setup), counted(sub), job.predicted_by_setup.get(setup_tuple(setup)))
             for setup, sub in split_setups(rows)] if job.predicted_by_setup else []
    pairs = [p for p in pairs if p[2] is not None and len(p[2])]
    if pairs:
        out.append((plots.qq_plot(pairs, title=f"{job.label}: measured vs model"),
                    "Quantiles of the measured delays against the model's, set-up by set-up (one series each)."))
    return out


def part_plots(job: _Job, report):
    """A triage sheet: per ramp time of the part (failing ones first), its traces against the lot's."""
    part = load_traces(job.root, job.records, job.rows)
    lot = load_traces(job.root, job.baseline_records, job.baseline_rows)
    ramp_of = {**_ramps_by_id(job.rows), **_ramps_by_id(job.baseline_rows)}
    panels = []
    for ramp in triage_ramps(job.rows):
        mine = [tr for tr in part if ramp_of.get(tr.label) == ramp]
        theirs = [tr for tr in lot if ramp_of.get(tr.label) == ramp]
        title = "all set-ups" if ramp is None else f"ramp {format_si(ramp, 's')}"
        panels.append(plots.TriagePanel(f"{title} · lot n = {len(theirs)}", mine, envelope(theirs)))
    lot_name = str(job.rows["lot"].iloc[0]) if "lot" in job.rows.columns else "lot"
    hypotheses = [h.to_json_dict() for h in report.hypotheses]
    sheet = plots.triage_sheet(panels, hypotheses, job.rows, part_label=job.label, lot_label=lot_name,
                               conclusion=report.conclusion.text, next_experiment=report.next_experiment.text)
    return [(sheet, f"Triage sheet of returned part {job.label}: its traces against its lot at the same ramp "
                    "times, its captures and the hypotheses ranked by posterior probability.")]


def _ramps_by_id(rows: pd.DataFrame | None) -> dict:
    if rows is None or "ramp_s" not in rows.columns:
        return {} if rows is None else {cid: None for cid in rows["capture_id"]}
    return {cid: (None if pd.isna(r) else float(r)) for cid, r in zip(rows["capture_id"], rows["ramp_s"])}


def triage_ramps(rows: pd.DataFrame, limit: int = 3) -> list:
    """The part's ramp times to draw: those with a failure first, then the others, at most ``limit``."""
    if "ramp_s" not in rows.columns or rows["ramp_s"].isna().all():
        return [None]
    failing = rows[rows["verdict"] != "started"]["ramp_s"].dropna().unique()
    others = rows["ramp_s"].dropna().unique()
    ordered = list(dict.fromkeys([*sorted(map(float, failing)), *sorted(map(float, others))]))
    return sorted(ordered[:limit])


def _overlay_sets(job: _Job):
    """(set-up, records, captures at that set-up) for up to MAX_OVERLAYS set-ups, spread over them."""
    if job.root is None or not job.records:
        return []
    by_id = {r["capture_id"]: r for r in job.records}
    facets = list(split_setups(job.rows))
    if len(facets) > MAX_OVERLAYS:
        facets = [facets[i] for i in np.linspace(0, len(facets) - 1, MAX_OVERLAYS).round().astype(int)]
    out = []
    for setup, rows in facets:
        picked = pick_traces(rows.set_index("capture_id")["verdict"])
        out.append((setup, [by_id[i] for i in picked if i in by_id], len(rows)))
    return out


def pick_traces(verdicts: pd.Series, limit: int = MAX_TRACES) -> list[str]:
    """Up to ``limit`` capture ids: every failure first (up to half), then starts evenly spread."""
    failed = [i for i, v in verdicts.items() if v != "started"][: limit // 2]
    started = [i for i, v in verdicts.items() if v == "started"]
    room = limit - len(failed)
    if len(started) > room:
        started = [started[i] for i in np.linspace(0, len(started) - 1, room).round().astype(int)]
    return failed + started


def load_traces(root: str | None, records: Sequence[dict], rows: pd.DataFrame | None) -> list[Trace]:
    from labtool.store import load_capture_record

    if root is None or rows is None:
        return []
    by_id = rows.set_index("capture_id")
    traces = []
    for rec in records:
        try:
            cap = load_capture_record(root, rec)
            traces.append(trace_from_capture(cap, {"capture_id": rec["capture_id"],
                                                   **by_id.loc[rec["capture_id"]].to_dict()}))
        except LabtoolError:
            continue  # a missing waveform leaves a gap in the overlay; `labtool verify` names it
    return traces


# -- inputs -------------------------------------------------------------------------------------
def _open_inputs(campaign) -> tuple[pd.DataFrame, str | None, Any]:
    """(measurement table, campaign root or None, open Campaign or None)."""
    if isinstance(campaign, pd.DataFrame):
        return campaign, None, None
    from labtool.store import Campaign

    camp = campaign if isinstance(campaign, Campaign) else Campaign.open(campaign)
    return camp.measurements(), str(camp.root), camp


def _load_design(design):
    if design is None or not isinstance(design, (str, os.PathLike)):
        return design
    from labtool.model import load_design

    return load_design(design)


# -- the report ---------------------------------------------------------------------------------
def write_report(campaign, out_dir, by: Sequence[str] | str = ("lot",), design=None, *,
                 scheduler: Scheduler | None = None, spec_max_delay_s: float | None = None,
                 predictions: pd.DataFrame | None = None, model_samples: int = 200, seed: int = 1,
                 parts: Sequence[str] = (), title: str | None = None) -> ReportFiles:
    """Write ``out_dir/report.html``, ``out_dir/report.xlsx`` and ``out_dir/plots/*.png``.

    ``campaign``: a campaign path, an open Campaign, or a measurement table (then no waveform plots).
    ``design``: a design file or Design; the model's Monte Carlo at the measured set-ups (``model_samples``
    per set-up, ``seed``) gives the predicted distributions, and backs the returned parts' triage with
    the failure recipes' Monte Carlo (at most 16 parts per set-up and recipe). ``predictions`` (a predictions table)
    may be given instead. ``spec_max_delay_s`` defaults to the measurement limits' ``max_delay_s``.
    Parts tagged returned get a triage sheet, and so do ``parts`` (``LOT/PART``).
    """
    by = parse_keys(by)
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise UsageError(f"--out {out}: exists and is not a directory")
    (out / "plots").mkdir(parents=True, exist_ok=True)
    table, root, camp = _open_inputs(campaign)
    try:
        if table.empty:
            where = f"{root}: " if root else ""
            raise UsageError(f"{where}no measurements yet; run `labtool measure` on the campaign first")
        limits_key = str(table["limits_key"].iloc[0]) if "limits_key" in table.columns else None
        limits = camp.limits(limits_key) if camp is not None and limits_key else {}
        measured_with = measured_limits(camp, table) if camp is not None else Limits()
        if spec_max_delay_s is None and limits.get("max_delay_s") is not None:
            spec_max_delay_s = float(limits["max_delay_s"])
        stats = lot_statistics(table, by, spec_max_delay_s)
        design = _load_design(design)
        if design is not None and predictions is None:
            from labtool.stats.predictions import predictions_from_model

            predictions = predictions_from_model(design, table, n=model_samples, seed=seed, scheduler=scheduler,
                                                 limits=measured_with)
        model_failed = [(f"Monte Carlo at ramp_s={r:g}, temperature_c={t:g}", why)
                        for (r, t), why in (predictions.attrs.get("failed", []) if predictions is not None else [])]
        comparisons = compare(table, predictions, by) if predictions is not None else None
        returned = sorted(set(returned_parts(table)) | set(parts))
        jobs = _jobs(table, by, root, camp, predictions, spec_max_delay_s, returned,
                     _triage_model(design, table, returned, measured_with, model_samples, seed, scheduler),
                     supply_valid_text(measured_with))
    finally:
        if camp is not None and camp is not campaign:
            camp.close()
    outcomes = list(run_batch(render_job, jobs, scheduler, what="report", unit="group"))
    failed = (*model_failed, *((o.item.label, o.error) for o in outcomes if not o.ok))
    rendered = {o.item.label: o.value for o in outcomes if o.ok}
    for r in rendered.values():
        for name, _, png in r.files:
            write_atomic(out / "plots" / name, lambda tmp: tmp.write_bytes(png), "plot")
    about = {"labtool_version": __version__, "generated_at": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
             "campaign": root or "(measurement table)", "grouped_by": ",".join(by), "limits_key": limits_key,
             "spec_max_delay_s": spec_max_delay_s, "model": getattr(design, "name", None) if design is not None else None,
             "model_samples_per_setup": model_samples if design is not None else None, "seed": seed if design is not None else None}
    workbook = write_workbook(out / "report.xlsx", table, summary=lot_table(stats),
                              comparison=comparison_table(comparisons) if comparisons is not None else None,
                              limits=limits, about=about, triage=_triage_table(jobs, rendered))
    sections = _sections(table, by, stats, comparisons, jobs, rendered, failed, about, limits)
    page = report_html.render_html(title or "Startup report", _subtitle(table, by, about), sections)
    html_path = out / "report.html"
    write_atomic(html_path, lambda tmp: tmp.write_text(page, encoding="utf-8"), "HTML report")
    pngs = tuple(out / "plots" / name for r in rendered.values() for name, _, _ in r.files)
    reports = tuple(rendered[j.label].triage for j in jobs if j.kind == "part" and j.label in rendered)
    return ReportFiles(html=html_path, workbook=workbook, plots=pngs, failed=failed, triage=reports)


def predicted_by_setup(rows: pd.DataFrame, predictions: pd.DataFrame | None) -> dict | None:
    """The predicted delays at each of the group's set-ups (set-up tuple → counted delays), matched on
    the set-up columns both tables have."""
    if predictions is None:
        return None
    cols = [k for k in SETUP_KEYS if k in predictions.columns and k in rows.columns]
    out = {}
    for setup, _ in split_setups(rows):
        at = np.ones(len(predictions), bool)
        for k in cols:
            values = pd.to_numeric(predictions[k], errors="coerce").to_numpy(np.float64)
            at &= np.isclose(values, np.nan if setup[k] is None else float(setup[k]), rtol=1e-9, atol=0.0)
        if at.any():
            out[setup_tuple(setup)] = counted(predictions[at])
    return out


def _triage_model(design, table: pd.DataFrame, returned: Sequence[str], limits: Limits, samples: int, seed: int,
                  scheduler):
    """The model's Monte Carlo at every set-up of the returned parts, once for all of them (with a design):
    ``samples`` per set-up and recipe, at most the triage default."""
    if design is None or not returned:
        return None
    from labtool.stats.triage import model_evidence, model_setup, record_windows
    from labtool.stats.triage.model_backing import DEFAULT_SAMPLES

    rows = table[part_labels(table).isin(returned)]
    return model_evidence(design, [model_setup(r) for r in rows.to_dict("records")], windows=record_windows(rows),
                          limits=limits, n=min(samples, DEFAULT_SAMPLES), seed=seed,
                          scheduler=scheduler)


def _triage_table(jobs, rendered) -> pd.DataFrame | None:
    """The workbook's Triage sheet: per returned part its ranked hypotheses; the conclusion, the next
    experiment and the deciding captures on the part's first row."""
    frames = []
    for job in (j for j in jobs if j.kind == "part" and j.label in rendered):
        rep = rendered[job.label].triage
        frame = rep.table().drop(columns=["bench_check"])
        frame.insert(0, "part", rep.part)
        top = {"conclusion": rep.conclusion.text, "next_experiment": rep.next_experiment.text,
               "deciding_captures": "; ".join(f"{c.get('file') or c['capture_id']} ({c['verdict']}, {c['nats']:+.2f})"
                                              for c in rep.deciding_evidence.get("captures", []))}
        for col, text in top.items():
            frame[col] = [text] + [None] * (len(frame) - 1)
        frames.append(frame)
    return pd.concat(frames, ignore_index=True) if frames else None


def _jobs(table, by, root, camp, predictions, spec, returned, triage_model, supply_valid: str) -> list[_Job]:
    common = dict(root=root, spec_max_delay_s=spec, supply_valid=supply_valid)
    jobs = [_Job("overview", "Overview", "overview", rows=table, predictions=predictions, **common)]
    for key, rows in groups(table, by, "--by"):
        label = group_label(key)
        records = tuple(camp.records(list(rows["capture_id"]))) if camp is not None else ()
        jobs.append(_Job("group", label, slug(label), rows=rows, records=records,
                         predicted_by_setup=predicted_by_setup(rows, predictions), **common))
    jobs += [part_job(table, part, camp, triage_model, **common) for part in returned]
    return jobs


def part_job(table: pd.DataFrame, part: str, camp, triage_model=None, **common) -> _Job:
    """The triage-sheet job of one part (``LOT/PART``): its rows, and its lot's traces at its ramp times."""
    labels = part_labels(table)
    mine = table[labels == part]
    same_lot = (table["lot"].astype("string") == part.split("/", 1)[0]).fillna(False) \
        if "lot" in table.columns else pd.Series(True, index=table.index)
    lot = table[(labels != part) & same_lot]
    baseline = lot[lot["verdict"].isin(CAME_UP)]
    if "ramp_s" in baseline.columns:  # the lot at the part's ramp times, up to a panel's worth each
        baseline = baseline[baseline["ramp_s"].isin(triage_ramps(mine))]
        chosen = [cid for _, at in baseline.groupby("ramp_s")
                  for cid in pick_traces(at.set_index("capture_id")["verdict"], MAX_TRACES // 3)]
    else:
        chosen = pick_traces(baseline.set_index("capture_id")["verdict"])
    picked = baseline[baseline["capture_id"].isin(chosen)]
    # a part alone in its lot is triaged against the other lots (at the same set-ups)
    triage_rows = table[same_lot] if ((labels != part) & same_lot).any() else table
    return _Job("part", part, "part-" + slug(part), rows=mine, triage_rows=triage_rows, triage_model=triage_model,
                records=tuple(camp.records(list(mine["capture_id"]))) if camp is not None else (),
                baseline_rows=picked,
                baseline_records=tuple(camp.records(list(picked["capture_id"]))) if camp is not None else (),
                **common)


# -- HTML sections ------------------------------------------------------------------------------
def _part_section(label: str, rep, pictures) -> report_html.Section:
    """A returned part: the conclusion, the hypotheses ranked by posterior, the deciding captures."""
    anchor = report_html.anchor_for("p " + label)
    if rep is None:
        return report_html.Section(anchor, label, pictures=pictures, text="triage could not be run", nav_group="parts")
    llr = "—" if rep.log_lr_to_runner_up is None else f"{rep.log_lr_to_runner_up:.2f} nats"
    facts = [("conclusion", rep.conclusion.text), ("most likely", f"{rep.top.name} ({rep.top.posterior:.2f})"),
             (f"ln LR over {rep.hypotheses[1].name}", llr), ("next experiment", rep.next_experiment.text)]
    hyp = pd.DataFrame([{"rank": i + 1, "hypothesis": h.name, "posterior": h.posterior,
                         "ln LR to next": h.log_lr_to_next, "where": h.where, "what": h.title,
                         "evidence": plots.evidence_text(h.evidence), "bench check": h.bench_check}
                        for i, h in enumerate(rep.hypotheses) if h.testable])
    tables = [report_html.Table("Hypotheses, ranked by posterior probability", hyp)]
    top, runner = rep.deciding_evidence["for"], rep.deciding_evidence["against"]
    for key, caption in (("against_healthy", f"Captures that set {top} apart from the healthy pattern (nats)"),
                         ("captures", f"Captures that decided {top} over {runner} (nats)")):
        deciding = rep.deciding_table(key)
        if len(deciding):
            tables.append(report_html.Table(caption, deciding))
    return report_html.Section(anchor, label, facts=facts, pictures=pictures, tables=tables,
                               text=" ".join(rep.notes), nav_group="parts")


GROUP_COLUMNS = ("n_captures", "n_parts", "n_parts_stuck", "parts_stuck_upper95", "parts_stuck_ppm_upper95",
                 "start_stuck_rate", "start_stuck_upper95", "n_started", "n_ringing", "n_slow_start", "n_wrong_level",
                 "n_incomplete", "n_recollapse", "n_stuck_at_zero", "n_no_supply", "n_setups", "intermittent_parts")
SETUP_COLUMNS = ("ramp_s", "temperature_c", "vdd_v", "n_captures", "n_parts_stuck", "delay_n", "delay_median_s",
                 "delay_p05_s", "delay_p95_s", "output_valid", "vsupply_at_valid_median_v", "delay_mean_s", "delay_std_s",
                 "delay_fit_distribution", "delay_fit_ad_pvalue", "cpk", "outliers")
COMPARISON_COLUMNS = ("n_measured", "n_setups", "measured_n_parts", "measured_n_parts_stuck", "predicted_n_parts",
                      "predicted_p_part_stuck", "stuck_pvalue", "finding")
COMPARISON_SETUP_COLUMNS = ("ramp_s", "temperature_c", "vdd_v", "n_measured", "n_parts", "measured_delay_median_s",
                            "predicted_delay_median_s", "delay_shift_s", "ks_pvalue", "ad_pvalue", "measured_n_stuck",
                            "predicted_n_stuck", "finding")
FAILURE_COLUMNS = ("capture_id", "lot", "wafer", "part", "temperature_c", "ramp_s", "repeat", "verdict", "delay_s",
                   "settle_s", "overshoot_pct", "vout_final_v", "source_path")
def _columns(frame: pd.DataFrame, by: Sequence[str], wanted: Sequence[str]) -> pd.DataFrame:
    return frame[[c for c in (*by, *wanted) if c in frame.columns]]


def _subtitle(table: pd.DataFrame, by, about) -> str:
    return (f"{len(table)} captures · grouped by {', '.join(by)} · campaign {about['campaign']} · "
            f"labtool {about['labtool_version']} · {about['generated_at']}")


def _pct(k: int, n: int) -> str:
    return f"{k} ({100.0 * k / n:.1f} %)" if n else str(k)


def readable_rows(frame: pd.DataFrame) -> pd.DataFrame:
    """A summary frame as people read it: p-values read at a table end shown as bounds ("≥ 0.25"),
    a set-up's output labelled ready before or after supply valid, and the supply at which it became
    valid shown where it was ready before (there the delay is set by the ramp)."""
    frame = frame.copy()
    for p_col, bound_col in (("delay_fit_ad_pvalue", "delay_fit_ad_pvalue_bound"), ("ad_pvalue", "ad_pvalue_bound")):
        if p_col in frame.columns and bound_col in frame.columns:
            frame[p_col] = [format_pvalue(p, b) if isinstance(b, str) else p
                            for p, b in zip(frame[p_col], frame[bound_col])]
    if "ready_before_supply_valid" in frame.columns:
        ready = frame["ready_before_supply_valid"].map(lambda r: None if r is None or pd.isna(r) else bool(r))
        frame["output_valid"] = ready.map(
            lambda r: None if r is None else "ready before supply valid" if r else "after supply valid")
        if "vsupply_at_valid_median_v" in frame.columns:
            frame["vsupply_at_valid_median_v"] = frame["vsupply_at_valid_median_v"].where(ready.eq(True), None)
    return frame


def _facts(g) -> list[tuple[str, str]]:
    """A group's tiles: its yield figures over parts and starts (delays are per set-up, in its table)."""
    rate = g.start_stuck
    facts = [("captures", str(g.n_captures)), ("parts", str(g.n_parts)), ("set-ups", str(len(g.setups))),
             ("parts with a stuck start", _pct(g.n_parts_stuck, g.n_parts_tested)),
             ("parts stuck, 95 % upper bound", report_html.display("parts_stuck_upper95", g.parts_stuck_upper95)),
             ("stuck starts", _pct(rate.k, rate.n)),
             ("per start, 95 % upper bound", report_html.display("start_stuck_upper95", rate.upper95)),
             ("started", _pct(g.counts["n_started"], g.n_captures))]
    facts += [(report_html.display("verdict", k.removeprefix("n_")), str(n)) for k, n in g.counts.items()
              if n and k != "n_started"]
    facts.append(("intermittent parts", ", ".join(g.intermittent_parts) or "none"))
    return facts


def _sections(table, by, stats, comparisons, jobs, rendered, failed, about, limits) -> list[report_html.Section]:
    def pictures(label):
        files = rendered[label].files if label in rendered else ()
        return [report_html.Picture(caption, png, alt=f"{label}: {caption}") for _, caption, png in files]

    findings = {group_label(c.group): c.finding_text for c in comparisons or ()}
    verdicts = table["verdict"].value_counts()
    labels = part_labels(table)
    overview_facts = [("captures", str(len(table))), ("groups", str(len(stats))),
                      ("parts", str(labels[labels != ""].nunique()))]
    overview_facts += [(report_html.display("verdict", v), str(int(n))) for v, n in verdicts.items()]
    group_rows = pd.DataFrame.from_records([g.to_json_dict() for g in stats])
    setup_rows = readable_rows(setup_table(stats))
    tables = [report_html.Table("Per group: parts and starts (click a column head to sort)",
                                _columns(group_rows.assign(intermittent_parts=group_rows["intermittent_parts"].map(
                                    ", ".join)), by, GROUP_COLUMNS)),
              report_html.Table("Per set-up: startup delays of the captures that came up and stayed",
                                _columns(setup_rows, by, SETUP_COLUMNS))]
    if comparisons is not None:
        compared = comparison_table(comparisons)
        tables.append(report_html.Table("Measured against the model: stuck at zero over parts",
                                        _columns(compared[compared["row"] == "group"], by, COMPARISON_COLUMNS)))
        tables.append(report_html.Table("Measured against the model: delays per set-up",
                                        _columns(readable_rows(compared[compared["row"] == "setup"]), by,
                                                 COMPARISON_SETUP_COLUMNS)))
    text = ""
    if failed:
        text = "Not drawn: " + "; ".join(f"{what}: {why}" for what, why in failed)
    sections = [report_html.Section("s-overview", "Overview", facts=overview_facts, pictures=pictures("Overview"),
                                    tables=tables, text=text, nav_group="overview")]
    stats_by_label = {group_label(g.group): g for g in stats}
    for job in (j for j in jobs if j.kind == "group"):
        g = stats_by_label[job.label]
        per_setup = readable_rows(setup_table([g]))
        sections.append(report_html.Section(
            report_html.anchor_for("g " + job.label), job.label, facts=_facts(g), finding=findings.get(job.label, ""),
            pictures=pictures(job.label),
            tables=[report_html.Table("Per set-up", _columns(per_setup, (), SETUP_COLUMNS))]))
    failures = table[table["verdict"] != "started"]
    shown = _columns(failures, (), FAILURE_COLUMNS).head(MAX_HTML_ROWS)
    note = f"first {MAX_HTML_ROWS} of {len(failures)}; every one is in report.xlsx" if len(failures) > MAX_HTML_ROWS else ""
    sections.append(report_html.Section("s-failures", "Failures", tables=[report_html.Table(
        f"{len(failures)} captures that did not simply start", shown, note=note)], nav_group="overview"))
    for job in (j for j in jobs if j.kind == "part"):
        sections.append(_part_section(job.label, rendered[job.label].triage if job.label in rendered else None,
                                      pictures(job.label)))
    limit_rows = pd.DataFrame([*((k, v) for k, v in about.items()), *((f"limits.{k}", v) for k, v in limits.items())],
                              columns=["item", "value"]).astype({"value": object})
    sections.append(report_html.Section("s-limits", "Limits and version", tables=[report_html.Table(
        "What this report was made with", limit_rows.assign(value=limit_rows["value"].map(
            lambda v: "—" if v is None else str(v))))], nav_group="overview"))
    return sections
