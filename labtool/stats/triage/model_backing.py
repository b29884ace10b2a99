"""Stories backed by the startup model: each failure recipe's Monte Carlo at the part's set-ups.

With a design file, a story that has a recipe in :mod:`labtool.model.scenarios` (its ``recipe``)
also gets the model's own prediction: the recipe applied to the design, a small Monte Carlo of part
variation at each set-up the part was measured at (the record as long as the part's), measured by
the same engine as the bench. It gives the verdict probabilities there and the shifts of delay,
overshoot and level against the nominal design's Monte Carlo at the same set-up. Behavioural model,
not transistor-level sign-off: the story's likelihood is an even mixture of this and its pattern
model (docs/triage.md).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Iterable, Mapping

import numpy as np
import pandas as pd

from labtool.execute import Scheduler, run_batch
from labtool.stats.outliers import robust_location_scale
from labtool.stats.table import plain
from labtool.stats.triage.hypotheses import CAME_UP, CATEGORIES, STORIES, category_index

NOMINAL = "nominal"
MODEL_METRICS = ("delay_s", "overshoot_pct", "vout_final_v")
DEFAULT_SAMPLES = 16


@dataclass(frozen=True)
class ModelCell:
    """One design variant's Monte Carlo at one set-up: verdict category counts, medians and spreads."""

    counts: tuple[float, ...]
    medians: Mapping[str, float | None] = field(hash=False)
    scales: Mapping[str, float] = field(hash=False)


@dataclass(frozen=True)
class ModelEvidence:
    """Monte Carlo cells per variant (``nominal`` and each recipe) and set-up (ramp_s, temperature_c, vdd_v)."""

    design: str
    n_samples: int
    seed: int
    cells: Mapping[str, Mapping[tuple, ModelCell]] = field(hash=False)
    failed: tuple[str, ...] = ()  # one line per Monte Carlo that could not be run
    i_start_a: float | None = None  # the design's startup current
    i_start_min_a: Mapping[float, float | None] = field(default_factory=dict, hash=False)  # DC escape minimum by °C

    def cell(self, variant: str, setup: tuple) -> ModelCell | None:
        return self.cells.get(variant, {}).get(setup)

    def shift(self, recipe: str, setup: tuple, metric: str) -> tuple[float, float] | None:
        """(recipe median − nominal median, recipe spread) of ``metric`` at ``setup``; None without both."""
        rec, nom = self.cell(recipe, setup), self.cell(NOMINAL, setup)
        if rec is None or nom is None or rec.medians.get(metric) is None or nom.medians.get(metric) is None:
            return None
        return rec.medians[metric] - nom.medians[metric], rec.scales.get(metric, 0.0)


def _value(setup: Mapping, key: str) -> float | None:
    v = plain(setup.get(key))
    return None if v is None else float(v)


def model_setup(setup: Mapping[str, float | None]) -> tuple | None:
    """The model's key of a bench set-up: (ramp_s, temperature_c, vdd_v or None; blanks are None);
    None without ramp and temperature."""
    ramp, temp = _value(setup, "ramp_s"), _value(setup, "temperature_c")
    if ramp is None or temp is None:
        return None
    return (ramp, temp, _value(setup, "vdd_v"))


def record_windows(rows: pd.DataFrame) -> dict[tuple, float]:
    """Per model set-up, the median time the part's records run past the end of the supply ramp.

    The ramp starts 0.9·ramp_s before the supply's 90 % instant (a linear ramp from zero); a start
    that the record is too short to show is a stuck capture on the bench, so the model gets the same
    record length.
    """
    need = {"ramp_s", "temperature_c", "t_supply_s", "t0_s", "dt_s", "n_samples"}
    if not need <= set(rows.columns):
        return {}
    out: dict[tuple, list[float]] = {}
    for rec in rows.to_dict("records"):
        key = model_setup(rec)
        vals = [rec[k] for k in ("t_supply_s", "t0_s", "dt_s", "n_samples")]
        if key is None or any(v is None or (isinstance(v, float) and math.isnan(v)) for v in vals):
            continue
        end = rec["t0_s"] + (rec["n_samples"] - 1) * rec["dt_s"]
        window = end - (rec["t_supply_s"] - 0.9 * rec["ramp_s"]) - rec["ramp_s"]
        if window > 0:
            out.setdefault(key, []).append(float(window))
    return {k: float(np.median(v)) for k, v in out.items()}


def _variants(design) -> dict[str, object]:
    from labtool.model.scenarios import SCENARIOS

    out = {NOMINAL: design}
    for story in STORIES:
        if story.recipe is not None:
            out[story.recipe] = SCENARIOS[story.recipe].apply(design)
    return out


def _cell(item) -> tuple[str, tuple, ModelCell]:
    """Worker: one variant's Monte Carlo at one set-up (picklable batch item)."""
    from labtool.model import monte_carlo

    variant, design, setup, window_s, n, seed, limits = item
    ramp, temp, vdd = setup
    changes = {"window_s": window_s} if window_s else {}
    if vdd is not None:
        changes["vdd_v"] = vdd
    run = design.replace(**changes) if changes else design
    samples = monte_carlo(run, conditions=[(ramp, temp)], n=n, seed=seed, limits=limits,
                          scheduler=Scheduler("local", 1)).samples
    cats = np.array([category_index(v) for v in samples["verdict"]], dtype=int)
    counts = tuple(float(n) for n in np.bincount(cats, minlength=len(CATEGORIES)))
    came_up = samples[np.isin(cats, CAME_UP)]
    medians, scales = {}, {}
    for metric in MODEL_METRICS:
        v = pd.to_numeric(came_up.get(metric, pd.Series(dtype=float)), errors="coerce").to_numpy(float)
        if np.isfinite(v).sum() >= 3:
            medians[metric], scales[metric] = robust_location_scale(v)
        else:
            medians[metric] = None
    return variant, setup, ModelCell(counts, medians, scales)


def model_evidence(design, setups: Iterable[tuple], *, windows: Mapping[tuple, float] | None = None, limits=None,
                   n: int = DEFAULT_SAMPLES, seed: int = 1, scheduler: Scheduler | None = None) -> ModelEvidence:
    """The nominal design's and every recipe's Monte Carlo (``n`` parts, ``seed``) at each model set-up."""
    from labtool.measure import Limits

    limits = limits or Limits()
    windows = windows or {}
    keys = sorted({s for s in setups if s is not None}, key=lambda s: (s[0], s[1], s[2] or 0.0))
    items = [(name, variant, key, windows.get(key), n, seed, limits)
             for name, variant in _variants(design).items() for key in keys]
    cells: dict[str, dict[tuple, ModelCell]] = {}
    failed = []
    for outcome in run_batch(_cell, items, scheduler, what="triage model", unit="run"):
        if outcome.ok:
            variant, key, cell = outcome.value
            cells.setdefault(variant, {})[key] = cell
        else:
            failed.append(f"{outcome.item[0]}: {outcome.error}")
    from labtool.model import dc_analysis

    margins = {t: dc_analysis(design, t).i_start_min_a for t in sorted({k[1] for k in keys})}
    return ModelEvidence(getattr(design, "name", "design"), n, seed, cells, tuple(failed),
                         float(design.i_start_a), margins)
