"""The next bench experiment: the condition and the number of power cycles that separate the top two.

Two rules, whichever needs fewer starts:

* **failure count.** Where the two stories predict different per-start probabilities p_hi > p_lo of
  one verdict (stuck at zero, a slow start, ringing, …, or any start that is not clean), repeat n
  starts and decide on the count K of starts with that verdict: the smallest n with a
  threshold k such that P(K ≥ k | p_hi) ≥ 95 % and P(K ≥ k | p_lo) ≤ 5 % (binomial). With p_lo = 0
  that is k = 1 and n ≥ ln 0.05 / ln(1 − p_hi): seeing no failure in n starts rules out a rate of
  p_hi at 95 % (the rule of three's generalisation; common practice, no source). p_lo is the lot's
  own failure rate at the set-up when one of the two is the healthy pattern.
* **value shift.** Where one story shifts a value by d spreads of the set-up and the other does not,
  each start adds d²/2 to the expected log-likelihood ratio (the Kullback–Leibler divergence of two
  normals one shift apart, the step of Wald's sequential probability ratio test, 1945, from memory):
  n = ⌈2·ln 19 / d²⌉ starts reach odds of 19 to 1 (95 %).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.stats import binom

from labtool.stats.triage.evidence import PartEvidence
from labtool.stats.triage.hypotheses import CATEGORIES
from labtool.stats.triage.likelihood import Scorer, StoryScore

CONFIDENCE = 0.95
MAX_CYCLES = 10_000
MIN_RATE_GAP = 0.02  # failure probabilities closer than this are not told apart by repeating
MIN_SHIFT_SPREADS = 1.0
MANY_CYCLES = 50  # beyond this, say that the matrix itself does not separate the two well


def cycles_to_see_a_failure(p: float, confidence: float = CONFIDENCE) -> int:
    """Power cycles n with P(at least one failure) ≥ confidence at per-start probability p:
    n ≥ ln(1 − c) / ln(1 − p)."""
    if not 0.0 < p <= 1.0:
        raise ValueError(f"p must be in (0, 1], not {p}")
    if p == 1.0:
        return 1
    return int(math.ceil(math.log(1.0 - confidence) / math.log1p(-p) - 1e-12))


def repeat_count(p_hi: float, p_lo: float, confidence: float = CONFIDENCE,
                 max_cycles: int = MAX_CYCLES) -> tuple[int, int] | None:
    """(n, k): the fewest starts n and failure threshold k that tell a per-start failure probability
    p_hi from p_lo < p_hi at ``confidence`` both ways; None when more than ``max_cycles`` are needed."""
    if not 0.0 <= p_lo < p_hi <= 1.0:
        raise ValueError(f"need 0 ≤ p_lo < p_hi ≤ 1 (got {p_lo}, {p_hi})")
    # Any threshold k ≥ 1 needs P(K ≥ 1 | p_hi) ≥ confidence first: start the search there.
    start = cycles_to_see_a_failure(p_hi, confidence)
    size = 256
    while start <= max_cycles:
        n = np.arange(start, min(start + size, max_cycles + 1))
        # smallest k with P(K ≥ k | p_lo) ≤ 1 − confidence
        k = binom.ppf(confidence, n, p_lo).astype(int) + 1
        ok = binom.sf(k - 1, n, p_hi) >= confidence
        if ok.any():
            i = int(np.argmax(ok))
            return int(n[i]), int(k[i])
        start, size = start + size, 2 * size
    return None


@dataclass(frozen=True)
class NextExperiment:
    separates: tuple[str, ...]
    kind: str  # "failure_count", "value_shift" or "none"
    condition: dict = field(default_factory=dict)  # the set-up to test (CELL_KEYS present)
    condition_text: str = ""
    outcome: str | None = None  # what is counted ("starts stuck at zero", …, "starts that are not clean")
    power_cycles: int | None = None
    failures_to_decide: int | None = None  # k: at least k such starts favour the story predicting more
    per_cycle_probability: dict = field(default_factory=dict)  # story → predicted probability of the outcome
    shift_spreads: float | None = None
    text: str = ""

    def to_json_dict(self) -> dict:
        return {"separates": list(self.separates), "kind": self.kind, "condition": dict(self.condition),
                "condition_text": self.condition_text, "outcome": self.outcome, "power_cycles": self.power_cycles,
                "failures_to_decide": self.failures_to_decide,
                "per_cycle_probability": {k: float(v) for k, v in self.per_cycle_probability.items()},
                "shift_spreads": self.shift_spreads, "text": self.text}


def _candidates(ev: PartEvidence) -> list[tuple]:
    """The part's set-ups, then the lot's whose temperature and ramp the part was tested at."""
    extra = [s for s in ev.lot_setups if s not in ev.setups]
    t_idx, r_idx = ev.axis_index(extra)
    known = [s for s, t, r in zip(extra, t_idx, r_idx)
             if ("temperature_c" not in ev.keys or t >= 0) and ("ramp_s" not in ev.keys or r >= 0)]
    return list(ev.setups) + known


OUTCOME_WORDS = {"no_supply": "starts without a valid supply", "stuck_at_zero": "starts stuck at zero",
                 "recollapse": "starts that fall back", "incomplete": "starts that do not settle",
                 "slow_start": "slow starts", "ringing": "ringing starts", "wrong_level": "starts at a wrong level"}


def _outcomes() -> list[tuple[str, list[int]]]:
    """Each failure verdict alone, then any start that is not a clean start."""
    started = CATEGORIES.index("started")
    single = [(OUTCOME_WORDS[c], [i]) for i, c in enumerate(CATEGORIES) if i != started]
    return single + [("starts that are not clean", [i for i in range(len(CATEGORIES)) if i != started])]


def choose(scorer: Scorer, first: StoryScore, second: StoryScore) -> NextExperiment:
    """The condition and count of starts that best separate ``first`` from ``second``."""
    ev = scorer.ev
    names = (first.story.name, second.story.name)
    setups = _candidates(ev)
    if not setups:
        return NextExperiment(names, "none", text="no set-up to propose: the part has no captures with conditions")
    q1, q2 = scorer.outcome_probabilities(first, setups), scorer.outcome_probabilities(second, setups)
    best = None  # (n, -gap, set-up index, k, outcome label, p1, p2)
    for label, cats in _outcomes():
        p1, p2 = q1[:, cats].sum(1), q2[:, cats].sum(1)
        for i, (a, b) in enumerate(zip(p1, p2)):
            hi, lo = max(a, b), min(a, b)
            if hi - lo < MIN_RATE_GAP:
                continue
            found = repeat_count(float(min(hi, 1.0)), float(max(lo, 0.0)))
            if found is not None and (best is None or (found[0], -(hi - lo)) < best[:2]):
                best = (found[0], -(hi - lo), i, found[1], label, float(a), float(b))
    s1, s2 = scorer.expected_shift(first, setups), scorer.expected_shift(second, setups)
    shift_best = None  # (n, -d, index, metric)
    for metric in sorted(set(s1) | set(s2)):
        d = np.abs(s1.get(metric, np.zeros(len(setups))) - s2.get(metric, np.zeros(len(setups))))
        i = int(np.argmax(d))
        if d[i] >= MIN_SHIFT_SPREADS:
            n = max(1, int(math.ceil(2.0 * math.log(CONFIDENCE / (1 - CONFIDENCE)) / d[i] ** 2)))
            if shift_best is None or (n, -d[i]) < shift_best[:2]:
                shift_best = (n, -float(d[i]), i, metric)
    if shift_best is not None and (best is None or shift_best[0] < best[0]):
        n, neg_d, i, metric = shift_best
        where = ev.describe(setups[i])
        starts = f"{n} more start{'s' if n > 1 else ''}"
        return NextExperiment(names, "value_shift", ev.setup_dict(setups[i]), where, power_cycles=n,
                              shift_spreads=-neg_d,
                              text=f"Capture {starts} at {where}: {names[0]} and {names[1]} differ there by about "
                                   f"{-neg_d:.0f} spreads of the lot in {metric}; {starts} reach odds of 19 to 1 "
                                   f"(n = 2·ln 19 / d²).")
    if best is None:
        return NextExperiment(names, "none", text=f"No single condition the lot was tested at tells {names[0]} from "
                                                  f"{names[1]}: both predict the same verdicts and values there; "
                                                  "widen the matrix (another temperature, ramp or supply).")
    n, _, i, k, label, a, b = best
    hi, lo = (0, 1) if a >= b else (1, 0)
    probs = (a, b)
    where = ev.describe(setups[i])
    if k == 1:
        decide = (f"one or more favours {names[hi]}; none in {n} rules it out at 95 % "
                  f"(n ≥ ln 0.05 / ln(1 − {probs[hi]:.3g}))")
    else:
        decide = f"{k} or more favour {names[hi]}, fewer favour {names[lo]}, each at 95 %"
    text = (f"Power-cycle the part {n} times at {where}, with full discharge between cycles, and count the {label}: "
            f"{names[hi]} predicts them in {probs[hi]:.1%} of cycles, {names[lo]} in {probs[lo]:.2%}; {decide}.")
    if n > MANY_CYCLES:
        text += (" No condition of the tested matrix separates them faster: a temperature or ramp time between the "
                 "tested ones, or beyond them, would.")
    return NextExperiment(names, "failure_count", ev.setup_dict(setups[i]), where, outcome=label, power_cycles=n,
                          failures_to_decide=k, per_cycle_probability={names[0]: a, names[1]: b}, text=text)
