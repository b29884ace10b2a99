"""``labtool triage`` through the CLI entry point: one or several parts, --all-returned, JSON lines.

A bench export written as files with a run sheet whose ``returned`` column tags two parts (invented
parts, tests/stats/triage_parts.py), ingested and measured as a user would.
"""

import json

import pytest

from labtool.cli import main
from labtool.stats.triage import CAUSES, HEALTHY, NO_FIT, STUCK_CAUSES
from tests.model.conftest import DEMO
from tests.stats.triage_parts import LOT, closed_form_starts, store_and_measure


@pytest.fixture(scope="module")
def campaign(tmp_path_factory):
    base = tmp_path_factory.mktemp("cli")
    starts = []
    for i in range(5):
        starts += closed_form_starts(f"h{i:02d}", "healthy", 700 + i)
    starts += closed_form_starts("r01", "slow_ramp_miss", 801)
    starts += closed_form_starts("r02", "level_fault", 802)
    store_and_measure(base / "camp", starts, files=base / "files", returned={"r01", "r02"})
    return str(base / "camp")


def _json_lines(capsys):
    return [json.loads(line) for line in capsys.readouterr().out.splitlines() if line.strip()]


def test_all_returned_parts_as_json_lines(campaign, capsys):
    assert main(["triage", campaign, "--all-returned", "--json"]) == 0
    recs = _json_lines(capsys)
    assert [r["part"] for r in recs] == [f"{LOT}/r01", f"{LOT}/r02"]
    assert [r["hypotheses"][0]["name"] for r in recs] == ["slow_ramp_miss", "level_fault"]
    for r in recs:
        assert {h["name"] for h in r["hypotheses"]} == {*CAUSES, HEALTHY, NO_FIT}
        assert sum(h["posterior"] for h in r["hypotheses"]) == pytest.approx(1.0)
        assert r["next_experiment"]["power_cycles"] >= 1 and r["next_experiment"]["text"]
    assert recs[0]["hypotheses"][0]["name"] in STUCK_CAUSES and recs[0]["conclusion"]["kind"] == "cause"


def test_several_parts_in_words(campaign, capsys):
    assert main(["triage", campaign, "--part", f"{LOT}/r01,{LOT}/h02"]) == 0
    out = capsys.readouterr().out
    first, second = out.split("\n\npart ")
    assert first.startswith(f"part {LOT}/r01: 18 captures (started 12, stuck_at_zero 6)")
    assert "conclusion: slow_ramp_miss: stuck only on slow supply ramps" in first
    assert "deciding captures (slow_ramp_miss over " in first and "next experiment: Power-cycle the part" in first
    assert second.startswith(f"{LOT}/h02: 18 captures (started 18)")
    assert "conclusion: no hypothesis above the healthy pattern" in second


def test_one_unknown_part_among_several_is_listed_and_the_others_reported(campaign, capsys):
    assert main(["triage", campaign, "--part", f"{LOT}/r02", "--part", f"{LOT}/p77", "--json"]) == 1
    captured = capsys.readouterr()
    assert [json.loads(line)["part"] for line in captured.out.splitlines()] == [f"{LOT}/r02"]
    assert captured.err.strip() == f"labtool triage: --part {LOT}/p77: no measured captures of that part"


def test_a_single_unknown_part_is_one_clear_error(campaign, capsys):
    assert main(["triage", campaign, "--part", f"{LOT}/p77"]) == 2
    assert capsys.readouterr().err.strip() == f"labtool triage: --part {LOT}/p77: no measured captures of that part"


def test_no_part_given_or_none_tagged(campaign, tmp_path, capsys):
    assert main(["triage", campaign]) == 2
    assert capsys.readouterr().err.strip() == "labtool triage: give --part LOT/PART (one or more) or --all-returned"
    untagged = tmp_path / "c"
    store_and_measure(untagged, closed_form_starts("h09", "healthy", 709, ramps=(10e-6,)))
    assert main(["triage", str(untagged), "--all-returned"]) == 2
    assert "--all-returned: no part of" in capsys.readouterr().err


def test_with_the_model_the_recipes_back_the_stories_and_the_margins_are_shown(tmp_path, capsys):
    # Two set-ups only, a small Monte Carlo: the model path end to end (sample_runs/design.toml, invented).
    starts = []
    for i in range(4):
        starts += closed_form_starts(f"h{i:02d}", "healthy", 900 + i, temps=(-40.0, 25.0), ramps=(10e-6,))
    starts += closed_form_starts("r09", "dead_everywhere", 909, temps=(-40.0, 25.0), ramps=(10e-6,))
    store_and_measure(tmp_path / "c", starts)
    assert main(["triage", str(tmp_path / "c"), "--part", f"{LOT}/r09", "--model", str(DEMO), "--model-samples", "4",
                 "--scheduler", "local:1", "--json"]) == 0
    (rec,) = _json_lines(capsys)
    assert rec["model"] == {"design": "ZR-4410", "samples_per_setup": 4, "seed": 1}
    top = rec["hypotheses"][0]
    assert top["name"] == "dead_everywhere" and top["evidence"]["model_recipe"] == "startup_open"
    assert 0 <= top["evidence"]["model_weight"] <= 1
    margin = top["evidence"]["model_i_start_min_a_by_temperature_c"]
    assert set(margin) == {"-40", "25"} and all(0 < v < top["evidence"]["model_i_start_a"] for v in margin.values())
