"""Measured vs predicted: tests against scipy.stats, findings on lots built to show them."""

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from labtool.errors import InputError
from labtool.stats.compare import compare, comparison_table, mixed_prediction
from labtool.stats.predictions import load_predictions
from labtool.units import format_si
from tests.stats.tables import measurement_table, set_verdict


def _predictions(scale=1.0, sigma=0.2, p_stuck=0.0, n=300, seed=21, ramps=(1e-5, 1e-3), temps=(-40.0, 25.0, 125.0)):
    """Predicted samples per set-up (invented data: a lognormal delay law and a stuck fraction)."""
    rng = np.random.default_rng(seed)
    rows = []
    for r in ramps:
        for t in temps:
            stuck = rng.random(n) < p_stuck
            d = rng.lognormal(np.log(6e-6 * scale), sigma, n)
            rows += [{"ramp_s": r, "temperature_c": t, "delay_s": np.nan if s else x, "stuck": bool(s)}
                     for x, s in zip(d, stuck)]
    return pd.DataFrame(rows)


def test_single_setup_statistics_equal_scipy():
    meas = measurement_table(ramps=(1e-5,), temps=(25.0,), parts=20, seed=3)
    meas = set_verdict(meas, meas.index[:3], "stuck_at_zero")
    pred = _predictions(scale=1.1, p_stuck=0.01, ramps=(1e-5,), temps=(25.0,))
    (c,) = compare(meas, pred)
    a = meas["delay_s"].dropna().to_numpy()
    b = pred["delay_s"].dropna().to_numpy()
    # Reference: scipy.stats.ks_2samp and scipy.stats.anderson_ksamp (midrank) on the same samples.
    ks = stats.ks_2samp(a, b)
    assert (c.ks_stat, c.ks_pvalue) == pytest.approx((ks.statistic, ks.pvalue), rel=1e-12)
    with pytest.warns(UserWarning):
        ad = stats.anderson_ksamp([a, b], variant="midrank")
    assert (c.ad_stat, c.ad_pvalue) == pytest.approx((ad.statistic, ad.pvalue), rel=1e-12)
    # Reference: scipy.stats.fisher_exact on [[stuck, not] measured, [stuck, not] predicted].
    kp = int(pred["stuck"].sum())
    assert c.predicted_n_stuck == kp and c.n_predicted == 300 and c.measured_n_stuck == 3 and c.n_measured == 60
    assert c.stuck_pvalue == pytest.approx(stats.fisher_exact([[3, 57], [kp, 300 - kp]]).pvalue, rel=1e-12)
    assert c.measured_delay_median_s == pytest.approx(np.median(a))
    assert c.predicted_delay_median_s == pytest.approx(np.median(b))


@pytest.mark.parametrize("scale,expected", [(1.0, "consistent"), (0.7, "slower"), (1.4, "faster")])
def test_delay_findings(scale, expected):
    meas = measurement_table(seed=5)
    (c,) = compare(meas, _predictions(scale=scale))
    assert c.finding == expected
    assert c.findings == (expected,)
    if expected != "consistent":
        assert c.ks_pvalue < 1e-6 and c.median_ratio == pytest.approx(1 / scale, rel=0.1)
        assert f"median {format_si(c.measured_delay_median_s, 's')} vs" in c.finding_text


def test_more_stuck_than_predicted_takes_the_lead():
    meas = measurement_table(seed=6)
    meas = set_verdict(meas, (meas["ramp_s"] == 1e-3) & meas["part"].isin(["p01", "p02", "p03"]), "stuck_at_zero")
    (c,) = compare(meas, _predictions(p_stuck=0.002))
    assert c.finding == "more_stuck" and c.measured_n_stuck == 27
    assert c.stuck_pvalue < 1e-6
    assert c.finding_text.startswith("more stuck than predicted: 27 of 144 measured")


def test_measured_mix_of_setups_weights_the_prediction():
    # Two set-ups with very different predicted delays; measured 3:1 → predicted pseudo-sample 3:1.
    fast = pd.DataFrame({"ramp_s": 1e-5, "delay_s": np.linspace(1e-6, 2e-6, 100), "stuck": False})
    slow = pd.DataFrame({"ramp_s": 1e-3, "delay_s": np.linspace(10e-6, 20e-6, 100), "stuck": False})
    pred = {(1e-05,): fast, (0.001,): slow}
    d, s = mixed_prediction(pred, {(1e-05,): 30, (0.001,): 10})
    assert d.size == 200 and not s.any()
    assert np.count_nonzero(d < 5e-6) == 150


def test_no_supply_captures_are_left_out_and_unmatched_counted():
    meas = measurement_table(seed=7)
    meas = set_verdict(meas, meas.index[:4], "no_supply")
    (c,) = compare(meas, _predictions(temps=(-40.0, 25.0)))
    # The first 4 rows are at -40 and 25 °C; the 48 captures at 125 °C have no prediction.
    assert c.n_unmatched == 48 and c.n_measured == 144 - 4 - 48
    assert list(comparison_table([c])["match_columns"]) == ["ramp_s,temperature_c"]


def test_load_predictions_csv_and_xlsx(tmp_path):
    csv = tmp_path / "pred.csv"
    csv.write_text("ramp_s,temperature_c,delay_s,stuck,corner\n1e-5,25,6.1e-6,false,tt\n1e-3,-40,,TRUE,ss\n")
    df = load_predictions(csv)
    assert df["stuck"].tolist() == [False, True] and df["delay_s"].iloc[0] == 6.1e-6
    assert df["corner"].tolist() == ["tt", "ss"]
    xlsx = tmp_path / "pred.xlsx"
    df.to_excel(xlsx, index=False)
    back = load_predictions(xlsx)
    assert back["stuck"].tolist() == [False, True] and back["ramp_s"].tolist() == [1e-5, 1e-3]


@pytest.mark.parametrize("text,message", [
    ("ramp_s,delay_s\n1e-5,1e-6\n", r"pred.csv:1: no column 'stuck' \(columns: ramp_s, delay_s\)"),
    ("delay_s,stuck\n1e-6,false\n2e-6,maybe\n", r"pred.csv:3 \[stuck\]: stuck must be true or false \(got 'maybe'\)"),
    ("delay_s,stuck\n1e-6,false\nfast,false\n", r"pred.csv:3 \[delay_s\]: not a number"),
    ("delay_s,stuck\n,false\n", r"pred.csv:2 \[delay_s\]: a row that is not stuck needs a delay"),
])
def test_bad_predictions_tables_get_one_clear_error(tmp_path, text, message):
    path = tmp_path / "pred.csv"
    path.write_text(text)
    with pytest.raises(InputError, match=message):
        load_predictions(path)


def test_negative_delays_on_slow_ramps_keep_the_right_direction():
    # On slow ramps the output is up before the supply is valid: delays are negative. Measured
    # −100 µs against a predicted −250 µs is a later start, i.e. slower (invented data).
    meas = measurement_table(ramps=(1e-2,), temps=(25.0,), parts=20, seed=8,
                             delay_s=lambda rng, n: rng.normal(-100e-6, 5e-6, n))
    rng = np.random.default_rng(9)
    pred = pd.DataFrame({"ramp_s": 1e-2, "temperature_c": 25.0, "delay_s": rng.normal(-250e-6, 5e-6, 200),
                         "stuck": False})
    (c,) = compare(meas, pred)
    assert c.finding == "slower"
    assert c.delay_shift_s == pytest.approx(150e-6, rel=0.05)
    assert c.median_ratio is None  # a ratio of negative delays means nothing
    assert c.finding_text.startswith("slower than predicted: delays +149 µs from the prediction")


def test_shift_is_taken_per_setup_in_a_mixed_group():
    # Fast set-up 5 µs predicted, slow −200 µs predicted; measured both exactly 2 µs later.
    meas = measurement_table(ramps=(1e-5, 1e-2), temps=(25.0,), parts=10, repeats=2, seed=9)
    meas["delay_s"] = np.where(meas["ramp_s"] == 1e-5, 7e-6, -198e-6) + np.linspace(-1e-7, 1e-7, len(meas))
    pred = pd.concat([pd.DataFrame({"ramp_s": 1e-5, "delay_s": np.linspace(4.9e-6, 5.1e-6, 50), "stuck": False}),
                      pd.DataFrame({"ramp_s": 1e-2, "delay_s": np.linspace(-200.1e-6, -199.9e-6, 50), "stuck": False})])
    (c,) = compare(meas, pred.assign(temperature_c=25.0))
    assert c.delay_shift_s == pytest.approx(2e-6, rel=0.1)
    assert c.finding == "slower"


def test_spread_is_judged_within_setups():
    # Invented data: two set-ups 100 µs apart; measured centred on the prediction at each but twice
    # as spread. The mixture's IQR is set by the set-ups, the within-set-up ratio is 2.
    rng = np.random.default_rng(12)
    meas = measurement_table(ramps=(1e-5, 1e-2), temps=(25.0,), parts=40, repeats=3, seed=12)
    centre = np.where(meas["ramp_s"] == 1e-5, 6e-6, -100e-6)
    meas["delay_s"] = centre + rng.normal(0, 2e-6, len(meas))
    pred = pd.concat([pd.DataFrame({"ramp_s": r, "temperature_c": 25.0, "stuck": False,
                                    "delay_s": c + rng.normal(0, 1e-6, 400)}) for r, c in ((1e-5, 6e-6), (1e-2, -100e-6))])
    (c,) = compare(meas, pred)
    assert c.finding == "wider"
    assert c.spread_ratio == pytest.approx(2.0, rel=0.15)
    assert abs(c.delay_shift_iqr) < 0.25
