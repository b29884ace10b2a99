"""Lot statistics of a generated lot (waveforms written, ingested and measured by labtool): every figure
against its closed-form or exact-test truth, computed here from the generated starts."""

import numpy as np
import pytest
from scipy import stats

from labtool.measure.verdict import VERDICTS
from labtool.stats.lot import lot_statistics, lot_table
from labtool.stats.setups import process_capability
from tests.stats.lots import FAST_COLD, FAST_HOT, LIMITS, SETUPS, SLOW_COLD, SLOW_HOT

DELAY_VERDICTS = ["started", "slow_start", "ringing"]  # the output came up and stayed (issue 13)


def _by_lot(lot, by=("lot",), spec=None):
    _, joined, _ = lot
    return joined, {s.group["lot"] if "lot" in s.group else None: s for s in lot_statistics(joined, by, spec)}


def _rows(joined, lot_name, setup):
    r, t, v = setup
    return joined[(joined["lot"] == lot_name) & np.isclose(joined["ramp_s"], r) & (joined["temperature_c"] == t)
                  & np.isclose(joined["vdd_v"], v)]


def _kish_korn_graubard_upper(k_i, n_i):
    """One-sided 95 % bound on a per-start rate over clusters, written out from its definition (Korn &
    Graubard, Survey Methodology 24(2) 1998, from memory): design effect = cluster variance of the
    ratio C/(C−1)·Σ(k_i − p·n_i)²/n² over the binomial p(1−p)/(n−1), at least 1; effective size
    n/deff·(t₀.₉₅(n−1)/t₀.₉₅(C−1))² (scipy.stats.t.ppf); Clopper–Pearson (scipy.stats.beta.ppf) there."""
    k_i, n_i = np.asarray(k_i, float), np.asarray(n_i, float)
    k, n, c = k_i.sum(), n_i.sum(), len(n_i)
    p = k / n
    deff = 1.0 if k in (0, n) else max(1.0, c / (c - 1) * np.sum((k_i - p * n_i) ** 2) / n ** 2 / (p * (1 - p) / (n - 1)))
    n_star = min(n, n / deff * (stats.t.ppf(0.95, n - 1) / stats.t.ppf(0.95, c - 1)) ** 2)
    return stats.beta.ppf(0.95, p * n_star + 1, (1 - p) * n_star), deff


def test_parts_are_the_unit_of_the_stuck_bound(lot):
    joined, out = _by_lot(lot)
    a, b = out["LT1"], out["LT2"]
    # Generated: LT1 p02 (2 of 3 starts) and p04 (3 of 3) stuck; 18 captures of 6 parts were never 18 trials.
    assert (a.n_parts, a.n_parts_tested, a.n_parts_stuck) == (6, 6, 2)
    # Reference: scipy.stats.binomtest(2, 6, alternative="less").proportion_ci(method="exact") (Clopper–Pearson).
    ref = stats.binomtest(2, 6, alternative="less").proportion_ci(0.95, method="exact").high
    assert a.parts_stuck_upper95 == pytest.approx(ref, rel=1e-10)
    assert a.parts_stuck_ppm_upper95 == pytest.approx(ref * 1e6, rel=1e-10)
    # LT2's only stuck start was in a file that changed afterwards: its old version does not count.
    assert b.n_parts_stuck == 0 and b.counts["n_stuck_at_zero"] == 0
    # Zero of 5 parts: 1 − 0.05^(1/5) (Hanley & Lippman-Hand, JAMA 249(13) 1983).
    assert b.parts_stuck_upper95 == pytest.approx(1 - 0.05 ** (1 / 5), rel=1e-10)


def test_per_start_rate_allows_for_repeated_starts_of_one_part(lot):
    joined, out = _by_lot(lot)
    a = out["LT1"]
    lt1 = joined[joined["lot"] == "LT1"]
    per_part = lt1.assign(k=lt1["verdict"] == "stuck_at_zero").groupby("part").agg(k=("k", "sum"), n=("k", "size"))
    assert per_part["k"].tolist() == [0, 2, 0, 3, 0, 0] and per_part["n"].tolist() == [15] * 6
    assert a.start_stuck.rate == pytest.approx(5 / 90) and a.start_stuck.n == 90
    upper, deff = _kish_korn_graubard_upper(per_part["k"], per_part["n"])
    assert a.start_stuck.design_effect == pytest.approx(deff, rel=1e-12) and deff > 1.5
    assert a.start_stuck.upper95 == pytest.approx(upper, rel=1e-10)
    # ... wider than the Clopper–Pearson bound that counts the 90 starts as independent trials.
    naive = stats.binomtest(5, 90, alternative="less").proportion_ci(0.95, method="exact").high
    assert a.start_stuck.upper95 > naive * 1.2


def test_verdict_counts_under_their_own_names_and_intermittent_parts(lot):
    joined, out = _by_lot(lot)
    for name, s in out.items():
        truth = joined.loc[joined["lot"] == name, "verdict_generated"].value_counts()
        assert s.counts == {f"n_{v}": int(truth.get(v, 0)) for v in VERDICTS}
        assert s.n_captures == int(truth.sum())
    assert out["LT1"].counts["n_recollapse"] == 1 and out["LT2"].counts["n_no_supply"] == 1
    # LT1 p02 (stuck and started at the slow cold set-up) and p05 (re-collapse and starts at slow hot).
    assert out["LT1"].intermittent_parts == ("LT1/p02", "LT1/p05") and out["LT2"].intermittent_parts == ()


@pytest.mark.parametrize("lot_name", ["LT1", "LT2"])
def test_delay_figures_per_setup_from_the_starts_that_came_up_and_stayed(lot, lot_name):
    joined, out = _by_lot(lot, spec=LIMITS["max_delay_s"])
    s = out[lot_name]
    assert [tuple(x.setup.values()) for x in s.setups] == sorted(SETUPS)
    for summary in s.setups:
        rows = _rows(joined, lot_name, tuple(summary.setup.values()))
        counted_rows = rows[rows["verdict"].isin(DELAY_VERDICTS)]
        d = counted_rows["delay_s"].to_numpy()
        q = summary.delay
        # Reference: numpy.percentile (linear interpolation) and numpy mean / std (ddof = 1).
        assert q.n == d.size and summary.n_captures == len(rows)
        assert (q.median, q.p05, q.p95) == pytest.approx(tuple(np.percentile(d, [50, 5, 95])), rel=1e-12)
        assert (q.mean, q.std) == pytest.approx((d.mean(), d.std(ddof=1)), rel=1e-12)
        # ... and the generated truth itself: within one sample interval of the generated delays.
        dt = counted_rows["sample_interval_s"].max()
        assert q.median == pytest.approx(np.median(counted_rows["true_delay_s"]), abs=dt)
        # Cpk = (USL − μ)/(3σ) (NIST/SEMATECH e-Handbook §6.1.6, from memory).
        assert summary.cpk == pytest.approx((LIMITS["max_delay_s"] - d.mean()) / (3 * d.std(ddof=1)), rel=1e-12)


def test_failed_starts_and_old_versions_never_feed_the_delays(lot):
    joined, out = _by_lot(lot)
    setups = {lot_name: {tuple(x.setup.values()): x for x in s.setups} for lot_name, s in out.items()}
    # The re-collapse's −0.7 ms crossing is measured but is no startup delay.
    recollapse = joined[joined["verdict"] == "recollapse"]
    assert recollapse["delay_s"].iloc[0] < -0.6e-3
    hot = setups["LT1"][SLOW_HOT]
    assert hot.delay.n == 17 and hot.delay.p05 > -0.3e-3
    # The wrong level does not count; the slow start (150 µs) and the ringing start do.
    cold = setups["LT1"][FAST_COLD]
    assert cold.delay.n == 17 and cold.counts["n_slow_start"] == 1 and cold.counts["n_wrong_level"] == 1
    assert max(_rows(joined, "LT1", FAST_COLD).query("verdict == 'slow_start'")["delay_s"]) > 140e-6
    assert setups["LT1"][FAST_HOT].delay.n == 18 and setups["LT1"][FAST_HOT].counts["n_ringing"] == 1
    # The stuck starts have no delay: 18 − 5 at the slow cold set-up.
    assert setups["LT1"][SLOW_COLD].delay.n == 13 and setups["LT1"][SLOW_COLD].n_parts_stuck == 2
    # LT2's changed files: the −900 µs start and the stuck start were replaced; only the new ones count.
    assert setups["LT2"][SLOW_COLD].delay.p05 > -0.3e-3 and setups["LT2"][FAST_COLD].delay.n == 15
    assert (joined["version"] == 2).sum() == 2


def test_group_rows_carry_delay_figures_only_for_a_single_setup(lot):
    joined, out = _by_lot(lot)
    row = out["LT1"].to_json_dict()
    assert row["row"] == "group" and row["n_setups"] == 5
    assert all(row[k] is None for k in ("delay_median_s", "delay_p05_s", "delay_fit", "cpk", "delay_n"))
    one = lot_statistics(joined, ("lot", "ramp_s", "temperature_c", "vdd_v"))
    assert len(one) == 10
    for s in one:
        (setup_row,) = s.setup_rows()
        group_row = s.to_json_dict()
        for key in ("delay_n", "delay_median_s", "delay_p05_s", "delay_p95_s", "delay_mean_s", "delay_std_s",
                    "delay_fit", "cpk", "outliers"):
            assert group_row[key] == setup_row[key], key


def test_fit_and_outliers_within_a_setup(lot):
    joined, out = _by_lot(lot)
    hot = {tuple(x.setup.values()): x for x in out["LT1"].setups}[SLOW_HOT]
    d = _rows(joined, "LT1", SLOW_HOT).query("verdict in @DELAY_VERDICTS")
    x = d["delay_s"].to_numpy()
    # Negative delays: only the normal law applies; its maximum-likelihood parameters are the mean and
    # the ddof-0 standard deviation (closed form).
    assert hot.delay_fit.distribution == "normal" and hot.delay_fit.n == 17
    assert (hot.delay_fit.params["mean_s"], hot.delay_fit.params["std_s"]) == pytest.approx((x.mean(), x.std()))
    # Modified z = 0.6745 (x − median)/MAD, |M| > 3.5 (Iglewicz & Hoaglin 1993; e-Handbook §1.3.5.17).
    m = 0.6745 * (x - np.median(x)) / np.median(np.abs(x - np.median(x)))
    expected = tuple(sorted(d.loc[np.abs(m) > 3.5, "capture_id"]))
    assert hot.outliers == expected
    assert d.loc[d["capture_id"].isin(expected), "part"].tolist() == ["p01"]  # the −120 µs start
    assert process_capability(16.0, 2.0, usl=20.0, lsl=8.0) == pytest.approx(2 / 3)  # e-Handbook §6.1.6 form


def test_supply_at_output_valid_beside_the_delay(lot):
    joined, out = _by_lot(lot)
    for s in out["LT1"].setups:
        rows = _rows(joined, "LT1", tuple(s.setup.values())).query("verdict in @DELAY_VERDICTS")
        # Reference: numpy.median of the engine's values; within 5 mV of the generated supply at the
        # output's 90 % crossing (0.5 mV noise on a linear ramp).
        assert s.vsupply_at_valid.median == pytest.approx(np.median(rows["vsupply_at_valid_v"]), rel=1e-12)
        assert s.vsupply_at_valid.median == pytest.approx(np.median(rows["true_vsupply_at_valid_v"]), abs=5e-3)
        slow = s.setup["ramp_s"] > 1e-4
        assert s.ready_before_supply_valid is slow
        if slow:  # up before the supply is valid: the output was valid at about 1.3 V of a 1.8 V supply
            assert 1.1 < s.vsupply_at_valid.median < 1.62


def test_table_form_has_group_and_setup_rows(lot):
    joined, out = _by_lot(lot)
    table = lot_table(out.values())
    assert table["row"].tolist() == ["group"] + ["setup"] * 5 + ["group"] + ["setup"] * 5
    assert {"delay_fit_distribution", "delay_fit_ad_pvalue", "delay_fit_ad_pvalue_bound"} <= set(table.columns)
