"""``labtool predict``: the exact CLI contract of issue #4."""

import json

import pytest

from labtool.cli import main

from .conftest import DEMO


def _last_json(capsys):
    return json.loads(capsys.readouterr().out.strip().splitlines()[-1])


def test_json_contract(capsys):
    assert main(["predict", str(DEMO), "--json", "--set", "i_start_a=2e-6", "--temp", "125", "--ramp", "20us",
                 "--montecarlo", "6", "--seed", "4"]) == 0
    out = _last_json(capsys)
    p = out["params"]
    assert {"is_a", "area_ratio", "r1_ohm", "temperature_c", "i_start_a"} <= set(p)
    assert p["i_start_a"] == 2e-6 and p["temperature_c"] == 125.0 and p["ramp_s"] == pytest.approx(20e-6)
    assert {"i_op_a", "i_switch_a", "dvbe_v", "vref_v", "i_start_min_a", "offset_limit_v"} <= set(out["dc"])
    assert 1.15 < out["dc"]["vref_v"] < 1.25
    mc = out["montecarlo"]
    assert mc["n"] == 6 and mc["seed"] == 4 and mc["p_stuck"] == 0.0
    assert 0 < mc["delay_median_s"] <= mc["delay_p95_s"] < 1e-3
    assert "not transistor-level sign-off" in out["model"]


def test_readable_summary_and_waveform(tmp_path, capsys):
    from labtool.ingest import read_path

    csv = tmp_path / "nominal.csv"
    assert main(["predict", str(DEMO), "--waveform", str(csv)]) == 0
    text = capsys.readouterr().out
    assert "ZR-4410" in text and "not transistor-level sign-off" in text and "i_op 5.03 µA" in text
    cap = read_path(str(csv))[0]
    assert {c.role for c in cap.channels} >= {"supply", "output", "supply_current"}
    assert cap.channel("output").values[-1] == pytest.approx(1.2032, abs=1e-3)
    assert cap.times()[-1] == pytest.approx(110e-6, rel=1e-6)


def test_bad_set_is_one_line_error(capsys):
    assert main(["predict", str(DEMO), "--set", "r1_ohm=zero"]) == 5
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "r1_ohm = 'zero': expected a number" in err and "Traceback" not in err
