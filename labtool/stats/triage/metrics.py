"""The continuous values triage weighs, their baselines' widening and each capture's resolution floor.

A value is compared only with the lot's values at the same set-up. Its spread there is the robust
scale of the baseline (MAD/0.6745, labtool.stats.outliers.robust_location_scale) when it has at least
:data:`MIN_BASELINE` captures (Student t with n − 1 degrees of freedom). Below that the baseline is
"too small" and the spread is widened: a documented prior spread with :data:`PRIOR_DOF` degrees of
freedom is combined with the baseline's own, (ν0·σ0² + (n − 1)·s²)/(ν0 + n − 1), with ν0 + n − 1
degrees of freedom (the conjugate normal update of a scaled inverse-χ² prior on the variance; Gelman
et al., Bayesian Data Analysis, 3rd ed., §3.3, from memory). On top, in quadrature, comes the
capture's own resolution: what its noise and code step let a measurement tell apart (docs/triage.md).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from labtool.measure.levels import noise_rms, subsample
from labtool.measure.startup import TAIL_FRACTION
from labtool.stats.outliers import robust_location_scale

MIN_BASELINE = 5  # captures of other parts at a set-up before its spread is taken from them alone
PRIOR_DOF = 4.0  # the prior spread is known to about a factor of two (labtool's choice)
# With one or two baseline captures the location itself may be a faulty part's (a median needs three
# to outvote one): the healthy density is then mixed with weight 0.1 with a broad shift (labtool's choice).
CONTAMINATION = 0.1
MEDIAN_RESISTS = 3
# A capture read without its waveform is taken as an 8-bit record with its level at half of full scale:
# one code is 1/128 of the level (bench scopes are typically 8-bit: common practice, no source).
DEFAULT_CODES_PER_LEVEL = 128.0


@dataclass(frozen=True)
class CaptureResolution:
    """Noise (rms) and code step of a capture's output and supply channels, its sample interval."""

    out_noise_v: float
    out_step_v: float
    supply_noise_v: float
    supply_step_v: float
    dt_s: float
    n_samples: int

    @staticmethod
    def from_arrays(t_s: np.ndarray, supply_v: np.ndarray, output_v: np.ndarray) -> "CaptureResolution":
        """Measured on the record itself (labtool.measure.levels: noise from first differences, code step
        from the grid of values)."""
        t, s, o = (np.asarray(a, dtype=np.float64) for a in (t_s, supply_v, output_v))
        keep = np.isfinite(t) & np.isfinite(s) & np.isfinite(o)
        t, s, o = t[keep], s[keep], o[keep]
        dt = float(np.median(np.diff(t))) if t.size > 1 else 0.0
        return CaptureResolution(noise_rms(o), code_step(o), noise_rms(s), code_step(s), dt, int(t.size))

    @staticmethod
    def assumed(vout_v: float | None, vsupply_v: float | None, dt_s: float | None, n_samples: int | None
                ) -> "CaptureResolution":
        """Without the waveform: one code of an 8-bit record at half scale, no noise beyond it."""
        level = abs(vout_v) if vout_v is not None and math.isfinite(vout_v) else 0.0
        supply = abs(vsupply_v) if vsupply_v is not None and math.isfinite(vsupply_v) else 0.0
        return CaptureResolution(0.0, level / DEFAULT_CODES_PER_LEVEL, 0.0, supply / DEFAULT_CODES_PER_LEVEL,
                                 float(dt_s or 0.0), int(n_samples or 0))

    def _tail(self) -> float:
        return max(1.0, TAIL_FRACTION * self.n_samples)

    def floor(self, metric: str, row) -> float:
        """The smallest difference of ``metric`` this capture resolves (same unit as the metric)."""
        level = abs(_num(row.get("vout_final_v")))
        out_res = max(self.out_step_v, self.out_noise_v)
        if metric == "vout_final_v":  # a level from the tail's histogram mode: a code, or the tail's noise mean
            return max(self.out_step_v, self.out_noise_v / math.sqrt(self._tail()))
        if metric == "vsupply_final_v":
            return max(self.supply_step_v, self.supply_noise_v / math.sqrt(self._tail()))
        if metric == "overshoot_pct":  # a peak above the final level: one code or one noise sigma of the step
            return 100.0 * out_res / level if level > 0 else 0.0
        if metric == "delay_s":  # a crossing instant: a sample, or the level's resolution over the edge's slope
            rise = _num(row.get("rise_s"))
            slope_limited = out_res * rise / (0.8 * level) if level > 0 and math.isfinite(rise) else 0.0
            return max(self.dt_s, slope_limited)
        raise KeyError(metric)


def code_step(v: np.ndarray) -> float:
    """The finest difference a record can show: the smallest gap between its distinct values (an ADC
    code, or the last digit of an export); about 0 for an unquantised record."""
    values = np.unique(subsample(np.asarray(v, dtype=np.float64)))
    if values.size < 2:
        return 0.0
    gaps = np.diff(values)
    gaps = gaps[gaps > 1e-9 * (values[-1] - values[0])]  # float rounding of one code is not a second code
    return float(gaps.min()) if gaps.size else 0.0


def _num(value) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        return math.nan
    return v


@dataclass(frozen=True)
class Metric:
    """A continuous value: which verdicts carry it and its prior spread for a small baseline."""

    column: str
    verdicts: frozenset
    prior_spread: Callable[[float, float], float]  # (baseline median, ramp_s or 0) → spread
    unit: str


# Prior spreads (labtool's choice, docs/triage.md): for a delay a quarter of its positive part (the
# time a start takes after the supply is valid spreads by tens of per cent between parts) plus 3 % of
# the ramp time (where a part comes up during the ramp, the supply it needs differs by a few per
# cent between parts); one percentage point plus a quarter of the overshoot; 1 % of a reference or
# supply level (an untrimmed bandgap spreads by about ±1 %). All common practice, no source.
METRICS: tuple[Metric, ...] = (
    Metric("delay_s", frozenset({"started", "slow_start", "ringing"}),
           lambda mu, ramp: 0.25 * max(mu, 0.0) + 0.03 * ramp, "s"),
    Metric("overshoot_pct", frozenset({"started", "slow_start", "ringing", "wrong_level"}),
           lambda mu, ramp: 1.0 + 0.25 * abs(mu), "%"),
    Metric("vout_final_v", frozenset({"started", "slow_start", "ringing", "wrong_level"}),
           lambda mu, ramp: 0.01 * abs(mu), "V"),
    Metric("vsupply_final_v", frozenset({"started", "slow_start", "ringing", "wrong_level", "stuck_at_zero",
                                         "recollapse", "incomplete", "no_supply"}),
           lambda mu, ramp: 0.01 * abs(mu), "V"),
)
METRIC = {m.column: m for m in METRICS}


@dataclass(frozen=True)
class Spread:
    """The lot's value of one metric at one set-up: location, spread, degrees of freedom, size."""

    median: float
    scale: float
    dof: float
    n: int

    @property
    def contamination(self) -> float:
        return CONTAMINATION if self.n < MEDIAN_RESISTS else 0.0


def baseline_spread(values: np.ndarray, metric: Metric, ramp_s: float | None) -> Spread | None:
    """Robust location and scale of the baseline values, widened when there are fewer than MIN_BASELINE."""
    v = np.asarray(values, dtype=np.float64)
    v = v[np.isfinite(v)]
    if v.size == 0:
        return None
    med, scale = robust_location_scale(v)
    if v.size >= MIN_BASELINE:
        return Spread(med, scale, float(v.size - 1), int(v.size))
    ramp = ramp_s if ramp_s is not None and math.isfinite(ramp_s) else 0.0
    prior = metric.prior_spread(med, ramp)
    dof = PRIOR_DOF + v.size - 1
    return Spread(med, math.sqrt((PRIOR_DOF * prior ** 2 + (v.size - 1) * scale ** 2) / dof), dof, int(v.size))


def total_scale(spread: Spread, floor: float) -> float:
    """Predictive spread of one new value: the baseline's scale with its own uncertainty (1 + 1/n), and
    the capture's resolution floor, in quadrature; never exactly zero."""
    tau = math.sqrt(spread.scale ** 2 * (1.0 + 1.0 / spread.n) + floor ** 2)
    return max(tau, 1e-9 * abs(spread.median), 1e-300)
