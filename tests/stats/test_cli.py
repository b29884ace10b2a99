"""The CLI contracts of issue #5: commands, flags and JSON keys (exact)."""

import json

import pytest

from labtool.cli import main
from tests.stats.tables import campaign_from_table, measurement_table, set_verdict

LOT_KEYS = {"n", "n_parts", "n_started", "n_stuck", "n_slow", "n_ringing", "n_recollapse", "n_wrong_level",
            "n_incomplete", "n_no_supply", "stuck_ucl95", "stuck_ppm_ucl95", "delay_median_s", "delay_p05_s",
            "delay_p95_s", "delay_mean_s", "delay_std_s", "cpk", "outliers", "intermittent_parts"}


@pytest.fixture(scope="module")
def campaign(tmp_path_factory):
    df = measurement_table(lots=("ZR24A", "ZR24B"), parts=3, temps=(-40.0, 25.0), repeats=2)
    df = set_verdict(df, (df["lot"] == "ZR24B") & (df["part"] == "p02") & (df["ramp_s"] == 1e-3), "stuck_at_zero")
    return campaign_from_table(tmp_path_factory.mktemp("camp") / "c", df)


def _json_lines(capsys):
    return [json.loads(line) for line in capsys.readouterr().out.splitlines() if line.strip()]


def test_lot_json_one_object_per_group_with_the_keys(campaign, capsys):
    assert main(["lot", campaign, "--json", "--spec-max-delay", "20us"]) == 0
    recs = _json_lines(capsys)
    assert [r["lot"] for r in recs] == ["ZR24A", "ZR24B"]
    assert LOT_KEYS <= set(recs[0])
    assert recs[1]["n"] == 24 and recs[1]["n_stuck"] == 4 and recs[1]["n_parts"] == 3
    assert recs[0]["cpk"] is not None and recs[0]["n_stuck"] == 0


def test_lot_by_two_keys_and_readable_table(campaign, capsys):
    assert main(["lot", campaign, "--by", "lot,temperature_c", "--json"]) == 0
    recs = _json_lines(capsys)
    assert [(r["lot"], r["temperature_c"]) for r in recs] == [
        ("ZR24A", -40.0), ("ZR24A", 25.0), ("ZR24B", -40.0), ("ZR24B", 25.0)]
    assert main(["lot", campaign]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0].split()[:3] == ["lot", "n", "n_parts"] and out[2].split()[:4] == ["ZR24B", "24", "3", "20"]


def test_lot_unknown_key_is_one_line_error(campaign, capsys):
    assert main(["lot", campaign, "--by", "nosuch"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("labtool lot: --by: no column nosuch")


COMPARE_KEYS = {"n_measured", "n_predicted", "measured_delay_median_s", "predicted_delay_median_s",
                "measured_delay_iqr_s", "predicted_delay_iqr_s", "ks_stat", "ks_pvalue", "ad_stat", "ad_pvalue",
                "measured_n_stuck", "measured_p_stuck", "predicted_n_stuck", "predicted_p_stuck", "stuck_pvalue",
                "finding", "finding_text"}


def test_compare_with_a_predictions_file(campaign, tmp_path, capsys):
    pred = tmp_path / "pred.csv"
    lines = ["ramp_s,temperature_c,delay_s,stuck"]
    for r in ("1e-5", "1e-3"):
        for t in ("-40", "25"):
            lines += [f"{r},{t},{6e-6 * (0.8 + 0.4 * i / 99):.4e},false" for i in range(100)]
    pred.write_text("\n".join(lines) + "\n")
    assert main(["compare", campaign, "--predictions", str(pred), "--json"]) == 0
    recs = _json_lines(capsys)
    assert [r["lot"] for r in recs] == ["ZR24A", "ZR24B"]
    assert COMPARE_KEYS <= set(recs[0])
    assert recs[1]["finding"] == "more_stuck" and recs[1]["measured_n_stuck"] == 4
    assert main(["compare", campaign, "--predictions", str(pred)]) == 0
    out = capsys.readouterr().out
    assert "lot=ZR24B: more stuck than predicted: 4 of 24 measured" in out


def test_compare_needs_exactly_one_source(campaign, capsys):
    with pytest.raises(SystemExit):
        main(["compare", campaign])
    capsys.readouterr()


@pytest.fixture(scope="module")
def design_file(tmp_path_factory):
    from labtool.model import Design
    from labtool.stats.calibrate import write_design

    path = tmp_path_factory.mktemp("design") / "zr4410.toml"
    write_design(Design(name="ZR-4410"), path)
    return str(path)


def test_compare_with_the_model(campaign, design_file, capsys):
    assert main(["compare", campaign, "--model", design_file, "--samples", "12", "--scheduler", "local:1",
                 "--by", "lot", "--json"]) == 0
    recs = _json_lines(capsys)
    assert [r["lot"] for r in recs] == ["ZR24A", "ZR24B"]
    assert COMPARE_KEYS <= set(recs[0])
    assert recs[0]["n_predicted"] == 48 and recs[0]["match_columns"] == ["ramp_s", "temperature_c"]


def test_calibrate_writes_a_loadable_design_and_reports_json(tmp_path, design_file, capsys):
    from labtool.model import load_design

    df = measurement_table(parts=6, ramps=(1e-6,), temps=(27.0,), repeats=1,
                           delay_s=lambda rng, n: rng.normal(40e-6, 2e-6, n))  # invented lot
    camp = campaign_from_table(tmp_path / "c", df)
    out = tmp_path / "cal.toml"
    assert main(["calibrate", camp, "--model", design_file, "--fit", "c_scale", "--out", str(out),
                 "--samples", "10", "--predict-samples", "5", "--at", "10ms@-40", "--scheduler", "local:1",
                 "--json"]) == 0
    (rec,) = _json_lines(capsys)
    (p,) = rec["parameters"]
    assert set(p) == {"name", "initial", "estimate", "ci95_low", "ci95_high", "interval"}
    assert p["name"] == "c_scale" and p["estimate"] > 1.2  # 40 µs vs the design's ~26 µs at this set-up
    (pred,) = rec["predictions"]
    assert (pred["ramp_s"], pred["temperature_c"], pred["n_samples"]) == (0.01, -40.0, 5)
    assert load_design(out).c_out_f == pytest.approx(p["estimate"] * load_design(design_file).c_out_f)
    assert out.read_text().startswith("# Calibrated by labtool calibrate")


def test_calibrate_bad_fit_name(campaign, design_file, capsys):
    assert main(["calibrate", campaign, "--model", design_file, "--fit", "nosuch_a"]) == 2
    assert capsys.readouterr().err.strip().startswith("labtool calibrate: --fit nosuch_a: not a design parameter")
