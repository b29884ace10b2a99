"""``labtool report`` and ``labtool demo`` through the CLI entry point."""

import pytest
from openpyxl import load_workbook

import labtool.cli.commands.demo as demo
from labtool.cli import main
from labtool.errors import UsageError
from labtool.execute import parse_scheduler
from labtool.stats.triage import STUCK_CAUSES
from labtool.store import Campaign


def test_report_command_writes_the_files_and_says_where(campaign, tmp_path, capsys):
    out = tmp_path / "rep"
    assert main(["report", str(campaign), "--out", str(out), "--by", "lot,ramp_s", "--scheduler", "local:1"]) == 0
    printed = capsys.readouterr().out
    assert f"report:   {out / 'report.html'}" in printed and f"workbook: {out / 'report.xlsx'}" in printed
    assert (out / "report.html").is_file() and len(list((out / "plots").glob("*.png"))) >= 5
    assert len(load_workbook(out / "report.xlsx")["Summary"]["A"]) == 1 + 2 * 4  # 2 lots × 2 ramps, group + set-up


def test_report_command_triages_the_parts_it_is_given_besides_the_returned_ones(campaign, tmp_path, capsys):
    out = tmp_path / "rep"
    assert main(["report", str(campaign), "--out", str(out), "--part", "ZR24B/p02", "--scheduler", "local:1"]) == 0
    capsys.readouterr()
    names = {p.name for p in (out / "plots").glob("*-triage.png")}
    assert names == {"part-zr24a-p04-triage.png", "part-zr24b-p02-triage.png"}  # tagged returned, and given
    parts = {r[0] for r in load_workbook(out / "report.xlsx")["Triage"].iter_rows(min_row=2, values_only=True)}
    assert parts == {"ZR24A/p04", "ZR24B/p02"}


@pytest.mark.parametrize("argv, code, message", [
    (["--by", "nosuchcolumn"], 2, "labtool report: --by: no column nosuchcolumn in the measurement table"),
    (["--scheduler", "local:0"], 2, "labtool report: --scheduler 'local:0': the worker count must be"),
])
def test_report_command_bad_options_are_one_clear_line(campaign, tmp_path, capsys, argv, code, message):
    assert main(["report", str(campaign), "--out", str(tmp_path / "rep"), *argv]) == code
    err = capsys.readouterr().err
    assert err.startswith(message) and "Traceback" not in err and len(err.strip().splitlines()) == 1


def test_report_of_a_folder_that_is_no_campaign(tmp_path, capsys):
    assert main(["report", str(tmp_path / "nothing"), "--out", str(tmp_path / "rep")]) == 3
    assert "not a campaign" in capsys.readouterr().err


def test_demo_finds_the_checkouts_sample_runs_and_refuses_to_clear_a_foreign_folder(tmp_path):
    runs = demo.sample_runs_dir()
    assert (runs / "manifest.csv").is_file() and (runs / "design.toml").is_file()
    (tmp_path / "campaign").mkdir()
    (tmp_path / "campaign" / "notes.txt").write_text("mine")
    with pytest.raises(UsageError, match="is not a labtool campaign"):
        demo.fresh_campaign(tmp_path / "campaign")
    assert (tmp_path / "campaign" / "notes.txt").exists()


def test_demo_without_sample_runs_is_a_clear_error(monkeypatch, tmp_path, capsys):
    monkeypatch.setattr(demo.labtool, "__file__", str(tmp_path / "labtool" / "__init__.py"))
    assert main(["demo", "--out", str(tmp_path / "d")]) == 2
    err = capsys.readouterr().err
    assert "the sample runs are not there" in err and "Traceback" not in err


@pytest.mark.slow
def test_demo_runs_the_scenario_end_to_end(monkeypatch, tmp_path, capsys):
    monkeypatch.setattr(demo, "DEMO_MODEL_SAMPLES", 5)  # the scenario, with a small Monte Carlo
    monkeypatch.setattr(demo, "parse_scheduler", lambda spec: parse_scheduler("local:1"))  # no process pools
    out = tmp_path / "demo_out"
    assert main(["demo", "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "36 captures into" in printed  # sample_runs/README.md: 36 captures
    assert "1 recollapse" in printed and "1 stuck_at_zero" in printed and "1 slow_start" in printed
    assert "1 ringing" in printed  # one of each failure the README lists
    assert f"report:   {out / 'report' / 'report.html'}" in printed
    page = (out / "report" / "report.html").read_text(encoding="utf-8")
    assert 'id="s-p-zr24b-p04"' in page and 'id="s-p-zr24a-p01"' in page  # triage of the failing parts
    # the part stuck at zero is triaged to a stuck cause, with the model's recipes behind the stories
    stuck = next(line for line in printed.splitlines() if line.startswith("    triage ZR24B/p04: "))
    assert stuck.split(": ")[1].split()[0] in STUCK_CAUSES and " first (posterior 0." in stuck
    assert "Against the model:" in page
    with Campaign.open(out / "campaign") as camp:
        assert len(camp.measurements()) == 36
    demo.fresh_campaign(out / "campaign")  # what a second run does first: the old campaign goes
    assert not (out / "campaign").exists() and (out / "report" / "report.html").exists()
