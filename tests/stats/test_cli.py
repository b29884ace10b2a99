"""The CLI contracts of issue #5: commands, flags and JSON keys (exact)."""

import json

import pytest

from labtool.cli import main
from labtool.measure.verdict import VERDICTS
from tests.stats.tables import campaign_from_table, measurement_table, set_verdict

@pytest.fixture(scope="module")
def campaign(tmp_path_factory):
    df = measurement_table(lots=("ZR24A", "ZR24B"), parts=3, temps=(-40.0, 25.0), repeats=2)
    df = set_verdict(df, (df["lot"] == "ZR24B") & (df["part"] == "p02") & (df["ramp_s"] == 1e-3), "stuck_at_zero")
    return campaign_from_table(tmp_path_factory.mktemp("camp") / "c", df)


def _json_lines(capsys):
    return [json.loads(line) for line in capsys.readouterr().out.splitlines() if line.strip()]


# Issue 13 contract of `labtool lot --json`: group rows and set-up rows with these keys (exact names).
GROUP_KEYS = {"row", "lot", "n_captures", "n_parts", "n_parts_stuck", "parts_stuck_upper95", "parts_stuck_ppm_upper95",
              "start_stuck_rate", "start_stuck_upper95", "intermittent_parts", *(f"n_{v}" for v in VERDICTS)}
SETUP_KEYS = {"row", "lot", "ramp_s", "temperature_c", "vdd_v", "n_captures", "delay_n", "delay_median_s",
              "delay_p05_s", "delay_p95_s", "delay_mean_s", "delay_std_s", "delay_fit", "cpk", "outliers"}
GONE = {"stuck_ucl95", "stuck_ppm_ucl95", "n_stuck", "n_slow", "n"}


def test_lot_json_group_and_setup_rows_with_the_issue_keys(lot, capsys):
    assert main(["lot", lot[0], "--json", "--spec-max-delay", "100us"]) == 0
    recs = _json_lines(capsys)
    assert [(r["row"], r["lot"]) for r in recs] == [("group", "LT1")] + [("setup", "LT1")] * 5 + \
        [("group", "LT2")] + [("setup", "LT2")] * 5
    for r in recs:
        assert (GROUP_KEYS if r["row"] == "group" else SETUP_KEYS) <= set(r) and not GONE & set(r)
    lt1 = recs[0]
    assert lt1["n_parts_stuck"] == 2 and lt1["n_stuck_at_zero"] == 5 and lt1["n_recollapse"] == 1
    assert lt1["delay_median_s"] is None  # five set-ups: no pooled delay figures
    assert lt1["intermittent_parts"] == ["LT1/p02", "LT1/p05"]
    fast_cold = recs[1]
    assert (fast_cold["ramp_s"], fast_cold["temperature_c"], fast_cold["vdd_v"]) == (1e-5, -40.0, 1.8)
    assert fast_cold["delay_n"] == 17 and fast_cold["cpk"] is not None and fast_cold["delay_fit"]["n"] == 17


def test_lot_by_setup_keys_gives_delay_figures_in_the_group_row(lot, capsys):
    assert main(["lot", lot[0], "--by", "lot,ramp_s,temperature_c,vdd_v", "--json"]) == 0
    recs = _json_lines(capsys)
    groups = [r for r in recs if r["row"] == "group"]
    assert len(groups) == 10 and all(g["delay_median_s"] is not None for g in groups)


def test_lot_readable_tables_split_groups_and_setups(lot, capsys):
    assert main(["lot", lot[0]]) == 0
    out = capsys.readouterr().out
    head, rest = out.split("\nper set-up")
    lines = head.splitlines()
    assert lines[0].split()[:4] == ["lot", "n_captures", "n_parts", "n_parts_stuck"]
    assert lines[1].split()[:4] == ["LT1", "90", "6", "2"]
    assert "ready before supply valid" in rest and "after supply valid" in rest
    assert "µs" in rest and "1e+03" not in out


def test_lot_unknown_key_is_one_line_error(lot, capsys):
    assert main(["lot", lot[0], "--by", "nosuch"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("labtool lot: --by: no column nosuch")


COMPARE_KEYS = {"n_measured", "n_predicted", "measured_delay_median_s", "predicted_delay_median_s",
                "measured_delay_iqr_s", "predicted_delay_iqr_s", "ks_stat", "ks_pvalue", "ad_stat", "ad_pvalue",
                "measured_n_stuck", "measured_p_stuck", "predicted_n_stuck", "predicted_p_stuck", "stuck_pvalue",
                "finding", "finding_text", "row", "measured_n_parts", "measured_n_parts_stuck", "predicted_n_parts",
                "predicted_n_parts_stuck", "predicted_p_part_stuck"}


def test_compare_with_a_predictions_file(lot, tmp_path, capsys):
    pred = tmp_path / "pred.csv"
    lines = ["ramp_s,temperature_c,delay_s,stuck,sample"]
    for r, t, d in ((1e-5, -40, 20e-6), (1e-5, 125, 12e-6), (1e-3, -40, -250e-6), (1e-3, 125, -200e-6), (1e-5, 25, 15e-6)):
        lines += [f"{r},{t},{d * (1 + 0.1 * (i - 49.5) / 49.5 * (1 if d > 0 else -0.2)):.4e},false,{i}" for i in range(100)]
    pred.write_text("\n".join(lines) + "\n")
    assert main(["compare", lot[0], "--predictions", str(pred), "--json"]) == 0
    recs = _json_lines(capsys)
    groups = [r for r in recs if r["row"] == "group"]
    assert [r["lot"] for r in groups] == ["LT1", "LT2"]
    assert COMPARE_KEYS <= set(groups[0])
    assert groups[0]["finding"] == "more_stuck" and groups[0]["measured_n_parts_stuck"] == 2
    assert groups[0]["predicted_n_parts_stuck"] == 0 and groups[0]["predicted_n_parts"] == 100
    assert main(["compare", lot[0], "--predictions", str(pred)]) == 0
    out = capsys.readouterr().out
    assert "lot=LT1: more stuck than predicted: 2 of 6 parts with a stuck start vs 0 of 100 simulated parts" in out


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


def test_compare_with_the_model(lot, design_file, capsys):
    assert main(["compare", lot[0], "--model", design_file, "--samples", "6", "--scheduler", "local:1",
                 "--by", "lot", "--json"]) == 0
    recs = _json_lines(capsys)
    groups = [r for r in recs if r["row"] == "group"]
    assert [r["lot"] for r in groups] == ["LT1", "LT2"]
    assert COMPARE_KEYS <= set(groups[0])
    assert groups[0]["n_predicted"] == 30 and groups[0]["match_columns"] == ["ramp_s", "temperature_c"]
    assert groups[0]["predicted_n_parts"] == 6  # the same 6 simulated parts at every set-up


def test_model_runs_use_the_limits_the_campaign_was_measured_with(lot, design_file, tmp_path, monkeypatch, capsys):
    """compare and calibrate hand the model's Monte Carlo the stored limits of the measurement set
    (the run is stopped right there: what is checked is what the model was asked)."""
    import labtool.model
    from labtool.errors import ModelError
    from labtool.measure import Limits
    from tests.stats.lots import LIMITS

    seen = []

    def asked(*args, **kwargs):
        seen.append(kwargs.get("limits"))
        raise ModelError("stopped by the test")

    monkeypatch.setattr(labtool.model, "monte_carlo", asked)
    assert main(["compare", lot[0], "--model", design_file, "--samples", "3", "--scheduler", "local:1"]) != 0
    assert main(["calibrate", lot[0], "--model", design_file, "--samples", "5", "--predict-samples", "2",
                 "--out", str(tmp_path / "cal.toml"), "--scheduler", "local:1"]) != 0
    assert "stopped by the test" in capsys.readouterr().err
    assert seen == [Limits(**LIMITS)] * 2 and Limits(**LIMITS) != Limits()


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
