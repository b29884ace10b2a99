"""Triage of one part: every story scored, ranked by posterior probability, explained and extended."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from labtool.stats.table import STUCK, plain
from labtool.stats.triage.densities import logsumexp
from labtool.stats.triage.evidence import PartEvidence, collect
from labtool.stats.triage.hypotheses import CAME_UP, CATEGORIES, HEALTHY, NO_FIT, STORIES, STUCK_CAUSES
from labtool.stats.triage.likelihood import Scorer, StoryScore
from labtool.stats.triage.model_backing import DEFAULT_SAMPLES, ModelEvidence, model_evidence, model_setup, \
    record_windows
from labtool.stats.triage.next_experiment import choose
from labtool.stats.triage.result import Conclusion, RankedHypothesis, TriageReport

MIN_CAUSE_POSTERIOR = 0.5  # below it the top cause is "leading", not "the" cause
N_DECIDING = 6
MIN_DECIDING_NATS = 0.01


def triage(measurements: pd.DataFrame, part: str, lot: str | None = None, design=None, *,
           resolution: pd.DataFrame | None = None, model: ModelEvidence | None = None, limits=None,
           model_samples: int = DEFAULT_SAMPLES, seed: int = 1, scheduler=None) -> TriageReport:
    """Ranked hypotheses for one part (``LOT/PART``, or ``PART`` with ``lot``) against its lot.

    ``resolution``: per capture_id the noise and code step of its waveform
    (:func:`labtool.stats.triage.inputs.load_resolution`); without it an 8-bit record is assumed.
    ``design`` (a model Design) backs the stories that have a failure recipe with the model's Monte
    Carlo at the part's set-ups (``model``, when already computed for them; otherwise ``model_samples``
    parts with ``seed``, measured with ``limits``) and adds the model's startup margins to the evidence
    of the stuck and slow stories.
    """
    ev = collect(measurements, part, lot, resolution)
    if design is not None and model is None:
        setups = [model_setup(ev.setup_dict(s)) for s in ev.setups]
        model = model_evidence(design, setups, windows=record_windows(ev.rows), limits=limits, n=model_samples,
                               seed=seed, scheduler=scheduler)
    scorer = Scorer(ev, model)
    scores = [scorer.score(s) for s in STORIES]
    ranked = _rank(scores)
    first, second = ranked[0], ranked[1]
    margin = _escape_margin(model, ev.rows) if model is not None else {}
    hypotheses = tuple(_entry(scorer, s, post, nxt, margin) for s, post, nxt in _posteriors(ranked))
    notes = list(ev.notes) + ([f"model Monte Carlo not run for {line}" for line in model.failed] if model else [])
    llr = _finite(first.log_likelihood - second.log_likelihood)
    return TriageReport(
        part=ev.label, lot=ev.lot, n_captures=ev.n, n_baseline=len(ev.lot_rows),
        verdicts={k: int(v) for k, v in ev.rows["verdict"].value_counts().items()}, hypotheses=hypotheses,
        conclusion=_conclusion(ev, hypotheses, llr), log_lr_to_runner_up=llr,
        deciding_evidence=_deciding(ev, first, second, next(s for s in scores if s.story.name == HEALTHY)),
        next_experiment=choose(scorer, first, second),
        notes=tuple(notes),
        model=None if model is None else {"design": model.design, "samples_per_setup": model.n_samples,
                                          "seed": model.seed})


def _finite(x: float) -> float | None:
    return float(x) if math.isfinite(x) else None


def _rank(scores: list[StoryScore]) -> list[StoryScore]:
    order = sorted(range(len(scores)), key=lambda i: (-(math.log(scores[i].story.prior) + scores[i].log_likelihood)
                                                       if scores[i].testable else math.inf, i))
    return [scores[i] for i in order]


def _posteriors(ranked: list[StoryScore]):
    """(score, posterior, score of the next-ranked) in rank order; untestable stories get 0."""
    logs = np.array([math.log(s.story.prior) + s.log_likelihood for s in ranked])
    post = np.exp(logs - logsumexp(logs[np.isfinite(logs)]))
    post = np.where(np.isfinite(logs), post, 0.0)
    post = post / post.sum()
    for i, s in enumerate(ranked):
        yield s, float(post[i]), ranked[i + 1] if i + 1 < len(ranked) else None


def _counts_text(counts: np.ndarray) -> dict:
    return {c: int(n) for c, n in zip(CATEGORIES, counts) if n}


def _entry(scorer: Scorer, score: StoryScore, posterior: float, nxt: StoryScore | None, margin: dict
           ) -> RankedHypothesis:
    ev, story = scorer.ev, score.story
    region, weight = score.map_region()
    where = region.text(ev.temps, ev.ramps) if region is not None else ("at every set-up" if story.name != HEALTHY
                                                                          else "")
    evidence: dict = {}
    if not score.testable:
        evidence["not_testable"] = score.reason
    elif region is not None:
        inside = region.contains(scorer.t_idx, scorer.r_idx)
        counts = np.bincount(ev.category[inside], minlength=len(CATEGORIES)).astype(float)
        probs = scorer.region_probabilities(story, region, scorer.healthy_probs)
        at = np.unique(ev.setup_of[inside])
        evidence.update(where_weight=weight, n_in_region=int(inside.sum()), in_region=_counts_text(counts),
                        p_fail_in_region=float(1.0 - probs[at][:, list(CAME_UP)].sum(1).mean()) if at.size else None)
        if story.shift is not None and story.shift.metric in ev.metrics:
            m = ev.metrics[story.shift.metric]
            sel = inside & m.eligible
            evidence.update(metric=story.shift.metric,
                            median_shift_spreads=float(np.median(m.z[sel])) if sel.any() else None,
                            part_median=_median(ev.rows, story.shift.metric, m.eligible),
                            lot_median=float(np.median(m.median[m.eligible])) if m.eligible.any() else None)
    else:  # healthy: how far the part is from its lot at all
        evidence.update(in_all=_counts_text(ev.part_counts.sum(0)))
    if score.log_model is not None:
        evidence.update(model_recipe=story.recipe, model_weight=score.model_weight)
    evidence.update(_descriptive(ev, story.name))
    if story.name in (*STUCK_CAUSES, "weak_startup_slow"):
        evidence.update(margin)
    llr = None if nxt is None or not score.testable or not nxt.testable else _finite(
        score.log_likelihood - nxt.log_likelihood)
    return RankedHypothesis(story.name, story.title, posterior, story.prior, _finite(score.log_likelihood), llr,
                            score.testable, where, evidence, story.bench_check)


def _median(rows: pd.DataFrame, column: str, mask=None) -> float | None:
    v = pd.to_numeric(rows[column], errors="coerce")
    if mask is not None:
        v = v[np.asarray(mask, bool)]
    v = v.dropna()
    return float(v.median()) if len(v) else None


def _fraction_by(rows: pd.DataFrame, key: str) -> dict:
    if key not in rows.columns or rows[key].notna().sum() == 0:
        return {}
    return {f"{k:g}": float(v) for k, v in (rows["verdict"] == STUCK).groupby(rows[key]).mean().items()}


def _descriptive(ev: PartEvidence, name: str) -> dict:
    """Plain numbers a bench engineer checks first for each story (not part of the likelihood)."""
    rows = ev.rows
    if name == "slow_ramp_miss":
        return {"stuck_fraction_by_ramp_s": _fraction_by(rows, "ramp_s")}
    if name in ("cold_only_stuck", "hot_only_stuck"):
        return {"stuck_fraction_by_temperature_c": _fraction_by(rows, "temperature_c")}
    if name == "dead_everywhere" and "isupply_final_a" in rows.columns:
        stuck_i = _median(rows, "isupply_final_a", rows["verdict"] == STUCK)
        lot_i = _median(ev.lot_rows, "isupply_final_a", ev.lot_rows["verdict"] == "started") \
            if "isupply_final_a" in ev.lot_rows.columns else None
        # Below 1 % of the lot's running current the core and its startup draw nothing (leakage level).
        return {"stuck_isupply_a": stuck_i, "lot_isupply_a": lot_i,
                "isupply_at_leakage": None if stuck_i is None or not lot_i else bool(stuck_i < 0.01 * lot_i)}
    if name == "fixture_supply_invalid" and "vsupply_final_v" in rows.columns:
        return {"n_no_supply": int((rows["verdict"] == "no_supply").sum()),
                "vsupply_final_v": _median(rows, "vsupply_final_v"),
                "lot_vsupply_final_v": _median(ev.lot_rows, "vsupply_final_v")
                if "vsupply_final_v" in ev.lot_rows.columns else None}
    return {}


def _escape_margin(model: ModelEvidence, rows: pd.DataFrame) -> dict:
    """The design's startup current and the model's minimum escape current at the part's temperatures."""
    if "temperature_c" not in rows.columns or not model.i_start_min_a:
        return {}
    temps = sorted(set(pd.to_numeric(rows["temperature_c"], errors="coerce").dropna()))
    return {"model_i_start_a": model.i_start_a,
            "model_i_start_min_a_by_temperature_c": {f"{t:g}": plain(model.i_start_min_a.get(float(t)))
                                                     for t in temps if float(t) in model.i_start_min_a}}


def _deciding(ev: PartEvidence, first: StoryScore, second: StoryScore, healthy: StoryScore) -> dict:
    """The captures and set-ups whose plug-in log-probabilities favour the top story most over the
    runner-up, and (when the top is a fault) the captures that most set it apart from the healthy pattern."""
    delta = first.per_capture - second.per_capture
    conditions = []
    for k, s in enumerate(ev.setups):
        total = float(delta[ev.setup_of == k].sum())
        if abs(total) >= MIN_DECIDING_NATS:
            conditions.append({**ev.setup_dict(s), "condition_text": ev.describe(s),
                               "n_captures": int((ev.setup_of == k).sum()), "nats": round(total, 3)})
    conditions.sort(key=lambda c: -c["nats"])
    out = {"for": first.story.name, "against": second.story.name, "captures": _top_captures(ev, delta),
           "conditions": conditions}
    if first.story.name != HEALTHY:
        out["against_healthy"] = _top_captures(ev, first.per_capture - healthy.per_capture)
    return out


def _top_captures(ev: PartEvidence, delta: np.ndarray) -> list[dict]:
    """Up to N_DECIDING captures with the largest positive weight ``delta`` (nats), largest first."""
    rows = ev.rows.reset_index(drop=True)
    file_col = next((c for c in ("file", "source_path") if c in rows.columns), None)
    out = []
    for i in np.argsort(-delta)[:N_DECIDING]:
        if delta[i] < MIN_DECIDING_NATS:
            break
        rec = rows.iloc[int(i)]
        out.append({"capture_id": plain(rec.get("capture_id")), "file": plain(rec.get(file_col)) if file_col else None,
                    **ev.setup_dict(ev.setups[ev.setup_of[i]]),
                    "repeat": plain(rec.get("repeat")) if "repeat" in rows.columns else None,
                    "verdict": str(rec["verdict"]), "nats": round(float(delta[i]), 3)})
    return out


def _conclusion(ev: PartEvidence, hypotheses: tuple[RankedHypothesis, ...], llr: float | None) -> Conclusion:
    top, runner = hypotheses[0], hypotheses[1]
    if ev.n < 2 or ev.baseline_counts.sum() == 0:
        n_setups = len(ev.setups)
        return Conclusion("too_little_data", None,
                          f"too little data to name a cause: {ev.n} capture{'s' if ev.n != 1 else ''} at {n_setups} "
                          f"set-up{'s' if n_setups != 1 else ''} and {int(ev.baseline_counts.sum())} baseline captures "
                          f"of other parts there; ranking shown for what it is worth")
    lr = f"ln LR {llr:.1f} over {runner.name}" if llr is not None else f"runner-up {runner.name}"
    if top.name == HEALTHY and top.posterior >= MIN_CAUSE_POSTERIOR:
        failed = {v: n for v, n in ev.rows["verdict"].value_counts().items() if v != "started"}
        verb = "is" if sum(failed.values()) == 1 else "are"
        alone = (f"; the part's {', '.join(f'{n} {v}' for v, n in failed.items())} {verb} not enough to name a "
                 "cause against this baseline") if failed else ""
        return Conclusion("healthy", None, f"no hypothesis above the healthy pattern (posterior {top.posterior:.2f}; "
                                           f"next: {runner.name} at {runner.posterior:.2f}){alone}")
    if top.name == HEALTHY:
        return Conclusion("leading", None, f"nothing decided: the healthy pattern leads (posterior "
                                           f"{top.posterior:.2f}) before {runner.name} ({runner.posterior:.2f}): "
                                           "see the next experiment")
    if top.name == NO_FIT:
        named = next(h for h in hypotheses if h.name not in (HEALTHY, NO_FIT))
        return Conclusion("no_fit", None, f"no hypothesis fits (posterior {top.posterior:.2f}); the nearest named "
                                          f"cause is {named.name} at {named.posterior:.2f}")
    if top.posterior >= MIN_CAUSE_POSTERIOR:
        return Conclusion("cause", top.name, f"{top.name}: {top.title}, {top.where} (posterior {top.posterior:.2f}; "
                                             f"{lr})")
    return Conclusion("leading", top.name, f"leading: {top.name}, {top.where} (posterior {top.posterior:.2f}), not yet "
                                           f"told apart from {runner.name} ({runner.posterior:.2f}): see the next "
                                           f"experiment")
