"""Lot statistics over measurement tables built by the test."""

import json

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from labtool.errors import UsageError
from labtool.stats.lot import lot_statistics, lot_table, process_capability
from tests.stats.tables import measurement_table, set_verdict


def test_cpk_matches_the_handbook_definition():
    # NIST/SEMATECH e-Handbook §6.1.6: Cpk = min(USL − μ, μ − LSL)/(3σ) (from memory); e.g.
    # USL 20, LSL 8, μ 16, σ 2 → min(4, 8)/6 = 0.6667; with the upper limit alone Cpu = (USL − μ)/(3σ).
    assert process_capability(16.0, 2.0, usl=20.0, lsl=8.0) == pytest.approx(2 / 3)
    assert process_capability(16.0, 2.0, usl=20.0) == pytest.approx(2 / 3)
    assert process_capability(10.0, 1.0, usl=16.0) == pytest.approx(2.0)
    assert process_capability(10.0, 0.0, usl=16.0) is None


def test_counts_bounds_and_delay_statistics_per_lot():
    df = measurement_table(lots=("ZR24A", "ZR24B"))
    b = df["lot"] == "ZR24B"
    df = set_verdict(df, b & (df["part"] == "p03") & (df["ramp_s"] == 1e-3), "stuck_at_zero")
    df = set_verdict(df, b & (df["part"] == "p05") & (df["temperature_c"] == 125.0), "ringing")
    df = set_verdict(df, b & (df["part"] == "p06") & (df["repeat"] == 0), "no_supply")
    out = {s.group["lot"]: s for s in lot_statistics(df, spec_max_delay_s=10e-6)}
    a, bb = out["ZR24A"], out["ZR24B"]
    assert a.n == 144 and a.n_parts == 8 and a.n_started == 144 and a.n_stuck == 0
    # Zero stuck in 144: one-sided bound 1 − 0.05^(1/144) (Hanley & Lippman-Hand 1983).
    assert a.stuck_ucl95 == pytest.approx(1 - 0.05 ** (1 / 144), rel=1e-9)
    assert bb.n_stuck == 9 and bb.n_ringing == 6 and bb.n_no_supply == 6 and bb.n_started == 123
    # Reference: scipy.stats.binomtest(9, 144, alternative="less").proportion_ci(method="exact").high
    ref = stats.binomtest(9, 144, alternative="less").proportion_ci(0.95, method="exact").high
    assert bb.stuck_ucl95 == pytest.approx(ref, rel=1e-9)
    assert bb.stuck_ppm_ucl95 == pytest.approx(ref * 1e6, rel=1e-9)
    d = df.loc[df["lot"] == "ZR24A", "delay_s"].to_numpy()
    # Reference: numpy.percentile (linear interpolation) and numpy mean/std (ddof=1).
    assert a.delay_median_s == pytest.approx(np.median(d))
    assert a.delay_p05_s == pytest.approx(np.percentile(d, 5))
    assert a.delay_p95_s == pytest.approx(np.percentile(d, 95))
    assert a.delay_std_s == pytest.approx(d.std(ddof=1))
    assert a.delay_n == 144 and bb.delay_n == 144 - 9 - 6
    assert a.cpk == pytest.approx((10e-6 - d.mean()) / (3 * d.std(ddof=1)))
    assert a.delay_fit.distribution == "lognormal"


def test_outliers_are_found_within_their_setup_cell():
    df = measurement_table()
    slow_cell = df["ramp_s"] == 1e-3
    df.loc[slow_cell, "delay_s"] *= 3.0  # a whole set-up slower is not an outlier
    df.loc[df.index[5], "delay_s"] = 60e-6  # one capture far out
    (s,) = lot_statistics(df)
    assert s.outliers == (df.loc[df.index[5], "capture_id"],)


def test_intermittent_parts_have_disagreeing_power_cycles_at_one_setup():
    df = measurement_table()
    # p02: one of three repeats stuck at one set-up → intermittent.
    df = set_verdict(df, (df["part"] == "p02") & (df["ramp_s"] == 1e-3) & (df["temperature_c"] == -40.0)
                     & (df["repeat"] == 1), "stuck_at_zero")
    # p04: always stuck on slow ramps, always started on fast → deterministic, not intermittent.
    df = set_verdict(df, (df["part"] == "p04") & (df["ramp_s"] == 1e-3), "stuck_at_zero")
    (s,) = lot_statistics(df)
    assert s.intermittent_parts == ("ZR24A/p02",)


def test_grouping_by_conditions_and_tags():
    df = measurement_table(lots=("ZR24A",))
    df["board"] = np.where(df["part"].isin(["p01", "p02"]), "b1", "b2")
    res = lot_statistics(df, by=("temperature_c", "board"))
    assert [(s.group["temperature_c"], s.group["board"]) for s in res] == [
        (-40.0, "b1"), (-40.0, "b2"), (25.0, "b1"), (25.0, "b2"), (125.0, "b1"), (125.0, "b2")]
    assert [s.n for s in res[:2]] == [12, 36]
    table = lot_table(res)
    assert list(table["n"]) == [12, 36] * 3 and "delay_fit_distribution" in table


def test_unknown_group_key_is_one_clear_error():
    with pytest.raises(UsageError, match=r"--by: no column wafer_x in the measurement table \(columns: lot,"):
        lot_statistics(measurement_table(), by=("wafer_x",))


def test_json_form_has_the_issue_keys_and_is_valid_json():
    df = set_verdict(measurement_table(), measurement_table().index[:2], "stuck_at_zero")
    rec = lot_statistics(df, spec_max_delay_s=20e-6)[0].to_json_dict()
    for key in ("lot", "n", "n_parts", "n_started", "n_stuck", "n_slow", "n_ringing", "n_recollapse",
                "n_wrong_level", "n_incomplete", "n_no_supply", "stuck_ucl95", "stuck_ppm_ucl95",
                "delay_median_s", "delay_p05_s", "delay_p95_s", "delay_mean_s", "delay_std_s", "delay_fit",
                "cpk", "outliers", "intermittent_parts"):
        assert key in rec, key
    assert rec["lot"] == "ZR24A" and rec["n_stuck"] == 2
    assert json.loads(json.dumps(rec, allow_nan=False))["delay_fit"]["distribution"] == "lognormal"


def test_part_labels_with_and_without_lot():
    from labtool.stats.table import part_labels

    df = pd.DataFrame({"lot": ["ZR24A", None, "ZR24B"], "part": ["p01", "p02", None]})
    assert part_labels(df).tolist() == ["ZR24A/p01", "p02", ""]
    assert part_labels(df.drop(columns="lot")).tolist() == ["p01", "p02", ""]


def test_no_grouping_gives_one_whole_table_group():
    df = measurement_table(lots=("ZR24A", "ZR24B"))
    (s,) = lot_statistics(df, by=())
    assert s.group == {} and s.n == len(df) and s.n_parts == 16
