"""Triage's confusion matrix: returned parts with a known cause, as waveforms, through the store and the
measurement engine, beside a healthy lot; the cause built in must rank first.

Invented parts stating the property (tests/stats/triage_parts.py): closed-form startup waveforms for
every hypothesis, and the startup model's failure recipes (labtool.model.scenarios) with the design
file. 20 seeds each: "≥ 95 % of seeds" means at most one miss.
"""

from collections import Counter

import pytest

from labtool.model import load_design
from labtool.model.scenarios import SCENARIOS
from labtool.stats.triage import CAUSES, HEALTHY, STORY, load_resolution, model_evidence, model_setup, \
    record_windows, triage
from tests.model.conftest import DEMO
from tests.stats.triage_parts import LIMITS, LOT, REPEATS, closed_form_starts, model_starts, store_and_measure

SEEDS = 20
LOT_PARTS = [f"h{i:02d}" for i in range(6)]
# Each recipe's physics (labtool.model.scenarios) and the cause a bench engineer names for it.
RECIPE_CAUSE = {
    "startup_open": "dead_everywhere",  # no startup current: stuck wherever leakage does not lift the core
    "starved_amplifier": "weak_startup_slow",  # a starved loop: slow starts (stuck within a short record)
    "late_strong_pulldown": "excess_ringing",  # a late, strong startup release: overshoot on fast ramps
    "hot_leaky_q1": "hot_only_stuck",  # leakage that doubles every 10 K: no start when hot
    "trim_ratio_low": "level_fault",  # R2/R1 trimmed low: the reference settles ~0.13 V low
}


def _confusion(table, resolution, parts, **kwargs):
    """(Counter of (built, ranked first), reports) for parts [(name, cause built in)] each beside the lot."""
    labels = table["part"].astype(str)
    seen, reports = Counter(), {}
    for part, cause in parts:
        rep = triage(table[labels.isin([*LOT_PARTS, part])], f"{LOT}/{part}", resolution=resolution, **kwargs)
        seen[(cause, rep.top.name)] += 1
        reports[part] = rep
    return seen, reports


def _misses(seen, cause):
    return {top: n for (built, top), n in seen.items() if built == cause and top != cause}


@pytest.fixture(scope="module")
def closed_form(tmp_path_factory):
    starts = []
    for i, part in enumerate(LOT_PARTS):
        starts += closed_form_starts(part, "healthy", 1000 + i)
    parts = []
    for k, cause in enumerate((*CAUSES, HEALTHY)):
        for s in range(SEEDS):
            part = f"c{k:02d}s{s:02d}"
            # one start per set-up; an intermittent part is told from a region by its repeats
            repeats = 3 if cause == "bistable_intermittent" else 1
            starts += closed_form_starts(part, "healthy" if cause == HEALTHY else cause, 20_000 + 100 * k + s, repeats)
            parts.append((part, cause))
    root = tmp_path_factory.mktemp("closed") / "camp"
    table, records = store_and_measure(root, starts)
    return (*_confusion(table, load_resolution(str(root), records), parts), parts)


@pytest.mark.slow
@pytest.mark.parametrize("cause", CAUSES)
def test_each_closed_form_cause_ranks_first_in_19_of_20_seeds(closed_form, cause):
    seen, _, _ = closed_form
    assert seen[(cause, cause)] >= SEEDS - 1, _misses(seen, cause)


@pytest.mark.slow
def test_healthy_parts_are_not_blamed(closed_form):
    seen, reports, parts = closed_form
    healthy = [reports[p] for p, cause in parts if cause == HEALTHY]
    assert seen[(HEALTHY, HEALTHY)] == SEEDS, _misses(seen, HEALTHY)
    assert all(r.conclusion.kind == "healthy" and r.conclusion.cause is None for r in healthy)
    assert all(r.conclusion.text.startswith("no hypothesis above the healthy pattern") for r in healthy)


@pytest.mark.slow
def test_every_report_is_a_distribution_with_a_next_experiment(closed_form):
    _, reports, _ = closed_form
    for rep in reports.values():
        post = [h.posterior for h in rep.hypotheses]
        assert sum(post) == pytest.approx(1.0, abs=1e-12) and all(p >= 0 for p in post)
        assert post == sorted(post, reverse=True)  # ranked by posterior
        assert rep.next_experiment.kind in ("failure_count", "value_shift")
        assert rep.next_experiment.power_cycles >= 1 and rep.next_experiment.condition


@pytest.fixture(scope="module")
def from_the_model(tmp_path_factory):
    design = load_design(DEMO)
    starts = model_starts(design, LOT_PARTS, seed=11, repeats=REPEATS)
    parts = []
    for k, (recipe, cause) in enumerate(sorted(RECIPE_CAUSE.items())):
        names = [f"m{k}s{s:02d}" for s in range(SEEDS)]
        # other draws of part variation (seed 7) than the triage's own Monte Carlo (seed 1)
        starts += model_starts(SCENARIOS[recipe].apply(design), names, seed=7, repeats=1)
        parts += [(n, cause) for n in names]
    root = tmp_path_factory.mktemp("model") / "camp"
    table, records = store_and_measure(root, starts)
    returned = table[~table["part"].astype(str).isin(LOT_PARTS)]
    model = model_evidence(design, [model_setup(r) for r in returned.to_dict("records")],
                           windows=record_windows(returned), limits=LIMITS)
    seen, reports = _confusion(table, load_resolution(str(root), records), parts, design=design, model=model)
    return seen, reports, model


@pytest.mark.slow
@pytest.mark.parametrize("recipe", sorted(RECIPE_CAUSE))
def test_each_model_recipe_ranks_its_cause_first_with_the_design(from_the_model, recipe):
    seen, reports, model = from_the_model
    cause = RECIPE_CAUSE[recipe]
    assert not model.failed
    assert seen[(cause, cause)] >= SEEDS - 1, _misses(seen, cause)
    first = next(r for r in reports.values() if r.top.name == cause)
    assert STORY[cause].recipe == recipe  # the story is backed by that recipe's Monte Carlo
    assert first.top.evidence["model_recipe"] == recipe and first.model["samples_per_setup"] == 16
