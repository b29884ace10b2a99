"""Measured against predicted, on the generated lot (waveforms → ingest → measure): the stuck-at-zero test
over parts against scipy.stats.betabinom / binomtest, the delay tests per set-up against
scipy.stats.ks_2samp / anderson_ksamp on the parts' own delays."""

import warnings

import numpy as np
import pytest
from scipy import stats

from labtool.errors import InputError
from labtool.stats.compare import beta_binomial_pvalue, compare, comparison_table
from labtool.stats.predictions import load_predictions
from tests.stats.lots import FAST_COLD, SETUPS, SLOW_COLD, SLOW_HOT

M = 40  # simulated parts per set-up
DELAY_VERDICTS = ["started", "slow_start", "ringing"]
# The predicted law per (ramp, temperature): as generated, except that the fast cold set-up is
# predicted faster (14 µs, measured 20 µs) and the slow cold one 150 µs earlier (invented data).
_PREDICTED = {FAST_COLD[:2]: 14e-6, SLOW_COLD[:2]: -400e-6}


def _prediction_file(tmp_path, stuck: dict, with_samples: bool = True):
    """A predictions table (docs/predictions-format.md) with M simulated parts at every set-up;
    ``stuck``: (ramp, temperature) → the sample numbers stuck there. Read back through load_predictions."""
    from tests.stats.lots import _BASE

    rng = np.random.default_rng(5)
    lines = ["ramp_s,temperature_c,delay_s,stuck" + (",sample" if with_samples else "")]
    for r, t, _ in SETUPS:
        base = _PREDICTED.get((r, t), _BASE[(r, t)])
        z = rng.standard_normal(M)
        delays = base * np.exp(0.08 * z) if base > 0 else base + 15e-6 * z
        for i, d in enumerate(delays):
            is_stuck = i in stuck.get((r, t), ())
            row = f"{r!r},{t:g},{'' if is_stuck else f'{d:.9g}'},{str(is_stuck).lower()}"
            lines.append(row + (f",{i}" if with_samples else ""))
    path = tmp_path / "pred.csv"
    path.write_text("\n".join(lines) + "\n")
    return load_predictions(path)


@pytest.fixture(scope="module")
def predicted(tmp_path_factory):
    return _prediction_file(tmp_path_factory.mktemp("pred"), {SLOW_COLD[:2]: (0, 1)})


def _by_lot(lot, predicted):
    _, joined, _ = lot
    return joined, {c.group["lot"]: c for c in compare(joined, predicted)}


def test_stuck_test_counts_parts_and_carries_the_monte_carlo_uncertainty(lot, predicted):
    joined, out = _by_lot(lot, predicted)
    a, b = out["LT1"].stuck, out["LT2"].stuck
    # Generated: 2 of LT1's 6 parts have a stuck start; 2 of the 40 simulated parts are stuck somewhere.
    assert (a.n_parts, a.n_parts_stuck, a.predicted_n_parts, a.predicted_n_parts_stuck) == (6, 2, 40, 2)
    # Reference: scipy.stats.betabinom(6, 2 + ½, 40 − 2 + ½) (the Jeffreys posterior of the simulated
    # fraction), two-sided: every count no more likely than the observed one (binomtest's rule).
    pmf = stats.betabinom.pmf(np.arange(7), 6, 2.5, 38.5)
    assert a.pvalue == pytest.approx(pmf[pmf <= pmf[2] * (1 + 1e-7)].sum(), rel=1e-12)
    assert (b.n_parts, b.n_parts_stuck) == (5, 0)
    pmf = stats.betabinom.pmf(np.arange(6), 5, 2.5, 38.5)
    assert b.pvalue == pytest.approx(pmf[pmf <= pmf[0] * (1 + 1e-7)].sum(), rel=1e-12)
    row = out["LT1"].to_json_dict()
    assert row["measured_n_parts_stuck"] == 2 and row["predicted_p_part_stuck"] == pytest.approx(2 / 40)
    assert row["measured_n_stuck"] == 5 and row["stuck_pvalue"] == a.pvalue
    expected_more = a.pvalue < 0.05
    assert (out["LT1"].finding == "more_stuck") is expected_more


def test_the_exact_test_becomes_binomtest_without_monte_carlo_uncertainty():
    # With M → ∞ simulated parts the beta-binomial is the binomial: scipy.stats.binomtest(x, n, p).pvalue.
    for x, n, p in ((1, 2, 0.01), (2, 6, 0.05), (0, 30, 0.1), (9, 20, 0.3)):
        assert beta_binomial_pvalue(x, n, p * 1e9, 10 ** 9) == pytest.approx(stats.binomtest(x, n, p).pvalue, rel=1e-5)
    # One of 2 parts stuck against 0 of 100 simulated: P(X ≥ 1) = 1 − (100.5/101)(101.5/102) in closed form
    # (beta-binomial pmf at 0 = B(a, b + 2)/B(a, b), a = ½, b = 100½); the count 0 is the most likely.
    assert beta_binomial_pvalue(1, 2, 0, 100) == pytest.approx(1 - (100.5 / 101) * (101.5 / 102), rel=1e-12)


def _part_medians(rows):
    up = rows[rows["verdict"].isin(DELAY_VERDICTS)]
    return up.groupby(up["lot"] + "/" + up["part"])["delay_s"].median().to_numpy()


def test_delays_are_compared_set_up_by_set_up_with_parts_as_samples(lot, predicted):
    joined, out = _by_lot(lot, predicted)
    c = out["LT1"]
    assert [tuple(s.setup.values()) for s in c.setups] == sorted(s[:2] for s in SETUPS)
    for s in c.setups:
        r, t = s.setup["ramp_s"], s.setup["temperature_c"]
        rows = joined[(joined["lot"] == "LT1") & np.isclose(joined["ramp_s"], r) & (joined["temperature_c"] == t)]
        pred = predicted[np.isclose(predicted["ramp_s"], r) & (predicted["temperature_c"] == t) & ~predicted["stuck"]]
        parts, pd_ = _part_medians(rows), pred["delay_s"].to_numpy()
        # Reference: scipy.stats.ks_2samp and anderson_ksamp (midrank) on each part's median delay
        # against the simulated parts' delays at the same set-up.
        ks = stats.ks_2samp(parts, pd_)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ad = stats.anderson_ksamp([parts, pd_], variant="midrank")
        assert (s.ks_stat, s.ks_pvalue) == pytest.approx((ks.statistic, ks.pvalue), rel=1e-12)
        assert (s.ad_stat, s.ad_pvalue) == pytest.approx((ad.statistic, ad.pvalue), rel=1e-12)
        assert s.ad_pvalue_bound == ("lower" if ad.pvalue >= 0.25 else "upper" if ad.pvalue <= 0.001 else None)
        counted_rows = rows[rows["verdict"].isin(DELAY_VERDICTS)]
        assert s.measured.median == pytest.approx(np.median(counted_rows["delay_s"]), rel=1e-12)
        assert s.n_parts == 6 and s.delay_shift_s == pytest.approx(np.median(parts) - np.median(pd_), rel=1e-12)
        expected = "slower" if (r, t) in _PREDICTED else "consistent"
        assert s.finding == expected, (r, t, s.ks_pvalue, s.ad_pvalue)
    by_setup = {tuple(s.setup.values()): s for s in c.setups}
    assert by_setup[SLOW_HOT[:2]].measured.n == 17  # the re-collapse is no delay
    assert by_setup[SLOW_COLD[:2]].delay_shift_s == pytest.approx(150e-6, abs=20e-6)  # later, though negative
    assert by_setup[SLOW_COLD[:2]].median_ratio is None  # a ratio of negative delays means nothing
    assert "slower" in c.findings and "slower than predicted at 2 of 5 set-ups (ramp 10 µs, -40 °C: +" in c.finding_text


def test_group_rows_pool_no_delays_and_set_up_rows_follow(lot, predicted):
    joined, out = _by_lot(lot, predicted)
    rows = out["LT1"].json_rows()
    assert [r["row"] for r in rows] == ["group"] + ["setup"] * 5
    assert rows[0]["n_setups"] == 5 and rows[0]["measured_delay_median_s"] is None and rows[0]["ks_pvalue"] is None
    table = comparison_table(out.values())
    assert table["row"].tolist().count("group") == 2 and table["match_columns"].iloc[0] == "ramp_s,temperature_c"
    one = compare(joined, predicted, ("lot", "ramp_s", "temperature_c"))
    single = next(c for c in one if c.group == {"lot": "LT1", "ramp_s": 1e-5, "temperature_c": -40.0})
    assert single.to_json_dict()["ks_pvalue"] == single.setups[0].ks_pvalue is not None


def test_a_table_without_sample_numbers_takes_set_ups_as_independent(lot, tmp_path):
    joined = lot[1]
    stuck = {SLOW_COLD[:2]: (0, 1), SLOW_HOT[:2]: (1, 2)}
    with_ids = compare(joined, _prediction_file(tmp_path, stuck))[0].stuck
    assert (with_ids.predicted_n_parts, with_ids.predicted_n_parts_stuck) == (40, 3)  # samples 0, 1, 2
    (tmp_path / "b").mkdir()
    without = compare(joined, _prediction_file(tmp_path / "b", stuck, with_samples=False))[0].stuck
    # π = 1 − Π(1 − p_set-up) over the set-ups: 1 − (38/40)² (closed form), of 40 simulated parts.
    assert without.predicted_n_parts == 40 and without.predicted_n_parts_stuck == pytest.approx(40 * (1 - 0.95 ** 2))
    pmf = stats.betabinom.pmf(np.arange(7), 6, 3.9 + 0.5, 36.1 + 0.5)
    assert without.pvalue == pytest.approx(pmf[pmf <= pmf[2] * (1 + 1e-7)].sum(), rel=1e-9)


def test_no_supply_captures_are_left_out_and_unmatched_counted(lot, predicted):
    joined = lot[1]
    only_cold = predicted[predicted["temperature_c"] == -40.0]
    c = {c.group["lot"]: c for c in compare(joined, only_cold)}["LT2"]
    lt2 = joined[joined["lot"] == "LT2"]
    assert c.n_measured == int((lt2["temperature_c"] == -40.0).sum())
    assert c.n_unmatched == int((lt2["temperature_c"] != -40.0).sum()) - 1  # the no-supply capture is left out


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

