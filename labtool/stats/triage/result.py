"""What triage reports: the ranked hypotheses with posteriors, the conclusion, the deciding captures,
the next experiment. The JSON names are the ``labtool triage --json`` contract."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping

import pandas as pd

from labtool.stats.table import plain
from labtool.stats.triage.next_experiment import NextExperiment


def _plain(value):
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return plain(value)


@dataclass(frozen=True)
class RankedHypothesis:
    name: str
    title: str
    posterior: float
    prior: float
    log_likelihood: float | None  # None: not testable with these captures
    log_lr_to_next: float | None  # ln(L / L of the next-ranked), nats
    testable: bool
    where: str
    evidence: Mapping[str, object] = field(hash=False)
    bench_check: str = ""

    def to_json_dict(self) -> dict:
        return {"name": self.name, "title": self.title, "posterior": self.posterior, "prior": self.prior,
                "log_likelihood": self.log_likelihood, "log_lr_to_next": self.log_lr_to_next,
                "testable": self.testable, "where": self.where, "evidence": _plain(self.evidence),
                "bench_check": self.bench_check}


@dataclass(frozen=True)
class Conclusion:
    kind: str  # "cause", "leading", "healthy", "no_fit" or "too_little_data"
    cause: str | None
    text: str

    def to_json_dict(self) -> dict:
        return {"kind": self.kind, "cause": self.cause, "text": self.text}


@dataclass(frozen=True)
class TriageReport:
    part: str
    lot: str | None
    n_captures: int
    n_baseline: int
    verdicts: Mapping[str, int] = field(hash=False)
    hypotheses: tuple[RankedHypothesis, ...] = ()
    conclusion: Conclusion | None = None
    log_lr_to_runner_up: float | None = None
    deciding_evidence: Mapping[str, object] = field(default_factory=dict, hash=False)
    next_experiment: NextExperiment | None = None
    notes: tuple[str, ...] = ()
    model: Mapping[str, object] | None = field(default=None, hash=False)

    @property
    def top(self) -> RankedHypothesis:
        return self.hypotheses[0]

    def to_json_dict(self) -> dict:
        return {"part": self.part, "lot": self.lot, "n_captures": self.n_captures, "n_baseline": self.n_baseline,
                "verdicts": dict(self.verdicts), "conclusion": self.conclusion.to_json_dict(),
                "hypotheses": [h.to_json_dict() for h in self.hypotheses],
                "log_lr_to_runner_up": self.log_lr_to_runner_up,
                "deciding_evidence": _plain(self.deciding_evidence),
                "next_experiment": self.next_experiment.to_json_dict(), "notes": list(self.notes),
                "model": _plain(self.model) if self.model is not None else None}

    def to_dict(self) -> dict:
        """The ``labtool triage --json`` object (as :meth:`to_json_dict`)."""
        return self.to_json_dict()

    def to_frame(self) -> pd.DataFrame:
        """The ranked hypotheses, one row each (as :meth:`table`)."""
        return self.table()

    def table(self) -> pd.DataFrame:
        """One row per hypothesis, ranked: what the report's sheets show."""
        return pd.DataFrame([{"rank": i + 1, "name": h.name, "posterior": h.posterior,
                              "log_lr_to_next": h.log_lr_to_next, "title": h.title, "where": h.where,
                              "bench_check": h.bench_check} for i, h in enumerate(self.hypotheses)])

    def deciding_table(self, key: str = "captures") -> pd.DataFrame:
        """The captures that decided between the top two (``against_healthy``: that set the top fault apart
        from the healthy pattern), most decisive first."""
        return pd.DataFrame(list(self.deciding_evidence.get(key, [])))
