"""measure_campaign and ``labtool measure``: the JSON contract of issue #3, failures listed, re-runs
replace results. Captures are synthetic (invented data) built with tests/builders.py."""

import json

import numpy as np
import pytest

from labtool.capture import Conditions
from labtool.cli import main
from labtool.execute import parse_scheduler
from labtool.measure import Limits
from labtool.measure.batch import measure_campaign
from labtool.store import Campaign
from tests.builders import make_capture
from tests.measure.signals import adc, first_order_step, supply_ramp

# issue #3 CLI contract: these keys, at least, in every JSON line
CONTRACT_KEYS = {"file", "capture_id", "verdict", "t_supply_s", "delay_s", "rise_s", "settle_s", "overshoot_pct",
                 "ring_hz", "damping", "vout_final_v", "vsupply_final_v", "ramp_v_per_s", "supply_at_start_v",
                 "vsupply_at_valid_v"}
DT = 20e-9
T = np.arange(0.0, 200e-6, DT)


def _capture(part, level, seed):
    supply = adc(supply_ramp(T, start_s=5e-6, ramp_s=20e-6, vdd_v=1.8), bits=12, full_scale_v=4, noise_v=1e-3,
                 seed=seed)
    output = adc(level * first_order_step(T, tau_s=4e-6, delay_s=40e-6), bits=12, full_scale_v=4, noise_v=1e-3,
                 seed=seed + 1)
    return make_capture(supply, output, DT, source=f"runs/ZR24A_{part}.csv",
                        conditions=Conditions(lot="ZR24A", wafer="W03", part=part, temperature_c=25.0))


@pytest.fixture
def campaign(tmp_path):
    root = tmp_path / "zr24a"
    with Campaign.open(root, create=True) as camp:
        camp.add_capture(_capture("p01", 1.2, 10))
        camp.add_capture(_capture("p02", 0.0, 20))  # stuck at zero
        camp.add_capture(_capture("p03", 1.2, 30))
        short = make_capture(np.zeros(8), np.zeros(8), DT, source="runs/ZR24A_p04.csv")
        camp.add_capture(short)  # too short to measure: listed, not fatal
    return root


def test_measure_campaign_saves_rows_and_lists_the_failure(campaign):
    with Campaign.open(campaign) as camp:
        report = measure_campaign(camp, Limits(), parse_scheduler("local:2"))
        table = camp.measurements(limits_key=Limits().key())
    assert [r["verdict"] for r in report.rows] == ["started", "stuck_at_zero", "started"]
    ((cid, message),) = report.failed
    assert "runs/ZR24A_p04.csv: only 8 usable samples" in message
    assert len(table) == 3
    assert set(table["verdict"]) == {"started", "stuck_at_zero"}
    assert {"lot", "part", "temperature_c", "delay_s", "settle_s", "overshoot_pct"} <= set(table.columns)


def test_cli_json_contract_nulls_and_exit_status(campaign, capsys):
    status = main(["measure", str(campaign), "--json", "--scheduler", "local:1"])
    out, err = capsys.readouterr()
    rows = [json.loads(line) for line in out.splitlines()]
    assert status == 1  # one capture could not be measured
    assert "only 8 usable samples" in err
    assert len(rows) == 3
    for row in rows:
        assert CONTRACT_KEYS <= set(row)
    started, stuck, _ = rows
    assert started["verdict"] == "started" and started["file"] == "runs/ZR24A_p01.csv"
    # closed form: 90 % at 40 µs + τ·ln 10, supply valid at 5 µs + 0.9·20 µs
    assert started["delay_s"] == pytest.approx(40e-6 + 4e-6 * np.log(10) - 23e-6, rel=0.01)
    assert stuck["verdict"] == "stuck_at_zero"
    for key in ("delay_s", "rise_s", "settle_s", "overshoot_pct", "ring_hz", "damping", "supply_at_start_v"):
        assert stuck[key] is None
    assert stuck["t_supply_s"] == pytest.approx(23e-6, rel=0.01)


def test_rerun_replaces_results_for_the_same_limits(campaign, capsys):
    assert main(["measure", str(campaign), "--json", "--scheduler", "local:1"]) == 1
    assert main(["measure", str(campaign), "--json", "--scheduler", "local:1"]) == 1
    with Campaign.open(campaign) as camp:
        assert len(camp.measurements(limits_key=Limits().key())) == 3
        assert camp.limits_keys() == [Limits().key()]
    assert main(["measure", str(campaign), "--expect", "1.0", "--level-tol", "5", "--json"]) == 1
    capsys.readouterr()
    key = Limits(expect_v=1.0).key()
    with Campaign.open(campaign) as camp:
        assert sorted(camp.limits_keys()) == sorted([Limits().key(), key])
        assert set(camp.measurements(limits_key=key)["verdict"]) == {"wrong_level", "stuck_at_zero"}


def test_an_unreadable_file_is_an_error_line_and_the_rest_is_measured(campaign, tmp_path, capsys):
    broken = tmp_path / "broken.csv"
    broken.write_bytes(b"\x00\x01\x02 not a capture \xff\xfe")
    status = main(["measure", str(broken), str(campaign), "--json", "--max-delay", "500us"])
    out, err = capsys.readouterr()
    assert status == 1
    assert any("broken.csv" in line for line in err.splitlines())
    assert len(out.splitlines()) == 3
    assert "Traceback" not in err


def test_readable_table_without_json(campaign, capsys):
    main(["measure", str(campaign), "--scheduler", "local:1"])
    out = capsys.readouterr().out.splitlines()
    assert out[0].split()[:3] == ["file", "capture_id", "verdict"]
    assert "µs" in out[1] and "started" in out[1] and "stuck_at_zero" in out[2]


def test_files_are_read_with_explicit_columns_and_measured(tmp_path, capsys):
    cap = _capture("p05", 1.2, 40)
    path = tmp_path / "ZR24A_p05.csv"
    t = cap.times()
    lines = ["t_s,VDDA,BG_OUT"] + [f"{a:.9g},{b:.6g},{c:.6g}" for a, b, c in
                                    zip(t, cap.channel("supply").values, cap.channel("output").values)]
    path.write_text("\n".join(lines) + "\n")
    status = main(["measure", str(path), "--supply", "VDDA", "--output", "BG_OUT", "--json", "--scheduler", "local:1"])
    (line,) = capsys.readouterr().out.splitlines()
    row = json.loads(line)
    assert status == 0 and CONTRACT_KEYS <= set(row) and row["file"] == str(path)
    assert row["verdict"] == "started"
    assert row["delay_s"] == pytest.approx(40e-6 + 4e-6 * np.log(10) - 23e-6, rel=0.01)


def test_seconds_as_plain_floats_or_with_si_suffix_are_the_same_limits(campaign, capsys):
    main(["measure", str(campaign), "--max-delay", "500e-6", "--json", "--scheduler", "local:1"])
    main(["measure", str(campaign), "--max-delay", "500us", "--json", "--scheduler", "local:1"])
    capsys.readouterr()
    with Campaign.open(campaign) as camp:
        assert camp.limits_keys() == [Limits(max_delay_s=500e-6).key()]
