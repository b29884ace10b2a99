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
    assert mc["method"] == "plain Monte Carlo" and mc["n_failed"] == 0 and mc["failed"] == []
    # Clopper–Pearson with 0 of 6: [0, 1 − 0.025^(1/6)] (scipy.stats.binomtest(0, 6).proportion_ci)
    assert mc["p_stuck_ci95"] == [0.0, pytest.approx(1 - 0.025 ** (1 / 6))]
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


_ONE_PARAMETER = ["sigma_offset_v=0", "sigma_is_rel=0", "sigma_r_rel=0", "sigma_c_rel=0", "sigma_i_start_rel=0.21"]


def test_rare_json_contract_and_summary(capsys):
    # Issue #18 contract: --rare adds method, p_stuck, p_stuck_ci95, n_transients, beta, ess, mpp. Only the
    # startup current varies (σ 21 %), so the stuck point is I_start at (I_min/I0 − 1)/σ ≈ −4.76 σ
    # (tests/model/test_rare.py checks the probability itself against Φ of that).
    args = ["predict", str(DEMO), "--rare", "--montecarlo", "40", "--seed", "2", "--temp", "-40", "--ramp", "10ms",
            "--set", *_ONE_PARAMETER]
    assert main([*args[:2], "--json", *args[2:]]) == 0
    mc = _last_json(capsys)["montecarlo"]
    assert {"method", "p_stuck", "p_stuck_ci95", "n_transients", "beta", "ess", "mpp"} <= set(mc)
    low, high = mc["p_stuck_ci95"]
    assert 0 <= low <= mc["p_stuck"] <= high < 1e-5 and mc["n_transients"] > mc["n"] == 40
    assert mc["beta"] == pytest.approx(4.76, abs=0.05)
    assert mc["mpp"][0]["parameter"] == "i_start_a" and mc["mpp"][0]["sigma"] == pytest.approx(-4.76, abs=0.05)
    assert mc["delay_median_s"] is None  # importance samples are not a lot: no delay distribution
    assert main(args) == 0
    text = capsys.readouterr().out
    assert "most likely cause of a stuck start: startup current −4.8 σ" in text
    assert "reliability index β = 4.76" in text


def test_rare_needs_two_samples(capsys):
    assert main(["predict", str(DEMO), "--rare", "--montecarlo", "1"]) == 2
    assert "--montecarlo 1: must be ≥ 2" in capsys.readouterr().err
