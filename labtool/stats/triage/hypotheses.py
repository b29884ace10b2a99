"""The hypotheses of returned-part triage: each a generative story of the part's captures.

A story says, for every capture, how likely each verdict category is and how its continuous values
(delay, overshoot, level, supply level) sit against the same set-up's baseline. It has three parts
(docs/triage.md gives the numbers and why):

* **where** the fault shows (:attr:`Story.regions`): at every set-up, below or above a temperature
  edge, above a ramp-time edge, or anywhere in a rectangle of the temperature × ramp matrix; the
  edge is unknown and summed over;
* **what** the part does there: a Dirichlet over the verdict categories the story is about
  (:attr:`Story.alpha`, always with "started"), shared by all of the part's captures in the region
  (one part, one fault); verdicts the story is not about keep the lot's rate there, and outside the
  region the part behaves as its lot at the same set-up;
* for the continuous stories, which measured value is **shifted** there and in which direction.

Field notes on what each pattern means physically: GUIDE §4 and docs/triage.md (common practice,
no source). The ids in :data:`STORIES` are a contract of ``labtool triage --json``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import Mapping

import numpy as np

# Verdict categories of the likelihood: the measurement engine's verdicts (labtool.measure.verdict).
# A flagged start (slow_start, ringing, wrong_level) is a threshold of one continuous value against the
# engineer's limit; for such a capture the verdict stands for that value, which is then not weighed
# again (FLAG_METRIC), so one observation is never counted twice.
CATEGORIES = ("no_supply", "stuck_at_zero", "recollapse", "incomplete", "slow_start", "ringing", "wrong_level",
              "started")
CAME_UP = tuple(CATEGORIES.index(c) for c in ("slow_start", "ringing", "wrong_level", "started"))
FLAG_METRIC = {"slow_start": "delay_s", "ringing": "overshoot_pct", "wrong_level": "vout_final_v"}


def category_index(verdict) -> int:
    """A verdict this version does not know counts as "incomplete": it neither reached a level the
    shift models could weigh nor is it one of the failures the stories are about."""
    v = str(verdict)
    return CATEGORIES.index(v if v in CATEGORIES else "incomplete")

HEALTHY = "healthy_pattern"
NO_FIT = "no_hypothesis_fits"

# Region families: "all" (every set-up), "cold"/"hot" (below/above a temperature edge, every ramp),
# "slow" (ramps above a ramp-time edge, every temperature), "rectangle" (any of: every set-up, a cold
# or hot side, times every ramp, a fast or slow side; a nuisance for faults that can show anywhere).
REGION_FAMILIES = ("none", "all", "cold", "hot", "slow", "rectangle")


@dataclass(frozen=True)
class Shift:
    """A continuous value the fault moves, in units of the set-up's spread: ``sign`` +1 up, −1 down, 0 either."""

    metric: str
    sign: int


@dataclass(frozen=True)
class Story:
    name: str
    title: str
    prior: float
    regions: str  # one of REGION_FAMILIES
    alpha: Mapping[str, float] = field(default_factory=dict, hash=False)  # Dirichlet inside the region

    @cached_property
    def relevant(self) -> np.ndarray:
        """Mask over CATEGORIES of the verdicts the story is about."""
        return np.array([c in self.alpha for c in CATEGORIES])

    @cached_property
    def alpha_vector(self) -> np.ndarray:
        """Dirichlet parameters of the relevant verdicts, in CATEGORIES order."""
        return np.array([self.alpha[c] for c in CATEGORIES if c in self.alpha], dtype=np.float64)
    shift: Shift | None = None
    recipe: str | None = None  # labtool.model.scenarios recipe whose Monte Carlo backs the story
    bench_check: str = ""


def _alpha(no_supply=0.0, stuck=0.0, recollapse=0.0, incomplete=0.0, slow=0.0, ringing=0.0, wrong=0.0,
           started=1.0) -> dict[str, float]:
    """The relevant verdicts' Dirichlet parameters (a zero leaves the verdict at the lot's rate)."""
    values = (no_supply, stuck, recollapse, incomplete, slow, ringing, wrong, started)
    return {c: float(a) for c, a in zip(CATEGORIES, values) if a > 0}


# Priors: a returned part is often found healthy ("no fault found"); 0.20 for that, 0.05 for a pattern
# none of the stories describes, 0.075 for each named cause (labtool's choice, docs/triage.md).
_CAUSE_PRIOR = 0.075

STORIES: tuple[Story, ...] = (
    Story(HEALTHY, "behaves as its lot at the same set-ups (no fault shown)", 0.20, "none"),
    Story("fixture_supply_invalid", "supply or fixture never valid", _CAUSE_PRIOR, "rectangle",
          _alpha(no_supply=4, stuck=2, recollapse=0.5, incomplete=0.5, wrong=0.3, started=1),
          Shift("vsupply_final_v", 0),
          bench_check="Measure the supply at the device pin with the scope while ramping; check the current limit, "
          "the socket contacts and the sense lines, re-seat the part and repeat one capture before judging the chip."),
    Story("dead_everywhere", "stuck at every ramp and temperature (startup path open, amplifier dead)", _CAUSE_PRIOR,
          "all", _alpha(stuck=20, recollapse=0.3, incomplete=0.3, started=0.3), recipe="startup_open",
          bench_check="With the output stuck, measure the supply current: at leakage level (nA) the core and startup "
          "draw nothing (startup path open or amplifier without bias). Then inject a small current into the "
          "reference node (external kick): starting and staying up means a startup fault, not a dead core."),
    Story("slow_ramp_miss", "stuck only on slow supply ramps (ramp-rate-dependent startup below its threshold)",
          _CAUSE_PRIOR, "slow", _alpha(stuck=8, recollapse=0.5, incomplete=0.5, slow=0.2, started=1),
          bench_check="Sweep the ramp time between the fastest failing and the slowest passing ramp to find the "
          "threshold; then start it on a slow ramp with an enable edge after the supply settles: a kick or one-shot "
          "startup that needs dV/dt shows exactly this threshold."),
    Story("cold_only_stuck", "stuck only cold (amplifier common-mode or threshold limit)", _CAUSE_PRIOR, "cold",
          _alpha(stuck=8, recollapse=0.5, incomplete=0.5, slow=0.2, started=1),
          bench_check="Step the temperature down from the coldest passing point in 5–10 °C steps at the failing "
          "ramp; a sharp edge points to the amplifier's input common-mode limit or a device threshold at zero current. "
          "Check whether a higher supply moves the edge."),
    Story("hot_only_stuck", "stuck only hot (leakage overcoming the startup current)", _CAUSE_PRIOR, "hot",
          _alpha(stuck=8, recollapse=0.5, incomplete=0.5, slow=0.2, started=1), recipe="hot_leaky_q1",
          bench_check="Step the temperature up from the hottest passing point; leakage roughly doubles every ~10 K, "
          "so a leakage-driven failure appears gradually. Measure the supply current at zero output hot and "
          "compare with a good part from the lot."),
    Story("falls_back", "starts then falls back (startup disengages early, or brown-out with a one-shot startup)",
          _CAUSE_PRIOR, "rectangle", _alpha(stuck=1, recollapse=4, incomplete=0.5, started=1),
          bench_check="Capture a longer record with the startup and supply currents; then dip the supply (brown-out) "
          "and recover it: a one-shot startup never re-fires. Compare the disengage threshold with the level at "
          "which the core holds itself."),
    Story("bistable_intermittent", "intermittent across power cycles (bistable, near the escape threshold)",
          _CAUSE_PRIOR, "all", _alpha(stuck=1, recollapse=0.3, started=1),
          bench_check="Repeat power cycles at the worst set-up with full discharge between them and count the "
          "failures; a fraction between 0 and 1 confirms a bistable start near the escape threshold. An external "
          "kick should then start it every time."),
    Story("weak_startup_slow", "slow start far outside the lot (weak startup current)", _CAUSE_PRIOR, "rectangle",
          _alpha(stuck=0.5, incomplete=1, slow=4, started=4), Shift("delay_s", +1), recipe="starved_amplifier",
          bench_check="Measure the startup current on this part (or the delay vs supply ramp): "
          "delay ≈ C·ΔV/I_start, so a delay several times the lot's means a startup current several times "
          "weaker. Compare with a good part at the same set-up."),
    Story("excess_ringing", "ringing beyond the lot (excess startup current or low phase margin)", _CAUSE_PRIOR,
          "rectangle", _alpha(incomplete=0.5, ringing=4, started=4), Shift("overshoot_pct", +1),
          recipe="late_strong_pulldown",
          bench_check="Capture the output with a low-capacitance probe at two load capacitances and two ramp rates: "
          "overshoot growing with faster ramps points to excess startup current; ringing that changes with load "
          "points to low phase margin."),
    Story("level_fault", "wrong output level (core or trim fault)", _CAUSE_PRIOR, "rectangle",
          _alpha(wrong=4, started=4), Shift("vout_final_v", 0), recipe="trim_ratio_low",
          bench_check="Measure the settled output with a DMM at three temperatures and read back the trim code: a "
          "constant shift is a trim fault; a wrong temperature slope is a core fault (resistor ratio or diode area)."),
    Story(NO_FIT, "no hypothesis fits (a pattern none of these stories describes)", 0.05, "all",
          _alpha(1, 1, 1, 1, 1, 1, 1, 1),
          bench_check="Look at the traces of the deciding captures against the lot's; repeat the failing set-ups to "
          "see whether the pattern is stable before suspecting a combination of faults."),
)
STORY = {s.name: s for s in STORIES}
CAUSES = tuple(s.name for s in STORIES if s.name not in (HEALTHY, NO_FIT))
# Stories about a part that fails to reach or hold its level (the "stuck" causes).
STUCK_CAUSES = ("dead_everywhere", "slow_ramp_miss", "cold_only_stuck", "hot_only_stuck", "bistable_intermittent")
