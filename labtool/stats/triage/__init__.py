"""Triage of returned parts: one principled ranking of causes by posterior probability.

Each hypothesis (:mod:`.hypotheses`) is a generative story of the part's captures against its lot at
the same set-ups (:mod:`.evidence`); its marginal likelihood (:mod:`.likelihood`), from documented
pattern models and, with a design file, from the startup model's failure recipes
(:mod:`.model_backing`), times its prior gives the posterior over the stories, a healthy pattern and
an explicit "no hypothesis fits". The next experiment (:mod:`.next_experiment`) is the condition and
count of power cycles that best separate the top two. docs/triage.md has the priors, the pattern
models, the likelihood and the next-experiment rule.
"""

from labtool.stats.triage.hypotheses import CAUSES, HEALTHY, NO_FIT, STORIES, STORY, STUCK_CAUSES
from labtool.stats.triage.inputs import load_resolution
from labtool.stats.triage.model_backing import ModelEvidence, model_evidence, model_setup, record_windows
from labtool.stats.triage.next_experiment import cycles_to_see_a_failure, repeat_count
from labtool.stats.triage.parts import returned_parts, split_part
from labtool.stats.triage.rank import triage
from labtool.stats.triage.result import Conclusion, RankedHypothesis, TriageReport

__all__ = ["CAUSES", "HEALTHY", "NO_FIT", "STORIES", "STORY", "STUCK_CAUSES", "Conclusion", "ModelEvidence",
           "RankedHypothesis", "TriageReport", "cycles_to_see_a_failure", "load_resolution", "model_evidence",
           "model_setup", "record_windows", "repeat_count", "returned_parts", "split_part", "triage"]
