"""Startup metrics of one supply-ramp record: levels, reference instants, delay, rise, overshoot, settling.

Definitions (IEEE Std 181-2011 unless said otherwise; clause numbers from memory):

* state levels by the histogram method (§5.2): the start and the settled end of the record are each
  one state; ``vout_final_v`` / ``vsupply_final_v`` are the levels of the last 10 % of the record;
* reference levels (§5.3.3) at p % of the way from the initial to the final state level;
* crossing instants (§5.3.4) by linear interpolation, with hysteresis against noise;
* transition duration 10 %→90 % (§5.3.5) is ``rise_s``; overshoot (§5.4) is the largest
  post-transition excursion above the final level, in % of the state-level difference, taken on the
  block-averaged transition window so that white noise does not inflate it;
* ``t_supply_s``: the supply crosses its reference level (default 90 %); ``delay_s``: output's first
  90 % crossing minus ``t_supply_s``; ``settle_s``: from ``t_supply_s`` to the last entry into
  ±band % of the final level (bench practice, GUIDE §4); ``ramp_v_per_s``: supply 10–90 % slope;
  ``supply_at_start_v``: supply when the output crosses its 10 % level; ``vsupply_at_valid_v``: supply
  when the output crosses its 90 % level (on a slow ramp the output is up before the supply is valid,
  the delay is then set by the ramp, and this supply voltage is the figure that says how early).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from labtool.measure.crossings import MIN_DWELL, first_crossing, last_entry, value_at
from labtool.measure.decimate import block_means
from labtool.measure.levels import StateLevels, noise_rms, quantisation_step, segment_level, state_levels
from labtool.measure.limits import Limits

TAIL_FRACTION = 0.10  # the "settled end" of a record (labtool's choice)
HEAD_FRACTION = 0.02  # the start of a record, before anything moves (labtool's choice)
MIN_SEGMENT = 16
HYSTERESIS_SIGMAS = 6.0  # noise peaks beyond ±3σ are rare (normal distribution, common practice)
ZERO_SIGMAS = 10.0  # "indistinguishable from the starting level": within 10 noise sigmas
ZERO_FLOOR_OF_SUPPLY = 0.01  # ... or within 1 % of the supply (leakage follows the supply; our choice)
EXPECT_ZERO_FRACTION = 0.10  # with --expect: below 10 % of it is the zero state (issue #3)


@dataclass(frozen=True)
class SignalLevels:
    """What the level analysis found for one channel."""

    initial_v: float
    final_v: float
    noise_v: float
    step_v: float  # quantisation step, 0 when not quantised

    def hysteresis(self, amplitude_v: float) -> float:
        """Noise- and code-sized hysteresis, at most 10 % of the transition (so 10 % ± h/2 stays above 0)."""
        return min(max(HYSTERESIS_SIGMAS * self.noise_v, 2.0 * self.step_v), 0.1 * abs(amplitude_v))


@dataclass(frozen=True)
class StartupMetrics:
    """Everything measured before the fit and the verdict; instants (``*_at_s``) are on the record's time axis."""

    supply: SignalLevels | None  # None: no supply record (delay from another reference instant)
    output: SignalLevels
    t_supply_s: float | None
    supply_ref_v: float | None
    ramp_v_per_s: float | None
    supply_peak_v: float | None
    zero_threshold_v: float
    output_peak_v: float
    left_zero: bool
    final_is_zero: bool
    reference: StateLevels | None  # output low/high the 10/90 % levels are taken from
    t10_at_s: float | None
    t90_at_s: float | None
    delay_s: float | None
    rise_s: float | None
    supply_at_start_v: float | None
    vsupply_at_valid_v: float | None
    settle_at_s: float | None
    settle_s: float | None
    settled: bool
    tail_start_s: float
    record_end_s: float
    overshoot_pct: float | None
    peak_at_s: float | None
    window: tuple[int, int] | None  # sample range of the transition window (for the fit)


def held_levels(v: np.ndarray, dwell: int = MIN_DWELL) -> np.ndarray:
    """For each start k, the lowest of v[k:k+dwell]: the level the signal holds over those samples
    (a record shorter than ``dwell``: its samples)."""
    if v.size < dwell:
        return np.asarray(v, dtype=np.float64)
    held = v[: v.size - dwell + 1].copy()
    for k in range(1, dwell):
        np.minimum(held, v[k: v.size - dwell + 1 + k], out=held)
    return held


def sustained_max(v: np.ndarray, dwell: int = MIN_DWELL) -> float:
    """The highest level the signal holds for ``dwell`` consecutive samples (a spike is not a level)."""
    return float(held_levels(v, dwell).max())


def sustained_min(v: np.ndarray, dwell: int = MIN_DWELL) -> tuple[float, int]:
    """(lowest level the signal holds for ``dwell`` consecutive samples, index of its first sample)."""
    held = held_levels(-v, dwell)
    k = int(np.argmax(held))
    return -float(held[k]), k


def _head(v: np.ndarray, noise_v: float, step_v: float) -> np.ndarray:
    """The start of the record while the signal is still in its starting state.

    At most the first 2 % of the record, and only up to where the signal first moves more than the
    noise/code hysteresis away from its first samples: a record that starts on the supply ramp itself
    has no flat start, and the histogram of a ramp has no meaningful mode.
    """
    head = v[: max(MIN_SEGMENT, int(v.size * HEAD_FRACTION))]
    start = float(np.median(head[:MIN_SEGMENT]))
    moved = np.abs(head - start) > max(HYSTERESIS_SIGMAS * noise_v, 2.0 * step_v)
    end = int(np.argmax(moved)) if moved.any() else head.size
    return head[: max(MIN_SEGMENT, end)]


def signal_levels(v: np.ndarray) -> SignalLevels:
    n = v.size
    noise, step = noise_rms(v), quantisation_step(v)
    tail = v[n - max(MIN_SEGMENT, int(n * TAIL_FRACTION)):]
    return SignalLevels(initial_v=segment_level(_head(v, noise, step), step), final_v=segment_level(tail, step),
                        noise_v=noise, step_v=step)


@dataclass(frozen=True)
class SupplyMetrics:
    """What the supply record alone gives: its levels, reference instant and ramp rate."""

    levels: SignalLevels
    t_supply_s: float | None
    ref_v: float
    ramp_v_per_s: float | None
    peak_v: float


def supply_metrics(t: np.ndarray, supply: np.ndarray, limits: Limits) -> SupplyMetrics:
    """The supply's part of :func:`measure_startup`; records that share one supply share this."""
    levels = signal_levels(supply)
    kind, value = limits.supply_ref_level()
    sl = StateLevels(levels.initial_v, levels.final_v)
    ref_v = sl.reference(value) if kind == "fraction" else value
    h = levels.hysteresis(sl.amplitude_v)
    t_supply = first_crossing(t, supply, ref_v, h)
    if t_supply is None and supply[0] >= ref_v:
        t_supply = float(t[0])  # valid from the start of the record
    t10 = first_crossing(t, supply, sl.reference(0.1), h)
    t90 = first_crossing(t, supply, sl.reference(0.9), h)
    ramp = 0.8 * sl.amplitude_v / (t90 - t10) if t10 is not None and t90 is not None and t90 > t10 else None
    return SupplyMetrics(levels, t_supply, ref_v, ramp, sustained_max(supply))


def _zero_threshold(out: SignalLevels, supply_final_v: float, limits: Limits) -> float:
    if limits.expect_v is not None:  # the zero state is 0 V; "below 10 % of --expect" is absolute
        return EXPECT_ZERO_FRACTION * limits.expect_v
    return out.initial_v + max(ZERO_SIGMAS * out.noise_v, 3.0 * out.step_v, ZERO_FLOOR_OF_SUPPLY * abs(supply_final_v))


def _index(t: np.ndarray, instant: float) -> int:
    return int(np.searchsorted(t, instant))


def measure_startup(t: np.ndarray, supply: np.ndarray | None, output: np.ndarray, limits: Limits,
                    t_ref_s: float | None = None, supply_part: SupplyMetrics | None = None) -> StartupMetrics:
    """All startup metrics of one record (arrays already checked: same length, finite, t increasing).

    Without a supply record (``supply`` None) the delay and settling count from ``t_ref_s`` (the trigger
    instant, a given supply-valid instant or the enable edge), reported as ``t_supply_s``; the supply
    fields are None. With a supply record they count from ``t_ref_s`` when it is given (the enable edge of
    a capture whose supply is steady), else from the supply's reference crossing.
    ``supply_part``: :func:`supply_metrics` of this supply record, when already known.
    """
    out = signal_levels(output)
    if supply is None:
        sp = None
        sup, t_supply, supply_ref_v, ramp = None, t_ref_s, None, None
    else:
        sp = supply_metrics(t, supply, limits) if supply_part is None else supply_part
        sup, t_supply, supply_ref_v, ramp = sp.levels, sp.t_supply_s, sp.ref_v, sp.ramp_v_per_s
        if t_ref_s is not None:
            t_supply = t_ref_s
    zero_v = _zero_threshold(out, sup.final_v if sup is not None else 0.0, limits)
    peak_v = sustained_max(output)
    left_zero = peak_v > zero_v
    tail_is_zero = out.final_v < zero_v
    # a tail mostly at zero but ending high is a start at the very end of the record, not a re-collapse
    final_is_zero = tail_is_zero and float(output[-MIN_DWELL:].min()) < zero_v
    n = t.size
    tail_start_s = float(t[n - max(MIN_SEGMENT, int(n * TAIL_FRACTION))])
    common = dict(supply=sup, output=out, t_supply_s=t_supply, supply_ref_v=supply_ref_v, ramp_v_per_s=ramp,
                  supply_peak_v=sp.peak_v if sp is not None else None, zero_threshold_v=zero_v,
                  output_peak_v=peak_v,
                  left_zero=left_zero, final_is_zero=final_is_zero, tail_start_s=tail_start_s,
                  record_end_s=float(t[-1]))
    if not left_zero:
        return StartupMetrics(**common, reference=None, t10_at_s=None, t90_at_s=None, delay_s=None, rise_s=None,
                              supply_at_start_v=None, vsupply_at_valid_v=None, settle_at_s=None, settle_s=None, settled=False,
                              overshoot_pct=None, peak_at_s=None, window=None)
    high = state_levels(output).high_v if tail_is_zero else out.final_v  # no settled level: the plateau
    ref = StateLevels(out.initial_v, high)
    h = out.hysteresis(ref.amplitude_v)
    t10 = first_crossing(t, output, ref.reference(0.1), h)
    t90 = first_crossing(t, output, ref.reference(0.9), h)
    delay = t90 - t_supply if t90 is not None and t_supply is not None else None
    rise = t90 - t10 if t10 is not None and t90 is not None else None
    at_start = value_at(t, supply, t10) if t10 is not None and supply is not None else None
    at_valid = value_at(t, supply, t90) if t90 is not None and supply is not None else None
    settle_at = settle = None
    settled = False
    overshoot = peak_at = window = None
    if not tail_is_zero:
        settle_at = last_entry(t, output, out.final_v, abs(out.final_v) * limits.band_pct / 100.0)
        settled = settle_at is not None and settle_at <= tail_start_s
        if settle_at is not None and t_supply is not None:
            settle = settle_at - t_supply
        if t10 is not None and t90 is not None:
            window = _transition_window(t, t10, t90, settle_at if settled else None)
            overshoot, peak_at = _overshoot(t, output, window, t90, ref)
    return StartupMetrics(**common, reference=ref, t10_at_s=t10, t90_at_s=t90, delay_s=delay, rise_s=rise,
                          supply_at_start_v=at_start, vsupply_at_valid_v=at_valid, settle_at_s=settle_at, settle_s=settle, settled=settled,
                          overshoot_pct=overshoot, peak_at_s=peak_at, window=window)


def _transition_window(t, t10: float, t90: float, settle_at: float | None) -> tuple[int, int]:
    """From well before the 10 % instant (baseline for the delay) to past the settling instant."""
    rise = max(t90 - t10, float(t[1] - t[0]))
    start = t10 - 1.5 * rise
    end = t90 + 5.0 * rise
    if settle_at is not None:
        end = max(end, settle_at + 0.5 * (settle_at - t10))
    return max(0, _index(t, start)), min(t.size, _index(t, end) + 1)


def _overshoot(t, output, window: tuple[int, int], t90: float, ref: StateLevels) -> tuple[float, float]:
    tw, vw = block_means(t, output, *window)
    after = tw >= t90
    if not after.any() or ref.amplitude_v == 0:
        return 0.0, t90
    k = int(np.argmax(np.where(after, vw, -np.inf)))
    return max(0.0, 100.0 * (vw[k] - ref.high_v) / ref.amplitude_v), float(tw[k])


def edge_instant(t: np.ndarray, v: np.ndarray) -> float | None:
    """First crossing of the 50 % reference level between a signal's initial and final state levels
    (IEEE Std 181-2011 §5.3, mid reference level; clause from memory), None when it never moves."""
    finite = np.isfinite(v)
    t, v = t[finite], v[finite]
    if v.size < MIN_SEGMENT:
        return None
    levels = signal_levels(v)
    sl = StateLevels(levels.initial_v, levels.final_v)
    if sl.amplitude_v == 0:
        return None
    return first_crossing(t, v, sl.reference(0.5), levels.hysteresis(sl.amplitude_v),
                          direction="rising" if sl.amplitude_v > 0 else "falling")  # active-low enables fall
