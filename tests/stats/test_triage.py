"""Triage on generated parts through the store and the measurement engine: what it weighs, what it
refuses to pool, what it says when it cannot decide, and its JSON contract.

Invented parts stating properties (tests/stats/triage_parts.py), beside a lot of six healthy parts.
"""

import numpy as np
import pandas as pd
import pytest

from labtool.errors import UsageError
from labtool.stats.triage import CAUSES, HEALTHY, NO_FIT, load_resolution, triage
from labtool.stats.triage.evidence import collect
from tests.stats.triage_parts import LOT, closed_form_starts, store_and_measure

LOT_PARTS = [f"h{i:02d}" for i in range(6)]
ALL_NAMES = {*CAUSES, HEALTHY, NO_FIT}


@pytest.fixture(scope="module")
def lot(tmp_path_factory):
    starts = []
    for i, part in enumerate(LOT_PARTS):
        starts += closed_form_starts(part, "healthy", 500 + i, current=True)
    # ζ = 0.85: a second-order start overshoots by 100·exp(−ζπ/√(1−ζ²)) = 0.63 % (Ogata §5-3), one 8-bit code
    starts += [s for s in closed_form_starts("q01", "healthy", 601, current=True)]
    starts += closed_form_starts("d01", "dead_everywhere", 602, current=True)
    starts += closed_form_starts("k01", "cold_only_stuck", 603, current=True)[:1]  # one capture only
    starts += closed_form_starts("w01", "weak_startup_slow", 604, ramps=(10e-6, 20e-3))  # 20 ms: no one else
    starts += closed_form_starts("h00", "healthy", 500, ramps=(5e-3,))[:1]  # a small baseline at 5 ms ...
    starts += closed_form_starts("w01", "weak_startup_slow", 604, ramps=(5e-3,))  # ... where w01 was tested too
    starts += closed_form_starts("z01", "hot_only_stuck", 605)  # alone in lot TL99
    root = tmp_path_factory.mktemp("lot") / "camp"
    table, records = store_and_measure(root, starts, lots={"z01": "TL99"})
    return table, load_resolution(str(root), records)


def _run(lot, part, **kwargs):
    table, resolution = lot
    return triage(table, f"{LOT}/{part}" if "/" not in part else part, resolution=resolution, **kwargs)


def test_a_healthy_part_says_no_hypothesis_above_the_healthy_pattern(lot):
    rep = _run(lot, "h03")
    assert rep.top.name == HEALTHY and rep.conclusion.kind == "healthy" and rep.conclusion.cause is None
    assert rep.conclusion.text.startswith("no hypothesis above the healthy pattern (posterior ")
    assert rep.top.posterior > 0.5


def test_a_code_sized_overshoot_on_a_quiet_trace_is_not_ringing(lot):
    # The lot starts without overshoot; q01 overshoots by one code (0.63 %): below the resolution floor
    # of the capture, so not evidence of ringing.
    table, _ = lot
    q01 = table[table["part"] == "q01"]
    assert q01["overshoot_pct"].max() < 1.5 and (q01["verdict"] == "started").all()
    rep = _run(lot, "q01")
    ringing = next(h for h in rep.hypotheses if h.name == "excess_ringing")
    assert rep.top.name == HEALTHY and ringing.posterior < 0.05


def test_a_dead_part_with_leakage_current_only(lot):
    rep = _run(lot, "d01")
    assert rep.top.name == "dead_everywhere" and rep.conclusion.kind == "cause" and rep.top.posterior > 0.9
    ev = rep.top.evidence
    # started parts draw ~10 µA, the dead one 2 nA: leakage level (common practice, no source)
    assert ev["isupply_at_leakage"] is True and ev["lot_isupply_a"] == pytest.approx(10e-6, rel=0.05)
    assert ev["in_region"] == {"stuck_at_zero": 18} and rep.top.where == "at every set-up"
    assert rep.deciding_evidence["for"] == "dead_everywhere" and rep.deciding_evidence["captures"]


def test_one_capture_is_too_little_data(lot):
    rep = _run(lot, "k01")
    assert rep.n_captures == 1 and rep.conclusion.kind == "too_little_data" and rep.conclusion.cause is None
    assert rep.conclusion.text.startswith("too little data to name a cause: 1 capture at 1 set-up")
    untestable = {h.name for h in rep.hypotheses if not h.testable}
    assert {"cold_only_stuck", "hot_only_stuck", "slow_ramp_miss"} <= untestable  # no edge with one set-up
    assert all(h.posterior == 0 for h in rep.hypotheses if not h.testable)


def test_small_and_missing_baselines_are_named_not_pooled(lot):
    rep = _run(lot, "w01")
    none, small = rep.notes
    assert none.startswith("no baseline at ramp 5 ms, 25 °C, 1.8 V; ramp 5 ms, 125 °C, 1.8 V; ramp 20 ms, -40 °C, "
                           "1.8 V; ramp 20 ms, 25 °C, 1.8 V; ramp 20 ms, 125 °C, 1.8 V: no other part was measured")
    assert small.startswith("baseline too small at ramp 5 ms, -40 °C, 1.8 V (1): fewer than 5 captures of other parts")
    assert rep.top.name == "weak_startup_slow"


def test_evidence_at_a_set_up_does_not_depend_on_other_set_ups(lot):
    # Never pooled: change the lot at the 100 ms ramps completely; the part's weights at 10 µs and
    # 1 ms ramps stay exactly what they were.
    table, resolution = lot
    before = collect(table, f"{LOT}/h03", resolution=resolution)
    other = table.copy()
    slow = (other["ramp_s"] == 0.1) & (other["part"] != "h03")
    other.loc[slow, ["delay_s", "vout_final_v"]] *= 3.0
    other.loc[slow, "verdict"] = "stuck_at_zero"
    after = collect(other, f"{LOT}/h03", resolution=resolution)
    kept = (before.rows["ramp_s"] < 0.1).to_numpy()
    for name, m in before.metrics.items():
        assert np.array_equal(m.log_healthy[kept], after.metrics[name].log_healthy[kept]), name
    fast = [i for i, s in enumerate(before.setups) if s[before.keys.index("ramp_s")] < 0.1]
    assert np.array_equal(before.log_healthy_setup[fast], after.log_healthy_setup[fast])
    assert not np.array_equal(before.log_healthy_setup, after.log_healthy_setup)


def test_only_the_current_version_of_a_capture_counts(lot):
    # A re-ingested file leaves an older version in the catalog; its old verdict must not be counted.
    table, resolution = lot
    mine = table[table["part"] == "h03"].copy()
    old = mine.assign(version=mine["version"] - 1, verdict="stuck_at_zero", capture_id=mine["capture_id"] + "-v0")
    with_old = triage(pd.concat([table, old], ignore_index=True), f"{LOT}/h03", resolution=resolution)
    plain = _run(lot, "h03")
    assert with_old.n_captures == plain.n_captures == 18
    assert [h.posterior for h in with_old.hypotheses] == pytest.approx([h.posterior for h in plain.hypotheses])


def test_a_part_alone_in_its_lot_is_compared_with_the_other_lots(lot):
    rep = _run(lot, "TL99/z01")
    assert rep.lot == "TL99" and rep.n_baseline > 0 and rep.top.name == "hot_only_stuck"
    assert any("is the only part of lot TL99" in n for n in rep.notes)


def test_json_contract(lot):
    rep = _run(lot, "d01")
    js = rep.to_json_dict()
    assert set(js) == {"part", "lot", "n_captures", "n_baseline", "verdicts", "conclusion", "hypotheses",
                       "log_lr_to_runner_up", "deciding_evidence", "next_experiment", "notes", "model"}
    assert js["part"] == f"{LOT}/d01" and js["model"] is None and js["verdicts"] == {"stuck_at_zero": 18}
    names = [h["name"] for h in js["hypotheses"]]
    assert set(names) == ALL_NAMES and len(names) == len(ALL_NAMES)
    posts = [h["posterior"] for h in js["hypotheses"]]
    assert posts == sorted(posts, reverse=True) and sum(posts) == pytest.approx(1.0)
    assert set(js["hypotheses"][0]) == {"name", "title", "posterior", "prior", "log_likelihood", "log_lr_to_next",
                                        "testable", "where", "evidence", "bench_check"}
    first, second = js["hypotheses"][:2]
    assert js["log_lr_to_runner_up"] == pytest.approx(first["log_likelihood"] - second["log_likelihood"])
    assert first["log_lr_to_next"] == pytest.approx(js["log_lr_to_runner_up"])
    assert set(js["conclusion"]) == {"kind", "cause", "text"} and js["conclusion"]["cause"] == "dead_everywhere"
    nxt = js["next_experiment"]
    assert set(nxt) == {"separates", "kind", "condition", "condition_text", "outcome", "power_cycles",
                        "failures_to_decide", "per_cycle_probability", "shift_spreads", "text"}
    assert nxt["separates"] == names[:2] and set(nxt["condition"]) == {"ramp_s", "temperature_c", "vdd_v"}
    capture = js["deciding_evidence"]["captures"][0]
    assert {"capture_id", "file", "ramp_s", "temperature_c", "vdd_v", "repeat", "verdict", "nats"} <= set(capture)
    assert capture["nats"] > 0 and js["deciding_evidence"]["against"] == names[1]
    # what sets the dead part apart from a healthy one: its stuck captures, each worth several nats
    apart = js["deciding_evidence"]["against_healthy"]
    assert len(apart) == 6 and all(c["verdict"] == "stuck_at_zero" and c["nats"] > 3 for c in apart)


def test_the_next_experiment_separates_the_top_two_by_the_repeat_count_rule(lot):
    rep = _run(lot, "h03")
    nxt = rep.next_experiment
    assert nxt.separates == (HEALTHY, rep.hypotheses[1].name)
    if nxt.kind == "failure_count":  # the count follows n ≥ ln 0.05 / ln(1 − p) against a clean lot
        p = max(nxt.per_cycle_probability.values())
        assert nxt.power_cycles >= np.ceil(np.log(0.05) / np.log(1 - p)) and nxt.condition_text in nxt.text
    assert f"{nxt.power_cycles} " in nxt.text


def test_part_naming_errors(lot):
    table, _ = lot
    with pytest.raises(UsageError, match=r"--part TL01/p99: no measured captures of that part"):
        triage(table, "TL01/p99")
    two_lots = table.assign(lot=np.where(table["part"] == "h01", "TL02", table["lot"]))
    two_lots = pd.concat([two_lots, table[table["part"] == "h01"]], ignore_index=True)
    with pytest.raises(UsageError, match="--part h01: in lots TL01, TL02; give LOT/PART"):
        triage(two_lots, "h01")
    assert triage(table, "h02", lot=LOT).part == f"{LOT}/h02"

