"""The verdict of one startup: the first class that applies, with the numbers that decided it."""

from __future__ import annotations

from labtool.measure.limits import Limits
from labtool.measure.startup import StartupMetrics

VERDICTS = ("no_supply", "stuck_at_zero", "recollapse", "incomplete", "wrong_level", "slow_start", "ringing",
            "started")
# A dip row (issue 19): the output came back into its band, stayed below it, or neither; a dip row whose
# output was already in the zero state before the dip is "stuck_at_zero" (there was nothing to recover).
DIP_VERDICTS = ("stuck_at_zero", "no_recovery", "incomplete", "recovered")
# A power-down row carries the dropout supply voltage and no judgement.
POWER_DOWN = "power_down"


def decide(m: StartupMetrics, limits: Limits) -> tuple[str, dict]:
    """(verdict, evidence) by the rules of issue #3, checked in the order of :data:`VERDICTS`.

    ``no_supply`` also covers a supply that never crosses its own reference level (possible only
    when ``supply_ref`` is given in volts): without a valid supply there is no instant to measure from.
    A record without a supply channel never gets ``no_supply``: nothing says its supply failed.
    """
    if m.supply is not None and limits.supply_min_v is not None and m.supply_peak_v < limits.supply_min_v:
        return "no_supply", {"supply_peak_v": m.supply_peak_v, "supply_min_v": limits.supply_min_v}
    if m.supply is not None and m.t_supply_s is None:
        return "no_supply", {"supply_peak_v": m.supply_peak_v, "supply_ref_v": m.supply_ref_v,
                             "reason": "supply never crosses its reference level"}
    if not m.left_zero:
        return "stuck_at_zero", {"output_peak_v": m.output_peak_v, "zero_threshold_v": m.zero_threshold_v,
                                 "vout_initial_v": m.output.initial_v, "noise_v": m.output.noise_v}
    if m.final_is_zero:
        return "recollapse", {"output_peak_v": m.output_peak_v, "vout_final_v": m.output.final_v,
                              "zero_threshold_v": m.zero_threshold_v}
    if not m.settled or m.t90_at_s is None:
        return "incomplete", {"settle_at_s": m.settle_at_s, "tail_start_s": m.tail_start_s,
                              "record_end_s": m.record_end_s, "t90_at_s": m.t90_at_s, "band_pct": limits.band_pct}
    if limits.expect_v is not None:
        error_pct = 100.0 * (m.output.final_v - limits.expect_v) / limits.expect_v
        if abs(error_pct) > limits.level_tol_pct:
            return "wrong_level", {"vout_final_v": m.output.final_v, "expect_v": limits.expect_v,
                                   "error_pct": error_pct, "level_tol_pct": limits.level_tol_pct}
    if limits.max_delay_s is not None and m.delay_s is not None and m.delay_s > limits.max_delay_s:
        return "slow_start", {"delay_s": m.delay_s, "max_delay_s": limits.max_delay_s}
    if (limits.max_overshoot_pct is not None and m.overshoot_pct is not None
            and m.overshoot_pct > limits.max_overshoot_pct):
        return "ringing", {"overshoot_pct": m.overshoot_pct, "max_overshoot_pct": limits.max_overshoot_pct}
    return "started", {"delay_s": m.delay_s, "settle_s": m.settle_s, "overshoot_pct": m.overshoot_pct,
                       "vout_final_v": m.output.final_v}
