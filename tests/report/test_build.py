"""write_report end to end on the small measured campaign of conftest.py (invented traces)."""

import re

import numpy as np
import pandas as pd
import pytest
from openpyxl import load_workbook

from labtool.errors import UsageError
from labtool.report.build import pick_traces, write_report
from labtool.stats.triage import STUCK_CAUSES
from labtool.store import Campaign
from tests.report.chromium import render_and_check
from tests.report.tables import RAMPS


@pytest.fixture(scope="module")
def report(campaign, tmp_path_factory):
    out = tmp_path_factory.mktemp("report") / "out"
    return out, write_report(campaign, out)


def test_report_writes_html_workbook_and_plots(report, tmp_path):
    out, files = report
    assert files.failed == ()
    assert files.html == out / "report.html" and files.workbook == out / "report.xlsx"
    names = sorted(p.name for p in files.plots)
    assert all(p.read_bytes()[:4] == b"\x89PNG" for p in files.plots)
    assert sorted(p.name for p in (out / "plots").glob("*.png")) == names
    # Per lot: histogram, one overlay per set-up, wafer map; the overview; the returned part's sheet.
    for lot in ("zr24a", "zr24b"):
        assert {f"lot-{lot}-delay_histogram.png", f"lot-{lot}-waveform_overlay.png",
                f"lot-{lot}-waveform_overlay-2.png", f"lot-{lot}-wafer_map.png"} <= set(names)
    assert "overview-delay_vs_conditions.png" in names and "part-zr24a-p04-triage.png" in names
    assert not any("qq" in n for n in names)  # no model, no QQ plot

    page = files.html.read_text(encoding="utf-8")
    assert len(re.findall(r'<img src="data:image/png;base64,', page)) == len(files.plots)
    for anchor in ("s-overview", "s-g-lot-zr24a", "s-g-lot-zr24b", "s-failures", "s-p-zr24a-p04", "s-limits"):
        assert f'id="{anchor}"' in page and f'href="#{anchor}"' in page
    assert "limits.max_delay_s" in page  # the limits the campaign was measured with
    # Per set-up, never pooled: lot ZR24A's 20 µs-ramp delays are 13, 14, 15, 16 µs (numpy.percentile:
    # median 14.5, p05 13.15, p95 15.85), a row of the lot's set-up table.
    section = page[page.index('id="s-g-lot-zr24a"'):page.index('id="s-g-lot-zr24b"')]
    cells = r'<td[^>]*>{}</td>'
    row = "".join(cells.format(v) for v in ("20 µs", "25 °C", "—", "4", "0", "4", r"14\.\d+ µs", r"13\.\d+ µs", r"15\.\d+ µs"))
    assert re.search(row, section), "the 20 µs set-up row"
    assert "median delay" not in section  # no pooled delay tile for the lot
    assert "supply at 90 % of its final level" in section  # the captions say what supply valid was

    wb = load_workbook(files.workbook)
    assert wb.sheetnames == ["Summary", "Measurements", "Failures", "Triage", "Limits"]
    # The returned part's ranked hypotheses: posteriors that sum to one, the conclusion on the first row;
    # its one stuck start is on the slower ramp only, so a stuck cause leads (invented traces, conftest.py).
    head, *triage_rows = list(wb["Triage"].iter_rows(values_only=True))
    triage_sheet = [dict(zip(head, r)) for r in triage_rows]
    assert {r["part"] for r in triage_sheet} == {"ZR24A/p04"} and [r["rank"] for r in triage_sheet] == list(range(1, 13))
    assert sum(r["posterior"] for r in triage_sheet) == pytest.approx(1.0)
    assert triage_sheet[0]["name"] in STUCK_CAUSES and triage_sheet[0]["conclusion"] and triage_sheet[0]["next_experiment"]
    assert "stuck_at_zero" in triage_sheet[0]["deciding_captures"] and triage_sheet[1]["conclusion"] is None
    assert "Hypotheses, ranked by posterior probability" in page and "baseline too small at" in page
    assert wb["Measurements"].max_row == 1 + 16
    summary = list(wb["Summary"].iter_rows(values_only=True))
    assert [r[:2] for r in summary[1:]] == [("group", "ZR24A"), ("setup", "ZR24A"), ("setup", "ZR24A"),
                                            ("group", "ZR24B"), ("setup", "ZR24B"), ("setup", "ZR24B")]
    failures = [r for r in wb["Failures"].iter_rows(min_row=2, values_only=True)]
    assert len(failures) == 1 and "stuck_at_zero" in failures[0]
    limits = {r[0]: r[1] for r in wb["Limits"].iter_rows(min_row=2, values_only=True)}
    assert limits["limits.max_delay_s"] == pytest.approx(50e-6) and limits["grouped_by"] == "lot"


def test_report_renders_in_chromium_with_every_plot_decoded(report, tmp_path):
    _, files = report
    result = render_and_check(files.html.read_text(encoding="utf-8"), tmp_path)
    assert result["n_images"] == len(files.plots) == result["decoded"]
    assert all(w > 300 for w in result["widths"])


def test_predictions_add_the_model_overlay_qq_plot_and_comparison(campaign, tmp_path):
    rng = np.random.default_rng(7)
    pred = pd.DataFrame({"ramp_s": np.repeat(RAMPS, 100), "temperature_c": 25.0,
                         "delay_s": rng.normal(15e-6, 1.5e-6, 200), "stuck": False})
    files = write_report(campaign, tmp_path / "out", by="lot", predictions=pred)
    names = {p.name for p in files.plots}
    assert {"lot-zr24a-qq.png", "lot-zr24b-qq.png"} <= names
    wb = load_workbook(files.workbook)
    assert "Comparison" in wb.sheetnames
    page = files.html.read_text(encoding="utf-8")
    assert "Against the model:" in page and "Measured against the model" in page


def test_grouping_by_other_keys_and_a_measurement_table_without_waveforms(campaign, tmp_path):
    with Campaign.open(campaign) as camp:
        table = camp.measurements()
    files = write_report(table, tmp_path / "out", by=("lot", "ramp_s"))
    names = {p.name for p in files.plots}
    assert "lot-zr24a-ramp-s-20-us-delay_histogram.png" in names
    assert not any("overlay" in n for n in names)  # no waveforms in a bare table
    assert "part-zr24a-p04-triage.png" in names  # the sheet still ranks the hypotheses
    assert len(load_workbook(files.workbook)["Summary"]["A"]) == 1 + 4 * 2  # a group row and its one set-up


def test_captions_use_the_supply_valid_level_the_campaign_was_measured_with(campaign, tmp_path):
    import shutil

    from labtool.measure import Limits
    from labtool.measure.batch import measure_campaign

    copy = tmp_path / "camp"
    shutil.copytree(campaign, copy)
    with Campaign.open(copy) as camp:
        measure_campaign(camp, Limits(supply_ref="1.5", max_delay_s=50e-6))  # newest measurement set
    page = write_report(copy, tmp_path / "out").html.read_text(encoding="utf-8")
    assert "supply valid (supply at 1.5 V)" in page and "supply at 90 %" not in page


def test_the_model_overlay_is_run_with_the_campaigns_limits(campaign, tmp_path, monkeypatch):
    import labtool.model
    from labtool.errors import ModelError
    from labtool.measure import Limits
    from labtool.model import Design

    seen = []

    def asked(*args, **kwargs):  # note what the model was asked, then stop the report there
        seen.append(kwargs.get("limits"))
        raise ModelError("stopped by the test")

    monkeypatch.setattr(labtool.model, "monte_carlo", asked)
    with pytest.raises(ModelError, match="stopped by the test"):
        write_report(campaign, tmp_path / "out", design=Design(name="ZR-4410"), model_samples=3)
    assert seen == [Limits(max_delay_s=50e-6)]  # what conftest.py measured the campaign with


def test_clear_errors_for_an_unmeasured_campaign_and_a_bad_out_dir(tmp_path):
    with Campaign.open(tmp_path / "empty", create=True):
        pass
    with pytest.raises(UsageError, match="no measurements yet"):
        write_report(tmp_path / "empty", tmp_path / "out")
    (tmp_path / "file").write_text("x")
    with pytest.raises(UsageError, match="exists and is not a directory"):
        write_report(tmp_path / "empty", tmp_path / "file")


def test_pick_traces_keeps_failures_first_and_spreads_the_starts():
    verdicts = pd.Series(["started"] * 10 + ["stuck_at_zero"] * 3, index=[f"c{i}" for i in range(13)])
    picked = pick_traces(verdicts, limit=6)
    assert picked[:3] == ["c10", "c11", "c12"]
    assert picked[3:] == ["c0", "c4", "c9"]  # evenly over the ten starts, ends included


def test_the_plots_are_the_same_whichever_executor_draws_them(campaign, tmp_path):
    from labtool.execute import parse_scheduler

    here = write_report(campaign, tmp_path / "one", scheduler=parse_scheduler("local:1"))
    pool = write_report(campaign, tmp_path / "two", scheduler=parse_scheduler("local:2"))
    assert [p.name for p in here.plots] == [p.name for p in pool.plots]
    for a, b in zip(here.plots, pool.plots):
        assert a.read_bytes() == b.read_bytes(), a.name


def test_a_dask_cluster_draws_the_same_report(campaign, tmp_path):
    distributed = pytest.importorskip("distributed")
    from labtool.execute import parse_scheduler

    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False, protocol="tcp",
                                  dashboard_address=None) as cluster:
        remote = write_report(campaign, tmp_path / "dask", scheduler=parse_scheduler(cluster.scheduler_address))
    here = write_report(campaign, tmp_path / "here")
    assert remote.failed == () and [p.name for p in remote.plots] == [p.name for p in here.plots]
    for a, b in zip(remote.plots, here.plots):  # two jobs drew at once in one process: styles must not mix
        assert a.read_bytes() == b.read_bytes(), a.name
