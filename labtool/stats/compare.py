"""Measured lots against predictions, set-up by set-up for delays and with the part as the unit for
stuck at zero.

Within a group, predictions are matched to measured captures by the condition columns both tables
have (e.g. ramp_s, temperature_c); one value of those columns is one set-up of the comparison.
Captures with verdict ``no_supply`` say nothing about the chip and are left out.

Delays, within each matched set-up only (never pooled across set-ups): the measured delays are those
of the captures whose output came up and stayed (:mod:`labtool.stats.setups`). For the tests each
measured part contributes the median of its delays at the set-up: repeated starts of one part are not
independent samples, and the model has one delay per simulated part. Tests: two-sample
Kolmogorov–Smirnov (``scipy.stats.ks_2samp``) and Anderson–Darling k-sample (Scholz & Stephens, JASA
82, 1987; ``scipy.stats.anderson_ksamp``, midrank; its p-value is read from tables that end at 0.001
and 0.25, and a value at a table end is reported as the bound it is, ``ad_pvalue_bound``). A set-up
differs when either test is below ALPHA / (2·S), Bonferroni over the two tests and the S set-ups of
the group; the finding is the spread when the location shift is small against the predicted spread,
else the direction of the shift.

Stuck at zero, over parts: X of the group's N measured parts had a stuck start at a matched set-up.
The predicted probability π that a part is stuck at any of the set-ups it was measured at comes from
the simulated parts: with a ``sample`` column (the model's Monte Carlo, the same simulated part at
every set-up) s of M simulated parts are stuck at one of those set-ups; without it the set-ups are
taken as independent, π = 1 − Π(1 − p_set-up), with M the fewest rows of a set-up. The Monte Carlo's
own uncertainty is carried: π ~ Beta(s + ½, M − s + ½) (the Jeffreys posterior of a binomial count),
so under the prediction X is beta-binomial(N, s + ½, M − s + ½), and the exact two-sided p-value sums
the probabilities of every count no more likely than X (the rule of ``scipy.stats.binomtest``). Parts
measured at different set-ups get their own π; the test then uses their mean and the fewest simulated
parts (a binomial with the mean probability is wider than the exact Poisson-binomial: conservative).
"""

from __future__ import annotations

import warnings
from collections import Counter
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
import pandas as pd
from scipy import stats

from labtool.display import format_pvalue
from labtool.errors import UsageError
from labtool.stats.distributions import table_bound
from labtool.stats.predictions import NUMERIC_CONDITIONS, TEXT_CONDITIONS
from labtool.stats.setups import Quantiles, counted, delay_mask, quantiles
from labtool.stats.table import STUCK, groups, leading, part_units, plain, require_columns
from labtool.units import format_si

ALPHA = 0.05
# When the delay laws differ, the finding is the spread only if the location shift is small against
# the predicted spread (|shift| < _SHIFT_OF_IQR × the set-up's predicted IQR) and the spreads differ
# beyond _SPREAD_BAND; otherwise the direction of the shift (slower / faster).
_SHIFT_OF_IQR = 0.25
_SPREAD_BAND = (0.8, 1.25)
# scipy.stats.anderson_ksamp reads its p-value from tables between these (its documentation).
_AD_KSAMP_TABLE = (0.001, 0.25)
_JEFFREYS = 0.5


def _key(value):
    """Condition values as matching keys: floats to 9 significant digits (10us read from text vs 1e-05)."""
    if isinstance(value, (float, np.floating)):
        return None if np.isnan(value) else float(f"{value:.9g}")
    return None if value is None or value is pd.NA else str(value)


def match_columns(measurements: pd.DataFrame, predictions: pd.DataFrame, by: Sequence[str]) -> tuple[str, ...]:
    candidates = (*NUMERIC_CONDITIONS, *TEXT_CONDITIONS, *by)
    return tuple(dict.fromkeys(c for c in candidates if c in predictions.columns and c in measurements.columns))


def _cell_index(df: pd.DataFrame, cols: Sequence[str]) -> pd.Series:
    if not cols:
        return pd.Series([()] * len(df), index=df.index, dtype=object)
    return pd.Series([tuple(_key(v) for v in row) for row in df[list(cols)].itertuples(index=False)],
                     index=df.index, dtype=object)


def _iqr(x: np.ndarray) -> float | None:
    return float(np.subtract(*np.percentile(x, [75, 25]))) if x.size >= 2 else None


# The delay figures of a set-up comparison (a group row has them only when it holds one set-up).
DELAY_KEYS = ("measured_delay_n", "measured_delay_median_s", "measured_delay_p05_s", "measured_delay_p95_s",
              "predicted_delay_n", "predicted_delay_median_s", "predicted_delay_p05_s", "predicted_delay_p95_s",
              "measured_delay_iqr_s", "predicted_delay_iqr_s", "delay_shift_s", "delay_shift_iqr", "median_ratio",
              "spread_ratio", "ks_stat", "ks_pvalue", "ad_stat", "ad_pvalue", "ad_pvalue_bound")


@dataclass(frozen=True)
class SetupComparison:
    """One matched set-up: measured against predicted delays, and the stuck starts there."""

    setup: Mapping[str, object] = field(hash=False)
    n_measured: int
    n_parts: int
    n_predicted: int
    measured: Quantiles  # over the measured captures whose delay counts
    predicted: Quantiles
    measured_iqr_s: float | None
    predicted_iqr_s: float | None
    delay_shift_s: float | None  # median of the parts' delays − predicted median
    delay_shift_iqr: float | None  # the same in predicted IQRs
    spread_ratio: float | None  # IQR of the parts' delays / predicted IQR
    ks_stat: float | None
    ks_pvalue: float | None
    ad_stat: float | None
    ad_pvalue: float | None
    ad_pvalue_bound: str | None
    measured_n_stuck: int
    predicted_n_stuck: int
    finding: str

    @property
    def median_ratio(self) -> float | None:
        m, p = self.measured.median, self.predicted.median
        return m / p if m is not None and p is not None and m > 0 and p > 0 else None

    def delay_json(self) -> dict:
        m, p = self.measured, self.predicted
        return dict(zip(DELAY_KEYS, (m.n, m.median, m.p05, m.p95, p.n, p.median, p.p05, p.p95, self.measured_iqr_s,
                                     self.predicted_iqr_s, self.delay_shift_s, self.delay_shift_iqr, self.median_ratio,
                                     self.spread_ratio, self.ks_stat, self.ks_pvalue, self.ad_stat, self.ad_pvalue,
                                     self.ad_pvalue_bound)))

    def to_json_dict(self) -> dict:
        return {**{k: plain(v) for k, v in self.setup.items()}, "n_measured": self.n_measured,
                "n_parts": self.n_parts, "n_predicted": self.n_predicted, **self.delay_json(),
                "measured_n_stuck": self.measured_n_stuck, "predicted_n_stuck": self.predicted_n_stuck,
                "predicted_p_stuck": self.predicted_n_stuck / self.n_predicted if self.n_predicted else None,
                "finding": self.finding}

    def where(self) -> str:
        return ", ".join(_shown(k, v) for k, v in self.setup.items())


def _shown(key: str, value) -> str:
    if value is None:
        return f"{key} unknown"
    if key == "ramp_s":
        return f"ramp {format_si(value, 's')}"
    if key == "temperature_c":
        return f"{value:g} °C"
    if key == "vdd_v":
        return f"supply {format_si(value, 'V')}"
    return f"{key} {value}"


@dataclass(frozen=True)
class PartStuckTest:
    """Parts with a stuck start, measured against the predicted probability (see the module notes)."""

    n_parts: int
    n_parts_stuck: int
    predicted_n_parts: int  # simulated parts behind the prediction (M)
    predicted_n_parts_stuck: float  # s (a mean over the parts' set-ups when they differ)
    pvalue: float | None

    @property
    def predicted_p(self) -> float | None:
        return self.predicted_n_parts_stuck / self.predicted_n_parts if self.predicted_n_parts else None

    @property
    def expected(self) -> float:
        """The expected count of measured parts stuck under the prediction (posterior mean of π × N)."""
        return self.n_parts * (self.predicted_n_parts_stuck + _JEFFREYS) / (self.predicted_n_parts + 2 * _JEFFREYS)


def beta_binomial_pvalue(x: int, n: int, s: float, m: int) -> float:
    """Exact two-sided p-value of ``x`` of ``n`` against a probability known as ``s`` of ``m`` simulated
    parts: beta-binomial(n, s + ½, m − s + ½), summing every count no more likely than ``x``."""
    pmf = stats.betabinom.pmf(np.arange(n + 1), n, s + _JEFFREYS, m - s + _JEFFREYS)
    return float(min(1.0, pmf[pmf <= pmf[x] * (1 + 1e-7)].sum()))


class _Predicted:
    """The predictions of one comparison, by matched set-up, with simulated-part identity when known."""

    def __init__(self, predictions: pd.DataFrame, cols: tuple[str, ...]):
        pred = predictions.assign(stuck=predictions["stuck"].astype(bool), _cell=_cell_index(predictions, cols))
        self.by_cell = {cell: part for cell, part in pred.groupby("_cell", sort=False)}
        self.by_sample = None
        if "sample" in pred.columns and not pred["sample"].isna().any():
            self.by_sample = pred.pivot_table(index="sample", columns="_cell", values="stuck", aggfunc="max")

    def stuck_any(self, cells: frozenset) -> tuple[float, int]:
        """(s, M): simulated parts stuck at any of ``cells`` and how many were simulated there."""
        if self.by_sample is not None:
            both = self.by_sample[list(cells)].dropna()
            return float(both.astype(bool).any(axis=1).sum()), len(both)
        rates = [(self.by_cell[c]["stuck"].mean(), len(self.by_cell[c])) for c in cells]
        m = min(n for _, n in rates)
        return (1.0 - float(np.prod([1.0 - p for p, _ in rates]))) * m, m


def _part_stuck_test(rows: pd.DataFrame, cells: pd.Series, predicted: _Predicted) -> PartStuckTest:
    units = part_units(rows)
    frame = pd.DataFrame({"unit": units.to_numpy(), "cell": cells.to_numpy(),
                          "stuck": (rows["verdict"] == STUCK).to_numpy()})
    per_part = frame.groupby("unit").agg(cells=("cell", frozenset), stuck=("stuck", "any"))
    n, x = len(per_part), int(per_part["stuck"].sum())
    if not n:
        return PartStuckTest(0, 0, 0, 0.0, None)
    patterns = Counter(per_part["cells"])
    found = {cells: predicted.stuck_any(cells) for cells in patterns}
    m = min(mi for _, mi in found.values())
    if m == 0:
        return PartStuckTest(n, x, 0, 0.0, None)
    p_mean = sum(count * found[c][0] / found[c][1] for c, count in patterns.items()) / n
    s = p_mean * m
    s = round(s) if abs(s - round(s)) < 1e-9 else s
    return PartStuckTest(n, x, m, s, beta_binomial_pvalue(x, n, s, m))


def _part_delays(rows: pd.DataFrame) -> np.ndarray:
    """Each part's median delay over its counted captures at one set-up."""
    mask = delay_mask(rows)
    if not mask.any():
        return np.empty(0)
    d = pd.to_numeric(rows["delay_s"], errors="coerce").to_numpy(np.float64)[mask]
    return pd.Series(d).groupby(part_units(rows).to_numpy()[mask]).median().to_numpy()


def _delay_tests(a: np.ndarray, b: np.ndarray):
    if a.size < 2 or b.size < 2 or np.unique(np.concatenate([a, b])).size < 2:
        return None, None, None, None, None
    ks = stats.ks_2samp(a, b)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the table p-value is clipped; reported as a bound instead
        ad = stats.anderson_ksamp([a, b], variant="midrank")
    p = float(ad.pvalue)
    return float(ks.statistic), float(ks.pvalue), float(ad.statistic), p, table_bound(p, *_AD_KSAMP_TABLE)


def _compare_setup(setup: dict, rows: pd.DataFrame, pred: pd.DataFrame, n_setups: int) -> SetupComparison:
    parts = _part_delays(rows)
    pdel = counted(pred)
    ks_stat, ks_p, ad_stat, ad_p, ad_bound = _delay_tests(parts, pdel)
    centre = float(np.median(pdel)) if pdel.size else None
    scale = _iqr(pdel)
    shift = float(np.median(parts)) - centre if parts.size and centre is not None else None
    iqr_parts = _iqr(parts)
    c = dict(setup=setup, n_measured=len(rows), n_parts=int(part_units(rows).nunique()), n_predicted=len(pred),
             measured=quantiles(counted(rows)), predicted=quantiles(pdel), measured_iqr_s=_iqr(counted(rows)),
             predicted_iqr_s=scale, delay_shift_s=shift,
             delay_shift_iqr=shift / scale if shift is not None and scale else None,
             spread_ratio=iqr_parts / scale if iqr_parts is not None and scale else None,
             ks_stat=ks_stat, ks_pvalue=ks_p, ad_stat=ad_stat, ad_pvalue=ad_p, ad_pvalue_bound=ad_bound,
             measured_n_stuck=int((rows["verdict"] == STUCK).sum()), predicted_n_stuck=int(pred["stuck"].sum()))
    pvals = [p for p in (ks_p, ad_p) if p is not None]
    if not pvals:
        finding = "too_few_delays"
    elif min(pvals) >= ALPHA / (2 * n_setups):
        finding = "consistent"
    elif c["spread_ratio"] is not None and c["delay_shift_iqr"] is not None \
            and abs(c["delay_shift_iqr"]) < _SHIFT_OF_IQR and not _SPREAD_BAND[0] <= c["spread_ratio"] <= _SPREAD_BAND[1]:
        finding = "wider" if c["spread_ratio"] > 1 else "narrower"
    else:
        finding = "slower" if shift > 0 else "faster"
    return SetupComparison(**c, finding=finding)


_DELAY_FINDINGS = ("slower", "faster", "wider", "narrower")


@dataclass(frozen=True)
class Comparison:
    """One group: the stuck test over its parts and one :class:`SetupComparison` per matched set-up."""

    group: Mapping[str, object] = field(hash=False)
    match_columns: tuple[str, ...]
    n_measured: int
    n_unmatched: int
    n_predicted: int
    stuck: PartStuckTest
    measured_n_stuck: int  # stuck starts (captures)
    predicted_n_stuck: int  # stuck simulated (part, set-up) samples at the matched set-ups
    setups: tuple[SetupComparison, ...]
    finding: str
    findings: tuple[str, ...]
    finding_text: str

    def to_json_dict(self) -> dict:
        """The group row; delay figures only when the group holds exactly one set-up."""
        one = self.setups[0].delay_json() if len(self.setups) == 1 else dict.fromkeys(DELAY_KEYS)
        st = self.stuck
        return {"row": "group", **self.group, "match_columns": list(self.match_columns),
                "n_measured": self.n_measured, "n_unmatched": self.n_unmatched, "n_predicted": self.n_predicted,
                "n_setups": len(self.setups), **one,
                "measured_n_parts": st.n_parts, "measured_n_parts_stuck": st.n_parts_stuck,
                "measured_p_part_stuck": st.n_parts_stuck / st.n_parts if st.n_parts else None,
                "predicted_n_parts": st.predicted_n_parts, "predicted_n_parts_stuck": st.predicted_n_parts_stuck,
                "predicted_p_part_stuck": st.predicted_p, "stuck_pvalue": st.pvalue,
                "measured_n_stuck": self.measured_n_stuck,
                "measured_p_stuck": self.measured_n_stuck / self.n_measured if self.n_measured else None,
                "predicted_n_stuck": self.predicted_n_stuck,
                "predicted_p_stuck": self.predicted_n_stuck / self.n_predicted if self.n_predicted else None,
                "finding": self.finding, "findings": list(self.findings), "finding_text": self.finding_text}

    def setup_rows(self) -> list[dict]:
        return [{"row": "setup", **self.group, **s.to_json_dict()} for s in self.setups]

    def json_rows(self) -> list[dict]:
        return [self.to_json_dict(), *self.setup_rows()]


def _stuck_words(st: PartStuckTest) -> tuple[str | None, str]:
    p = format_pvalue(st.pvalue)
    said = (f"{st.n_parts_stuck} of {st.n_parts} parts with a stuck start vs {st.predicted_n_parts_stuck:.3g} of "
            f"{st.predicted_n_parts} simulated parts (exact beta-binomial p = {p})")
    if st.pvalue is not None and st.pvalue < ALPHA:
        more = st.n_parts_stuck > st.expected
        return ("more_stuck" if more else "less_stuck"), f"{'more' if more else 'fewer'} stuck than predicted: {said}"
    return None, f"stuck at zero: {said}"


def _delay_words(code: str, hits: Sequence[SetupComparison], total: int) -> str:
    shown = []
    for s in hits[:3]:
        if code in ("wider", "narrower"):
            what = f"×{s.spread_ratio:.3g} the predicted IQR"
        else:
            sign = "+" if s.delay_shift_s > 0 else "−"
            what = (f"{sign}{format_si(abs(s.delay_shift_s), 's')} (median {format_si(s.measured.median, 's')} vs "
                    f"{format_si(s.predicted.median, 's')})")
        shown.append(f"{s.where()}: {what}; KS p = {format_pvalue(s.ks_pvalue)}, "
                     f"AD p = {format_pvalue(s.ad_pvalue, s.ad_pvalue_bound)}")
    more = f"; and {len(hits) - 3} more" if len(hits) > 3 else ""
    word = {"slower": "slower", "faster": "faster", "wider": "delay spread wider", "narrower": "delay spread narrower"}
    return f"{word[code]} than predicted at {len(hits)} of {total} set-ups ({'; '.join(shown)}{more})"


def _compare_group(group: dict, rows: pd.DataFrame, predicted: _Predicted, cols: tuple[str, ...]) -> Comparison:
    rows = rows[rows["verdict"] != "no_supply"]
    cells = _cell_index(rows, cols)
    matched = cells.map(lambda c: c in predicted.by_cell).astype(bool).to_numpy()
    used, used_cells = rows[matched], cells[matched]
    setup_cells = sorted(set(used_cells), key=lambda c: tuple((v is None, v) for v in c))
    setups = tuple(_compare_setup(dict(zip(cols, cell)), used[(used_cells == cell).to_numpy()],
                                  predicted.by_cell[cell], len(setup_cells)) for cell in setup_cells)
    st = _part_stuck_test(used, used_cells, predicted)
    common = dict(group=group, match_columns=cols, n_measured=len(used), n_unmatched=int((~matched).sum()),
                  n_predicted=sum(s.n_predicted for s in setups), stuck=st,
                  measured_n_stuck=sum(s.measured_n_stuck for s in setups),
                  predicted_n_stuck=sum(s.predicted_n_stuck for s in setups), setups=setups)
    if not setups:
        where = ", ".join(f"{k}={v}" for k, v in group.items())
        return Comparison(**common, finding="no_prediction", findings=("no_prediction",),
                          finding_text=f"no prediction matches {where} on {', '.join(cols) or 'any condition'}")
    code, stuck_text = _stuck_words(st)
    found = [code] if code else []
    words = [stuck_text] if code else []
    for delay_code in _DELAY_FINDINGS:
        hits = [s for s in setups if s.finding == delay_code]
        if hits:
            found.append(delay_code)
            words.append(_delay_words(delay_code, hits, len(setups)))
    if not found:
        tested = sum(s.finding == "consistent" for s in setups)
        return Comparison(**common, finding="consistent", findings=("consistent",),
                          finding_text=f"consistent with prediction: delays at {tested} of {len(setups)} set-ups "
                                       f"tested, none differs; {stuck_text}")
    if not code:
        words.append(stuck_text)
    return Comparison(**common, finding=found[0], findings=tuple(found), finding_text="; ".join(words))


def compare(measurements: pd.DataFrame, predictions: pd.DataFrame, by: Sequence[str] = ("lot",)) -> list[Comparison]:
    """One :class:`Comparison` per group of ``by``."""
    if measurements.empty:
        raise UsageError("no measurements: run `labtool measure CAMPAIGN` first")
    require_columns(measurements, ["verdict"], "compare")
    if "delay_s" not in predictions.columns or "stuck" not in predictions.columns:
        raise UsageError("predictions need the columns delay_s and stuck")
    cols = match_columns(measurements, predictions, by)
    predicted = _Predicted(predictions, cols)
    return [_compare_group(g, rows, predicted, cols) for g, rows in groups(measurements, by, "--by")]


def comparison_table(comparisons: Sequence[Comparison]) -> pd.DataFrame:
    """Each group row followed by its set-up rows (column ``row``), lists comma-joined."""
    comparisons = list(comparisons)
    records = []
    for c in comparisons:
        for rec in c.json_rows():
            records.append({k: ",".join(map(str, v)) if isinstance(v, list) else v for k, v in rec.items()})
    first = ["row", *comparisons[0].group, *comparisons[0].match_columns] if comparisons else []
    return leading(pd.DataFrame.from_records(records), first)
