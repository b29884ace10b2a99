"""Triage: each hypothesis from a synthetic part built to show it (invented data, stating the property
that the pattern built in is the one ranked first)."""

import pytest

from labtool.errors import UsageError
from labtool.stats.triage import HYPOTHESES, triage
from tests.stats.tables import measurement_table, set_verdict

PART = "p05"


def _lot():
    return measurement_table(parts=10, seed=13)


def _build(kind):
    df = _lot()
    me = df["part"] == PART
    if kind == "fixture_supply_invalid":
        return set_verdict(df, me, "no_supply")
    if kind == "dead_everywhere":
        return set_verdict(df, me, "stuck_at_zero")
    if kind == "slow_ramp_miss":
        return set_verdict(df, me & (df["ramp_s"] == 1e-3), "stuck_at_zero")
    if kind == "cold_only_stuck":
        return set_verdict(df, me & (df["temperature_c"] == -40.0), "stuck_at_zero")
    if kind == "hot_only_stuck":
        return set_verdict(df, me & (df["temperature_c"] == 125.0), "stuck_at_zero")
    if kind == "falls_back":
        return set_verdict(df, me & (df["ramp_s"] == 1e-3), "recollapse")
    if kind == "bistable_intermittent":
        return set_verdict(df, me & (df["repeat"] == 1), "stuck_at_zero")
    if kind == "weak_startup_slow":
        df.loc[me, "delay_s"] *= 5.0
        return df
    if kind == "excess_ringing":
        df.loc[me, "overshoot_pct"] = 25.0
        return df
    if kind == "level_fault":
        df.loc[me, "vout_final_v"] = 1.13
        return df
    raise AssertionError(kind)


KINDS = ["fixture_supply_invalid", "dead_everywhere", "slow_ramp_miss", "cold_only_stuck", "hot_only_stuck",
         "falls_back", "bistable_intermittent", "weak_startup_slow", "excess_ringing", "level_fault"]


def test_every_hypothesis_has_a_builder():
    assert len(HYPOTHESES) == len(KINDS)


@pytest.mark.parametrize("kind", KINDS)
def test_the_built_pattern_ranks_first(kind):
    rep = triage(_build(kind), f"ZR24A/{PART}")
    top, second = rep.hypotheses[0], rep.hypotheses[1] if len(rep.hypotheses) > 1 else None
    assert top.name == kind, [(h.name, round(h.score, 2)) for h in rep.hypotheses]
    assert top.score >= 0.6
    assert second is None or second.score < top.score
    assert top.next_experiment and top.evidence
    assert rep.part == "ZR24A/p05" and rep.n_captures == 18 and rep.n_baseline == 162


def test_a_good_part_scores_low_everywhere():
    rep = triage(_lot(), "ZR24A/p02")
    assert max(h.score for h in rep.hypotheses) < 0.5


def test_evidence_numbers_for_slow_ramps_and_slow_start():
    rep = triage(_build("slow_ramp_miss"), "ZR24A/p05")
    h = {h.name: h for h in rep.hypotheses}
    assert h["slow_ramp_miss"].evidence["stuck_fraction_by_ramp_s"] == {"1e-05": 0.0, "0.001": 1.0}
    assert rep.verdicts == {"started": 9, "stuck_at_zero": 9}
    slow = {h.name: h for h in triage(_build("weak_startup_slow"), "ZR24A/p05").hypotheses}["weak_startup_slow"]
    assert slow.evidence["modified_z_vs_lot"] > 10
    assert slow.evidence["part_delay_s"] == pytest.approx(5 * slow.evidence["lot_delay_s"], rel=0.3)


def test_part_naming_errors():
    df = measurement_table(lots=("ZR24A", "ZR24B"))
    with pytest.raises(UsageError, match="--part p03: in lots ZR24A, ZR24B; give LOT/PART"):
        triage(df, "p03")
    with pytest.raises(UsageError, match="--part ZR24A/p99: no measured captures of that part"):
        triage(df, "ZR24A/p99")
    assert triage(df, "p03", lot="ZR24B").part == "ZR24B/p03"
    json = triage(df, "ZR24B/p03").to_json_dict()
    assert set(json) == {"part", "lot", "n_captures", "n_baseline", "verdicts", "hypotheses"}
    assert set(json["hypotheses"][0]) == {"name", "title", "score", "evidence", "next_experiment"}


def test_one_quantisation_step_is_not_a_level_fault():
    # An 8-bit record of a 1.2 V level on a 2 V range has 7.8 mV codes (common practice, no source):
    # a lot read at one code has MAD 0; a part one code lower must not look like a trim fault,
    # while one 70 mV low must.
    df = _lot()
    df["vout_final_v"] = 1.2031
    df.loc[df["part"] == PART, "vout_final_v"] = 1.2031 - 0.0078
    h = {h.name: h for h in triage(df, f"ZR24A/{PART}").hypotheses}
    assert h["level_fault"].score < 0.2
    df.loc[df["part"] == PART, "vout_final_v"] = 1.13
    assert triage(df, f"ZR24A/{PART}").hypotheses[0].name == "level_fault"


def test_one_ringing_capture_is_already_a_finding():
    df = _lot()
    one = df.index[(df["part"] == PART)][4]
    df.loc[one, ["verdict", "overshoot_pct"]] = ["ringing", 22.0]
    top = triage(df, f"ZR24A/{PART}").hypotheses[0]
    assert top.name == "excess_ringing" and top.score == pytest.approx(0.5 + 0.5 / 18)


def test_stuck_part_drawing_only_leakage_current_is_said_so():
    # Invented lot: started parts draw ~10 µA, the stuck part 2 nA (leakage level; common practice,
    # no source: a dead core and startup draw nothing but junction leakage).
    df = _build("dead_everywhere")
    df["isupply_final_a"] = 10e-6
    df.loc[df["part"] == PART, "isupply_final_a"] = 2e-9
    dead = next(h for h in triage(df, f"ZR24A/{PART}").hypotheses if h.name == "dead_everywhere")
    assert dead.evidence["stuck_isupply_a"] == pytest.approx(2e-9)
    assert dead.evidence["lot_isupply_a"] == pytest.approx(10e-6)
    assert dead.evidence["isupply_at_leakage"] is True
