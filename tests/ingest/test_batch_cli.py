"""Batch ingest, the ingest / show / export commands, and the demo scenario in sample_runs/."""

import json
import shutil
import sys
from pathlib import Path

import openpyxl
import pandas as pd
import pytest

from labtool.cli import main
from labtool.execute import Scheduler
from labtool.ingest import IngestOptions, Manifest, find_files, ingest_paths, load_manifest
from labtool.store import Campaign

ROOT = Path(__file__).resolve().parents[2]
SAMPLES = ROOT / "sample_runs"
GOOD = "time,vdd,vref\n0,0,0\n1e-6,0.9,0.1\n2e-6,1.8,1.2\n"


def _folder(tmp_path):
    runs = tmp_path / "runs"
    (runs / "sub").mkdir(parents=True)
    (runs / "a.csv").write_text(GOOD)
    (runs / "sub" / "b.csv").write_text(GOOD.replace("1.2\n", "1.19\n"))
    (runs / "sub" / "broken.csv").write_text("time,vdd,vref\n0,0,0\n1e-6,x,0\n2e-6,1,1\n")
    (runs / "notes.md").write_text("not a capture")
    (runs / ".hidden.csv").write_text(GOOD)
    return runs


def test_folders_are_walked_recursively_and_failures_do_not_stop_the_batch(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    _folder(tmp_path)
    with Campaign.open("camp", create=True) as camp:
        report = ingest_paths(["runs"], camp)
        table = camp.captures()
        problems = camp.verify()
    assert report.files == 3 and len(report.added) == 2 and report.skipped == []
    assert report.failed == [("runs/sub/broken.csv", "runs/sub/broken.csv:3 [vdd]: 'x' is not a number")]
    assert sorted(table["source_path"]) == ["runs/a.csv", "runs/sub/b.csv"]
    assert problems == [] and not any((tmp_path / "camp" / "tmp").iterdir())


def test_find_files_skips_manifests_and_reports_missing_paths(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    runs = _folder(tmp_path)
    (runs / "runs.csv").write_text("file,lot\na.csv,ZR24A\n")
    (runs / "sub" / "manifest.xlsx").write_bytes(b"")  # a run sheet by its name: never read as a capture
    (tmp_path / "empty").mkdir()
    files, problems = find_files(["runs", "runs/a.csv", "missing.csv", "empty"], exclude=["runs/runs.csv"])
    assert files == ["runs/a.csv", "runs/sub/b.csv", "runs/sub/broken.csv"]
    assert problems[0] == ("missing.csv", "missing.csv: no such file or folder")
    assert problems[1][1].startswith("empty: no capture files in this folder (")


def test_a_workbook_with_one_bad_sheet_stores_nothing(tmp_path):
    wb = openpyxl.Workbook()
    good, bad = wb.active, wb.create_sheet("bad")
    for row in [("time", "vdd", "vref"), (0, 0, 0), (1e-6, 1.8, 1.2)]:
        good.append(row)
    for row in [("time", "vdd", "vref"), (0, 0, 0), (1e-6, "oops", 1.2), (2e-6, 1.8, 1.2)]:
        bad.append(row)
    wb.save(tmp_path / "book.xlsx")
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        report = ingest_paths([str(tmp_path / "book.xlsx")], camp)
        assert camp.captures().empty
    assert report.added == [] and len(report.failed) == 1
    assert report.failed[0][1].endswith("book.xlsx [bad!B3]: 'oops' is not a number")


def test_reingest_skips_and_a_changed_file_is_a_new_version(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    Path("a.csv").write_text(GOOD)
    with Campaign.open("camp", create=True) as camp:
        first = ingest_paths(["a.csv"], camp)
        again = ingest_paths(["a.csv"], camp)
        Path("a.csv").write_text(GOOD.replace("1.2\n", "1.21\n"))
        changed = ingest_paths(["a.csv"], camp)
        assert len(camp.captures()) == 1 and len(camp.captures(current_only=False)) == 2
        assert camp.captures()["capture_id"].tolist() == changed.added
    assert len(first.added) == 1 and again.added == [] and again.skipped == first.added


def test_worker_processes_give_the_same_result_as_one_process(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    _folder(tmp_path)
    results = []
    options = IngestOptions(manifest=Manifest({"a.csv": {"lot": "ZR24A"}}))  # the options travel to workers
    for name, scheduler in (("one", Scheduler("local", 1)), ("two", Scheduler("local", 2))):
        with Campaign.open(name, create=True) as camp:
            report = ingest_paths(["runs"], camp, options, scheduler)
            results.append((report.added, report.failed, camp.captures()[["capture_id", "source_path", "lot"]]))
    assert results[0][0] == results[1][0] and results[0][1] == results[1][1]
    pd.testing.assert_frame_equal(results[0][2], results[1][2])
    assert results[1][2].set_index("source_path").loc["runs/a.csv", "lot"] == "ZR24A"


def test_ingest_command_lists_each_failure_on_one_line_and_exits_1(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    _folder(tmp_path)
    code = main(["ingest", "runs", "nothere.csv", "--into", "camp", "--scheduler", "local:1"])
    out, err = capsys.readouterr()
    assert code == 1
    assert err.splitlines() == ["nothere.csv: no such file or folder", "runs/sub/broken.csv:3 [vdd]: 'x' is not a number"]
    assert out.strip() == "camp: 2 added, 0 skipped, 2 failed (3 files read)"
    assert "Traceback" not in out + err


def test_ingest_command_with_pattern_and_explicit_columns(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    Path("ZR24A_p05_m40C.csv").write_text("t,CH1,CH2\n0,0,0\n1e-6,1.8,1.2\n")
    code = main(["ingest", "ZR24A_p05_m40C.csv", "--into", "camp", "--name-pattern", "{lot}_{part}_{temp_c}C.csv",
                 "--supply", "CH1", "--output", "CH2", "--scheduler", "local:1"])
    assert code == 0 and capsys.readouterr().out.splitlines() == [
        "camp: 1 added, 0 skipped, 0 failed (1 file read)", "  roles supply=CH1 (flag), output=CH2 (flag): 1 capture"]
    with Campaign.open("camp") as camp:
        row = camp.captures().iloc[0]
        cap = camp.load_capture(row["capture_id"])
    assert (row["lot"], row["part"], row["temperature_c"]) == ("ZR24A", "p05", -40.0)
    assert [(c.name, c.role) for c in cap.channels] == [("CH1", "supply"), ("CH2", "output")]


def test_bad_pattern_and_bad_manifest_are_reported_before_reading(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    Path("a.csv").write_text(GOOD)
    Path("m.csv").write_text("lot\nZR24A\n")
    assert main(["ingest", "a.csv", "--into", "camp", "--name-pattern", "{lot"]) == 2
    assert capsys.readouterr().err.strip() == "labtool ingest: --name-pattern '{lot': no {field} in it"
    assert main(["ingest", "a.csv", "--into", "camp", "--manifest", "m.csv"]) == 1
    assert capsys.readouterr().err.strip() == (
        "labtool ingest: m.csv:1: no file column (one named file, path or filename); columns: lot")
    assert not Path("camp").exists()


@pytest.fixture(scope="module")
def sample_campaign(tmp_path_factory):
    """The demo scenario ingested once (the same command the README gives)."""
    root = tmp_path_factory.mktemp("demo")
    shutil.copytree(SAMPLES, root / "sample_runs")
    camp = root / "camp"
    code = main(["ingest", str(root / "sample_runs"), "--into", str(camp), "--manifest",
                 str(root / "sample_runs" / "manifest.csv"), "--scheduler", "local:1"])
    return root, camp, code


def test_sample_runs_ingest_cleanly_with_the_scenario_conditions(sample_campaign):
    _, camp, code = sample_campaign
    assert code == 0
    with Campaign.open(camp) as c:
        table = c.captures()
    assert len(table) == 36
    assert table.groupby("lot").size().to_dict() == {"ZR24A": 18, "ZR24B": 18}
    assert sorted(table["temperature_c"].unique()) == [-40.0, 25.0, 125.0]
    assert sorted(table["ramp_s"].unique()) == [1e-5, 1e-3, 0.1]
    assert table[["lot", "part", "temperature_c", "ramp_s"]].notna().all().all()
    assert table.groupby(["lot", "part"]).size().tolist() == [9, 9, 9, 9]
    assert set(table["importer"]) == {"csv", "csv+gzip", "xlsx"}


def test_sample_runs_twice_yield_the_same_catalog(sample_campaign, capsys):
    root, camp, _ = sample_campaign
    with Campaign.open(camp) as c:
        before = c.captures()
    capsys.readouterr()
    code = main(["ingest", str(root / "sample_runs"), "--into", str(camp), "--manifest",
                 str(root / "sample_runs" / "manifest.csv"), "--scheduler", "local:1"])
    assert code == 0 and capsys.readouterr().out.strip().endswith("0 added, 36 skipped, 0 failed (31 files read)")
    with Campaign.open(camp) as c:
        after = c.captures()
    pd.testing.assert_frame_equal(before, after)
    # A fresh campaign from the same files has the same captures and conditions.
    with Campaign.open(root / "other", create=True) as c:
        ingest_paths([str(root / "sample_runs")], c, IngestOptions(manifest=load_manifest(
            str(root / "sample_runs" / "manifest.csv"))), exclude=[str(root / "sample_runs" / "manifest.csv")])
        other = c.captures()
    keep = ["capture_id", "lot", "wafer", "part", "temperature_c", "ramp_s", "locator", "source_sha256", "n_samples"]
    pd.testing.assert_frame_equal(before[keep], other[keep])


def test_sample_files_are_what_make_samples_writes(tmp_path, monkeypatch):
    import importlib.util

    spec = importlib.util.spec_from_file_location("make_samples", SAMPLES / "make_samples.py")
    module = importlib.util.module_from_spec(spec)
    monkeypatch.setitem(sys.modules, "make_samples", module)  # dataclasses look their module up there
    spec.loader.exec_module(module)
    written = module.main(tmp_path)
    for path in written:
        rel = path.relative_to(tmp_path)
        assert (SAMPLES / rel).read_bytes() == path.read_bytes(), f"sample_runs/{rel} is stale: re-run make_samples.py"
    total = sum(p.stat().st_size for p in SAMPLES.rglob("*") if p.is_file())
    assert total < 3_000_000


def test_show_counts_by_lot_and_condition(sample_campaign, capsys):
    _, camp, _ = sample_campaign
    capsys.readouterr()
    assert main(["show", str(camp), "--json"]) == 0
    info = json.loads(capsys.readouterr().out)
    assert (info["captures"], info["parts"], info["measurements"]) == (36, 4, 0)
    assert [(r["lot"], r["captures"], r["parts"], r["wafers"]) for r in info["by_lot"]] == [("ZR24A", 18, 2, 1), ("ZR24B", 18, 2, 1)]
    assert len(info["by_condition"]) == 9 and all(r["captures"] == 4 for r in info["by_condition"])
    assert {(r["temperature_c"], r["ramp_s"]) for r in info["by_condition"]} == {
        (t, r) for t in (-40.0, 25.0, 125.0) for r in (1e-5, 1e-3, 0.1)}
    assert main(["show", str(camp)]) == 0
    text = capsys.readouterr().out
    assert "36 captures" in text and "ZR24A" in text and "-40 °C" in text and "100 ms" in text


def test_show_of_a_missing_campaign(tmp_path, capsys):
    assert main(["show", str(tmp_path / "none")]) == 3
    assert "not a campaign" in capsys.readouterr().err


@pytest.mark.parametrize("suffix", [".parquet", ".csv"])
def test_export_writes_the_catalog_and_measurements(tmp_path, monkeypatch, capsys, suffix):
    monkeypatch.chdir(tmp_path)
    Path("a.csv").write_text("# lot: ZR24A\n# board: B1\n" + GOOD)
    Path("b.csv").write_text("# lot: ZR24B\n" + GOOD.replace("1.2\n", "1.1\n"))
    main(["ingest", "a.csv", "b.csv", "--into", "camp", "--scheduler", "local:1"])
    with Campaign.open("camp") as camp:
        ids = camp.captures()["capture_id"].tolist()
        camp.save_measurements([{"capture_id": ids[0], "verdict": "started", "delay_s": 1.5e-5,
                                 "evidence": {"crossed": True}}], limits_key="k1", limits_json="{}")
    assert main(["export", "camp", "--to", f"out{suffix}"]) == 0
    df = pd.read_parquet(f"out{suffix}") if suffix == ".parquet" else pd.read_csv(f"out{suffix}")
    assert len(df) == 2 and sorted(df["lot"]) == ["ZR24A", "ZR24B"]
    row = df.set_index("capture_id").loc[ids[0]]
    assert row["verdict"] == "started" and row["delay_s"] == 1.5e-5 and json.loads(row["evidence"]) == {"crossed": True}
    assert pd.isna(df.set_index("capture_id").loc[ids[1], "verdict"])
    assert {"source_path", "source_sha256", "importer", "channels", "n_samples"} <= set(df.columns)
    assert "tags_json" not in df.columns
    assert capsys.readouterr().out.strip().endswith(f"out{suffix}: 2 rows, {len(df.columns)} columns")


def test_export_refuses_other_formats(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    Path("a.csv").write_text(GOOD)
    main(["ingest", "a.csv", "--into", "camp", "--scheduler", "local:1"])
    capsys.readouterr()
    assert main(["export", "camp", "--to", "out.xlsx"]) == 2
    assert capsys.readouterr().err.strip() == "labtool export: --to 'out.xlsx': the file must end in .parquet or .csv"
    assert not Path("out.xlsx").exists()
