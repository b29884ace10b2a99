"""Lot statistics, comparison with predictions, triage and the model's prediction, as result objects
with ``to_dict()`` (the ``--json`` rows of the command) and ``to_frame()`` (a DataFrame). The commands
``labtool lot``, ``compare``, ``triage`` and ``predict`` print what these functions return."""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Mapping, Sequence, Union

import numpy as np
import pandas as pd

from labtool._api.campaigns import Campaign, store_of
from labtool._api.files import PathArg
from labtool.capture import Capture
from labtool.errors import LabtoolError, UsageError
from labtool.measure.limits import Limits
from labtool.stats.compare import Comparison, comparison_table
from labtool.stats.lot import LotStats, lot_table
from labtool.stats.sources import measured_limits, plain_record
from labtool.stats.table import parse_keys
from labtool.stats.triage.result import TriageReport
from labtool.units import parse_quantity

if TYPE_CHECKING:
    from labtool.store import Campaign as Store

# Where measurements come from: an open campaign, a campaign directory, or a measurement table.
Source = Union[Campaign, PathArg, pd.DataFrame]
DesignArg = Any  # a design file (TOML) or a Design from labtool's model
Keys = Union[str, Sequence[str]]


class _Opened:
    """(measurement table, the limits it was measured with, the store or None) of a source; closes a
    campaign it opened itself."""

    def __init__(self, source: Source):
        self.store: Store | None = None
        self._own = False
        from labtool.stats.table import startup_rows

        if isinstance(source, pd.DataFrame):
            self.table, self.limits = startup_rows(source), Limits()
            return
        if isinstance(source, Campaign):
            self.store = store_of(source)
        elif isinstance(source, (str, os.PathLike)):
            from labtool.store import Campaign as Store

            self.store, self._own = Store.open(source), True
        else:
            raise UsageError(f"expected a Campaign, a campaign directory or a measurement table, not "
                             f"{type(source).__name__}")
        try:
            measured = self.store.measurements()
            where = os.fspath(source) if self._own else str(self.store.root)
            if measured.empty:
                raise UsageError(f"{where}: no measurements yet; run `labtool measure {where}` first")
            # Statistics count startups; supply-dip and power-down rows are other records.
            self.table = startup_rows(measured)
            if self.table.empty:
                raise UsageError(f"{where}: no startup measurements (only supply-dip or power-down captures)")
            self.limits = measured_limits(self.store, self.table)
        except BaseException:
            self.close()
            raise

    def close(self) -> None:
        if self._own and self.store is not None:
            self.store.close()

    def __enter__(self) -> "_Opened":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _design(design: DesignArg):
    if isinstance(design, (str, os.PathLike)):
        from labtool.model import load_design

        return load_design(design)
    return design


def _scheduler(scheduler: str | None):
    from labtool.execute import parse_scheduler

    return parse_scheduler(scheduler) if scheduler is not None else None


# -- lot statistics -----------------------------------------------------------------------------------
@dataclass(frozen=True)
class _GroupedResult:
    """Per group of ``by`` one result object whose ``json_rows()`` are the command's ``--json`` lines."""

    by: tuple[str, ...]
    groups: tuple = field(repr=False)

    def rows(self) -> list[dict]:
        """The command's ``--json`` objects: per group its group row, then its set-up rows."""
        return [plain_record(rec) for g in self.groups for rec in g.json_rows()]

    def to_dict(self) -> dict:
        return {"by": list(self.by), "rows": self.rows()}


@dataclass(frozen=True)
class LotResult(_GroupedResult):
    """Lot statistics (``labtool lot``): per group of ``by`` a :class:`~labtool.stats.lot.LotStats` (yield
    figures over its parts and starts) with one set-up summary per ramp × temperature × supply (delays)."""

    groups: tuple[LotStats, ...] = field(repr=False)

    def to_frame(self) -> pd.DataFrame:
        """Group and set-up rows (column ``row``), the delay fit as ``delay_fit_*`` columns."""
        return lot_table(self.groups)


def lot(source: Source, by: Keys = "lot", *, spec_max_delay_s: float | str | None = None) -> LotResult:
    """Lot statistics of a campaign (or a measurement table) grouped by condition or tag columns
    (``"lot,temperature_c"`` or a list); ``spec_max_delay_s`` (seconds or ``"50us"``) for Cpk."""
    from labtool.stats.lot import lot_statistics

    keys = parse_keys(by)
    spec = None if spec_max_delay_s is None else parse_quantity(spec_max_delay_s, "s", what="spec_max_delay_s")
    with _Opened(source) as opened:
        return LotResult(keys, tuple(lot_statistics(opened.table, by=keys, spec_max_delay_s=spec)))


# -- comparison with predictions ----------------------------------------------------------------------
@dataclass(frozen=True)
class CompareResult(_GroupedResult):
    """Measured against predicted (``labtool compare``), per group of ``by``: a
    :class:`~labtool.stats.compare.Comparison` (the stuck-at-zero test over parts, the findings) with one
    row per matched set-up (the delays); ``predictions``: what was compared against."""

    groups: tuple[Comparison, ...] = field(repr=False)
    predictions: pd.DataFrame | None = field(default=None, repr=False, compare=False)

    def to_frame(self) -> pd.DataFrame:
        return comparison_table(self.groups)


def compare(source: Source, *, model: DesignArg = None, predictions: PathArg | pd.DataFrame | None = None,
            by: Keys = "lot", samples: int = 200, seed: int = 1, scheduler: str | None = None) -> CompareResult:
    """Lot statistics against predictions: the model's Monte Carlo (``model``: a design file or Design;
    ``samples`` simulated parts per measured set-up, ``seed``, measured with the campaign's limits) or a
    predictions table (``predictions``: CSV/XLSX, docs/predictions-format.md, or a DataFrame)."""
    from labtool.stats.compare import compare as compare_tables
    from labtool.stats.predictions import load_predictions, predictions_from_model

    if (model is None) == (predictions is None):
        raise UsageError("compare: give model= or predictions= (one of them)")
    keys = parse_keys(by)
    with _Opened(source) as opened:
        if model is not None:
            pred = predictions_from_model(_design(model), opened.table, n=samples, seed=seed,
                                          scheduler=_scheduler(scheduler), limits=opened.limits)
        else:
            pred = predictions if isinstance(predictions, pd.DataFrame) else load_predictions(predictions)
        return CompareResult(keys, tuple(compare_tables(opened.table, pred, by=keys)), pred)


# -- triage -------------------------------------------------------------------------------------------
def triage_parts(source: Source, parts: Sequence[str], *, model: DesignArg = None, model_samples: int | None = None,
                 seed: int = 1, scheduler: str | None = None) -> tuple[dict[str, TriageReport], list[str]]:
    """({part: report}, errors): :func:`triage` of several parts, the model's Monte Carlo run once at
    every set-up of them. A part that cannot be triaged is an error line, unless it is the only one
    (then the error is raised)."""
    from labtool.stats.triage import load_resolution, model_evidence, model_setup, record_windows
    from labtool.stats.triage import triage as triage_part
    from labtool.stats.triage.model_backing import DEFAULT_SAMPLES
    from labtool.stats.triage.parts import current_versions, select_part

    with _Opened(source) as opened:
        table = opened.table
        current = current_versions(table)
        mine, failed = {}, []
        for part in parts:
            try:
                mine[part] = current[select_part(current, part)[2].to_numpy()]
            except LabtoolError as exc:
                if len(parts) == 1:
                    raise
                failed.append(str(exc))
        rows = pd.concat(list(mine.values())) if mine else current.iloc[:0]
        resolution = None
        if opened.store is not None:
            resolution = load_resolution(str(opened.store.root), opened.store.records(list(rows["capture_id"])))
        limits = opened.limits if opened.store is not None else None
    design, evidence = _design(model), None
    if design is not None:
        n = DEFAULT_SAMPLES if model_samples is None else model_samples
        if n < 1:
            raise UsageError(f"model_samples {n}: must be at least 1")
        evidence = model_evidence(design, [model_setup(r) for r in rows.to_dict("records")],
                                  windows=record_windows(rows), limits=limits, n=n, seed=seed,
                                  scheduler=_scheduler(scheduler))
    reports = {part: triage_part(table, part, design=design, resolution=resolution, model=evidence) for part in mine}
    return reports, failed


def triage(source: Source, part: str, *, model: DesignArg = None, model_samples: int | None = None, seed: int = 1,
           scheduler: str | None = None) -> TriageReport:
    """Ranked causes for one returned part (``"LOT/PART"``) against its lot, with posteriors, the
    deciding captures and the next experiment; ``model`` (a design file or Design) backs the stories
    with the model's Monte Carlo at the part's set-ups (``model_samples`` parts per set-up and recipe)."""
    reports, _ = triage_parts(source, [part], model=model, model_samples=model_samples, seed=seed,
                              scheduler=scheduler)
    return reports[part]


# -- the model's prediction ---------------------------------------------------------------------------
@dataclass(frozen=True)
class Prediction:
    """What the behavioural startup model predicts for a design (not transistor-level sign-off):
    ``to_dict()`` is the ``labtool predict --json`` object (params, dc, transient, montecarlo),
    ``capture`` the nominal transient, ``samples`` the plain Monte Carlo's samples (one row per part)."""

    data: Mapping[str, Any] = field(repr=False)
    capture: Capture = field(repr=False)
    samples: pd.DataFrame | None = field(default=None, repr=False, compare=False)

    def to_dict(self) -> dict:
        return dict(self.data)

    def to_frame(self) -> pd.DataFrame:
        """One row: every figure of :meth:`to_dict` as a dotted column (``transient.delay_s``, …)."""
        return pd.json_normalize(self.to_dict())


def predict(design: DesignArg, *, temperature_c: float | str | None = None, ramp_s: float | str | None = None,
            samples: int | None = None, rare: bool = False, seed: int = 1, scheduler: str | None = None,
            overrides: Mapping[str, float | str] | None = None) -> Prediction:
    """DC picture, the nominal transient measured like a capture and, with ``samples``, a plain Monte
    Carlo of that many parts at the condition; ``rare=True``: the stuck-at-zero probability by importance
    sampling (``samples``: the most importance samples). ``temperature_c`` and ``ramp_s`` default to the
    design's; ``overrides`` set design parameters by their flat names (``{"i_start_a": 2e-6}``)."""
    from labtool.measure import measure_capture
    from labtool.model import DISCLAIMER, dc_analysis, load_design, monte_carlo, simulate
    from labtool.model.montecarlo import summarise
    from labtool.stats.intervals import exact_interval

    chosen = load_design(design, overrides) if isinstance(design, (str, os.PathLike)) else \
        design.replace(**overrides) if overrides else design
    temp = chosen.temperature_c if temperature_c is None else parse_quantity(temperature_c, "C", what="temperature_c")
    ramp = chosen.ramp_s if ramp_s is None else parse_quantity(ramp_s, "s", what="ramp_s")
    if not ramp > 0:
        raise UsageError(f"ramp_s {ramp_s}: must be > 0")
    if samples is not None and samples < (2 if rare else 1):
        raise UsageError(f"samples {samples}: must be ≥ {2 if rare else 1}")
    params = chosen.resolved(temp)
    params["ramp_s"] = ramp
    capture = simulate(chosen, ramp_s=ramp, temperature_c=temp)
    nominal = measure_capture(capture).to_json_dict()
    out = {"model": DISCLAIMER, "design": chosen.name,
           "source": str(Path(design)) if isinstance(design, (str, os.PathLike)) else None,
           "params": params, "dc": dc_analysis(chosen, temp).to_json_dict(),
           "transient": {k: nominal[k] for k in ("verdict", "t_supply_s", "delay_s", "rise_s", "settle_s",
                                                 "overshoot_pct", "vout_final_v")}}
    workers = _scheduler(scheduler)
    mc_samples = None
    if rare:
        from labtool.model.rare import stuck_probability

        r = stuck_probability(chosen, ramp_s=ramp, temperature_c=temp, seed=seed, scheduler=workers,
                              **({} if samples is None else {"n": samples}))
        # the plain Monte Carlo's delay figures do not apply to importance samples (null)
        out["montecarlo"] = {**r.to_json_dict(), "cause": r.cause(), **dict.fromkeys(
            ("delay_median_s", "delay_p05_s", "delay_p95_s", "delay_mean_s", "delay_std_s", "verdicts"))}
    elif samples:
        mc = monte_carlo(chosen, conditions=[(ramp, temp)], n=samples, seed=seed, scheduler=workers)
        summary = summarise(mc.samples, mc.failures)
        measured = summary["n"]
        out["montecarlo"] = {"seed": seed, "ramp_s": ramp, "temperature_c": temp, "method": "plain Monte Carlo",
                             **summary, "p_stuck_ci95": list(exact_interval(summary["n_stuck"], measured))
                             if measured else None,
                             # the first samples that could not be simulated, with their parameters and error
                             "failed": mc.failures.head(20).to_dict(orient="records")}
        mc_samples = mc.samples
    return Prediction(_plain(out), capture, mc_samples)


def _plain(value):
    """JSON-safe: numpy scalars to Python, tuples to lists, non-finite floats to None."""
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    return value
