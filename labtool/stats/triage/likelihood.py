"""The marginal likelihood of each story given a part's captures, its pieces per capture, its predictions.

For a story with regions (hypotheses.Story.regions) the likelihood is summed over the regions with
their prior weights; inside a region the part's captures share one unknown vector of verdict
probabilities (Dirichlet-multinomial), and the story's shifted value follows the shift density;
outside, the part behaves as its lot at each set-up. A story with a model recipe and a Monte Carlo
(:mod:`.model_backing`) is an even mixture of that and the model's own prediction.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from labtool.stats.triage.densities import healthy_probabilities, log_dm, log_healthy, log_t, logsumexp
from labtool.stats.triage.evidence import PartEvidence
from labtool.stats.triage.hypotheses import CATEGORIES, HEALTHY, NO_FIT, Story
from labtool.stats.triage.model_backing import MODEL_METRICS, ModelEvidence, model_setup
from labtool.units import format_si

MODEL_SMOOTHING = 0.5  # added to each category's Monte Carlo count: the model is not silicon
MODEL_SHIFT_UNCERTAINTY = 0.5  # the model's shift is known to about half its size (labtool's choice)


@dataclass(frozen=True)
class Region:
    """Where a fault shows: a side of the tested temperatures times a side of the tested ramp times."""

    temp: tuple[str, int]  # ("all", 0), ("cold", e): the e coldest, ("hot", e): from the e-th up
    ramp: tuple[str, int]  # ("all", 0), ("fast", e): the e fastest, ("slow", e): from the e-th on
    prior: float

    def contains(self, t_idx: np.ndarray, r_idx: np.ndarray) -> np.ndarray:
        return _side(self.temp, t_idx) & _side(self.ramp, r_idx)

    def text(self, temps: list[float], ramps: list[float]) -> str:
        """``at or below -40 °C on ramps of 100 ms and slower``; ``at every set-up``."""
        (tk, te), (rk, re) = self.temp, self.ramp
        words = []
        if tk == "cold":
            words.append(f"at or below {temps[te - 1]:g} °C")
        elif tk == "hot":
            words.append(f"at or above {temps[te]:g} °C")
        if rk == "fast":
            words.append(f"on ramps of {format_si(ramps[re - 1], 's')} and faster")
        elif rk == "slow":
            words.append(f"on ramps of {format_si(ramps[re], 's')} and slower")
        return " ".join(words) or "at every set-up"


def _side(side: tuple[str, int], idx: np.ndarray) -> np.ndarray:
    kind, edge = side
    if kind == "all":
        return np.ones(idx.shape, bool)
    if kind in ("cold", "fast"):
        return (idx >= 0) & (idx < edge)
    return idx >= edge


def _options(low: str, high: str, n: int) -> list[tuple[tuple[str, int], float]]:
    """A side of one axis and its prior: "all" ½, each lower edge ¼/(n−1), each upper edge ¼/(n−1)
    (only "all" when fewer than two values were tested)."""
    if n < 2:
        return [(("all", 0), 1.0)]
    edges = [((low, e), 0.25 / (n - 1)) for e in range(1, n)] + [((high, e), 0.25 / (n - 1)) for e in range(1, n)]
    return [(("all", 0), 0.5)] + edges


def _edges(kind: str, options) -> list[tuple[tuple[str, int], float]]:
    """The options on one side of an axis, priors renormalised over them."""
    picked = [o for o in options if o[0][0] == kind]
    return [(side, 1.0 / len(picked)) for side, _ in picked]


def regions(family: str, n_temps: int, n_ramps: int) -> list[Region]:
    """The regions of a story's family over the tested temperatures and ramp times, priors summing to 1.

    ``cold``/``hot``: a temperature edge (uniform over the edges), times any side of the ramps (every
    ramp ½, a fast or a slow side ¼); ``slow``: a ramp edge times any side of the temperatures;
    ``rectangle``: any side of both.
    """
    temps, ramps = _options("cold", "hot", n_temps), _options("fast", "slow", n_ramps)
    if family == "all":
        return [Region(("all", 0), ("all", 0), 1.0)]
    if family in ("cold", "hot"):
        temps = _edges(family, temps)
    elif family == "slow":
        ramps = _edges("slow", ramps)
    elif family != "rectangle":
        raise ValueError(family)
    return [Region(t, r, pt * pr) for t, pt in temps for r, pr in ramps]


@dataclass
class StoryScore:
    """One story's likelihood on one part, with what is needed to explain and extend it."""

    story: Story
    log_likelihood: float
    testable: bool = True
    reason: str = ""
    regions: list[Region] = field(default_factory=list)
    region_log: np.ndarray = field(default_factory=lambda: np.zeros(0))  # ln prior + ln L per region
    log_pattern: float = -math.inf
    log_model: float | None = None
    per_capture: np.ndarray = field(default_factory=lambda: np.zeros(0))  # plug-in ln p per capture

    @property
    def model_weight(self) -> float | None:
        if self.log_model is None:
            return None
        return float(1.0 / (1.0 + math.exp(min(700.0, self.log_pattern - self.log_model))))

    def map_region(self) -> tuple[Region | None, float]:
        if not self.regions:
            return None, 0.0
        w = np.exp(self.region_log - logsumexp(self.region_log))
        k = int(np.argmax(w))
        return self.regions[k], float(w[k])


class Scorer:
    """Scores the stories on one part's evidence (and, when given, the model's Monte Carlo)."""

    def __init__(self, ev: PartEvidence, model: ModelEvidence | None = None):
        self.ev = ev
        self.model = model
        self.t_idx, self.r_idx = ev.axis_index([ev.setups[i] for i in ev.setup_of])
        self.st_idx, self.sr_idx = ev.axis_index(ev.setups)
        self.healthy_probs = np.array([healthy_probabilities(c) for c in ev.baseline_counts]) \
            if len(ev.setups) else np.zeros((0, len(CATEGORIES)))
        self.cont_healthy = np.zeros(ev.n)
        for m in ev.metrics.values():
            self.cont_healthy += m.log_healthy
        self.disc_healthy = np.log(self.healthy_probs[ev.setup_of, ev.category]) if ev.n else np.zeros(0)
        self._merged_cache: dict[str, np.ndarray] = {}

    # -- the likelihoods -------------------------------------------------------------------
    def score(self, story: Story) -> StoryScore:
        if story.name == HEALTHY:
            return StoryScore(story, float(self.ev.log_healthy_setup.sum() + self.cont_healthy.sum()),
                              per_capture=self.disc_healthy + self.cont_healthy)
        if story.name == NO_FIT:
            return self._no_fit(story)
        regs = regions(story.regions, len(self.ev.temps), len(self.ev.ramps))
        if not regs:
            axis = "temperatures" if story.regions in ("cold", "hot") else "ramp times"
            return StoryScore(story, -math.inf, testable=False,
                              reason=f"needs captures at two or more {axis} (one start is the pattern's edge)")
        logs = np.array([math.log(r.prior) + self._region_log(story, r) for r in regs])
        log_pattern = float(logsumexp(logs))
        score = StoryScore(story, log_pattern, regions=regs, region_log=logs, log_pattern=log_pattern)
        model = self._model_log(story)
        if model is not None:
            log_model, model_per_capture = model
            score.log_model = log_model
            score.log_likelihood = float(np.logaddexp(log_pattern, log_model) - math.log(2.0))
        score.per_capture = (model_per_capture if model is not None and score.model_weight > 0.5
                             else self._region_per_capture(story, score.map_region()[0]))
        return score

    def _merged_healthy(self, story: Story) -> np.ndarray:
        """Per set-up, ln P(the part's captures fall in the story's verdicts or in which other one | healthy)."""
        key = story.name
        if key not in self._merged_cache:
            ev = self.ev
            self._merged_cache[key] = np.array([log_healthy(ev.part_counts[i], ev.baseline_counts[i], story.relevant)
                                                for i in range(len(ev.setups))])
        return self._merged_cache[key]

    def _in_region(self, story: Story, inside: np.ndarray) -> np.ndarray:
        """Counts of the story's verdicts among the captures inside the region."""
        return np.bincount(self.ev.category[inside], minlength=len(CATEGORIES)).astype(float)[story.relevant]

    def _region_log(self, story: Story, region: Region) -> float:
        ev = self.ev
        inside = region.contains(self.t_idx, self.r_idx)
        setup_in = region.contains(self.st_idx, self.sr_idx)
        disc = (float(log_dm(self._in_region(story, inside), story.alpha_vector))
                + float(self._merged_healthy(story)[setup_in].sum()) + float(ev.log_healthy_setup[~setup_in].sum()))
        cont = float(self.cont_healthy.sum())
        if story.shift is not None and story.shift.metric in ev.metrics:
            m = ev.metrics[story.shift.metric]
            cont += float((m.log_shift(story.shift.sign) - m.log_healthy)[inside].sum())
        return disc + cont

    def region_probabilities(self, story: Story, region: Region, setup_probs: np.ndarray) -> np.ndarray:
        """Per-category probability of one more start inside the region, at set-ups whose healthy
        probabilities are ``setup_probs`` (set-up, category): the story's verdicts share what the
        others (at the lot's rate) leave."""
        counts = self._in_region(story, region.contains(self.t_idx, self.r_idx))
        alpha = story.alpha_vector
        q = (alpha + counts) / (alpha.sum() + counts.sum())
        rel = story.relevant
        out = np.where(rel, 0.0, setup_probs)
        out[:, rel] = (1.0 - out.sum(1, keepdims=True)) * q
        return out

    def _region_per_capture(self, story: Story, region: Region) -> np.ndarray:
        ev = self.ev
        inside = region.contains(self.t_idx, self.r_idx)
        probs = self.region_probabilities(story, region, self.healthy_probs[ev.setup_of])
        disc = np.where(inside, np.log(probs[np.arange(ev.n), ev.category]), self.disc_healthy)
        cont = self.cont_healthy.copy()
        if story.shift is not None and story.shift.metric in ev.metrics:
            m = ev.metrics[story.shift.metric]
            cont += np.where(inside, m.log_shift(story.shift.sign) - m.log_healthy, 0.0)
        return disc + cont

    def _no_fit(self, story: Story) -> StoryScore:
        ev = self.ev
        counts = np.bincount(ev.category, minlength=len(CATEGORIES)).astype(float)
        cont = np.zeros(ev.n)
        for m in ev.metrics.values():
            cont += np.where(m.eligible, np.logaddexp(m.log_healthy, m.log_shift(0)) - math.log(2.0), 0.0)
        alpha = story.alpha_vector  # every verdict is relevant here
        q = (alpha + counts) / (alpha.sum() + counts.sum())
        return StoryScore(story, float(log_dm(counts, alpha) + cont.sum()),
                          regions=[Region(("all", 0), ("all", 0), 1.0)], region_log=np.zeros(1),
                          per_capture=np.log(q[ev.category]) + cont)

    def _model_cells(self, recipe: str) -> list:
        return [self.model.cell(recipe, model_setup(self.ev.setup_dict(s))) for s in self.ev.setups]

    def _model_log(self, story: Story) -> tuple[float, np.ndarray] | None:
        """ln P(captures | the model's recipe) and its per-capture pieces; None without a Monte Carlo."""
        if self.model is None or story.recipe is None:
            return None
        ev = self.ev
        cells = self._model_cells(story.recipe)
        if all(c is None for c in cells):
            return None
        disc_total, disc = 0.0, self.disc_healthy.copy()
        for i, c in enumerate(cells):
            at = ev.setup_of == i
            if c is None:
                disc_total += float(ev.log_healthy_setup[i])
                continue
            alpha = np.asarray(c.counts) + MODEL_SMOOTHING
            disc_total += float(log_dm(ev.part_counts[i], alpha))
            q = (alpha + ev.part_counts[i]) / (alpha.sum() + ev.part_counts[i].sum())
            disc[at] = np.log(q[ev.category[at]])
        cont = self.cont_healthy.copy()
        for name in MODEL_METRICS:
            if name not in ev.metrics:
                continue
            m = ev.metrics[name]
            for j in np.flatnonzero(m.eligible):
                s = ev.setups[ev.setup_of[j]]
                shifted = self.model.shift(story.recipe, model_setup(ev.setup_dict(s)), name)
                if shifted is None:
                    # the model does not see the part come up here: its values are not predicted
                    new = float(m.log_shift(0)[j]) if cells[ev.setup_of[j]] is not None else float(m.log_healthy[j])
                else:
                    shift, spread = shifted
                    tau = math.sqrt(m.tau[j] ** 2 + spread ** 2 + (MODEL_SHIFT_UNCERTAINTY * shift) ** 2)
                    new = float(log_t(m.x[j], m.median[j] + shift, tau, m.dof[j]))
                cont[j] += new - m.log_healthy[j]
        return disc_total + float(cont.sum()), disc + cont

    # -- predictions at other set-ups --------------------------------------------------------
    def outcome_probabilities(self, score: StoryScore, setups: list[tuple]) -> np.ndarray:
        """(set-up, category): the story's probability of each verdict for one more start at each set-up."""
        ev = self.ev
        base = np.array([healthy_probabilities(ev.lot_setups.get(s, np.zeros(len(CATEGORIES)))) for s in setups])
        name = score.story.name
        if name == HEALTHY:
            return base
        if name == NO_FIT:
            counts_all = np.bincount(ev.category, minlength=len(CATEGORIES)).astype(float)
            alpha = score.story.alpha_vector
            return np.broadcast_to((alpha + counts_all) / (alpha.sum() + counts_all.sum()), base.shape).copy()
        t_idx, r_idx = ev.axis_index(setups)
        w = np.exp(score.region_log - logsumexp(score.region_log))
        pattern = np.zeros(base.shape)
        for weight, region in zip(w, score.regions):
            inside = region.contains(t_idx, r_idx)[:, None]
            pattern += weight * np.where(inside, self.region_probabilities(score.story, region, base), base)
        mw = score.model_weight
        if not mw:
            return pattern
        model = base.copy()
        for k, s in enumerate(setups):
            cell = self.model.cell(score.story.recipe, model_setup(ev.setup_dict(s)))
            if cell is not None:
                part = ev.part_counts[ev.setups.index(s)] if s in ev.setups else np.zeros(len(CATEGORIES))
                alpha = np.asarray(cell.counts) + MODEL_SMOOTHING + part
                model[k] = alpha / alpha.sum()
        return (1.0 - mw) * pattern + mw * model

    def expected_shift(self, score: StoryScore, setups: list[tuple]) -> dict[str, np.ndarray]:
        """Per shifted metric, the story's expected shift (in spreads of the set-up) at each set-up."""
        story, ev = score.story, self.ev
        if story.shift is None or story.shift.metric not in ev.metrics or not score.regions:
            return {}
        m = ev.metrics[story.shift.metric]
        t_idx, r_idx = ev.axis_index(setups)
        w = np.exp(score.region_log - logsumexp(score.region_log))
        out = np.zeros(len(setups))
        for weight, region in zip(w, score.regions):
            inside = region.contains(self.t_idx, self.r_idx) & m.eligible
            if inside.any():
                out += weight * float(np.median(m.z[inside])) * region.contains(t_idx, r_idx)
        return {story.shift.metric: out}
