"""Monte Carlo: common random numbers, reproducibility, and startup-current physics."""

import numpy as np
import pytest

from labtool.model import monte_carlo, sample_population
from labtool.model.montecarlo import VARIED, draws, run_samples, sampled_values


def _median_with_stuck_as_never(samples):
    return float(np.median(np.where(samples["stuck"], np.inf, samples["delay_s"].fillna(np.inf))))


def test_common_random_numbers():
    # Same seed → same per-sample draws, whatever n; another seed → other draws.
    assert np.array_equal(draws(10, 7), draws(25, 7)[:10])
    assert not np.array_equal(draws(10, 7), draws(10, 8))


def test_population_matches_monte_carlo_samples(demo):
    parts = sample_population(demo, 6, seed=3)
    mc = monte_carlo(demo, conditions=[(10e-6, 27.0)], n=6, seed=3).samples
    for name in VARIED:
        assert [getattr(p, name) for p in parts] == pytest.approx(mc[name].tolist(), rel=1e-15)
    assert len({p.i_start_a for p in parts}) == 6


def test_results_do_not_depend_on_batching(demo):
    # Each sample has its own steps and Newton iterations, so its result is independent of the others.
    a = monte_carlo(demo, conditions=[(10e-6, 27.0)], n=10, seed=5).samples
    b = monte_carlo(demo, conditions=[(10e-6, 27.0)], n=10, seed=5, chunk=3).samples
    assert np.array_equal(a["delay_s"].to_numpy(), b["delay_s"].to_numpy())


def test_more_startup_current_never_slows_the_start_or_raises_p_stuck(demo):
    # Property (GUIDE §4: startup time ≈ ΣC·ΔV / I_start; too weak a current does not start): with common
    # random numbers, raising the nominal startup current never raises p_stuck nor the median delay.
    # Invented marginal design: an input pair that needs ~5.7 µA of injection to conduct at 27 °C.
    d = demo.replace(amp_vcm_min_v=0.35, amp_vcm_min_tc_v_per_c=0.0, sigma_i_start_rel=0.15)
    results = [monte_carlo(d.replace(i_start_a=i), conditions=[(10e-6, 27.0)], n=40, seed=11).samples
               for i in (4.5e-6, 5.7e-6, 8e-6, 20e-6)]
    p_stuck = [r["stuck"].mean() for r in results]
    medians = [_median_with_stuck_as_never(r) for r in results]
    assert p_stuck[0] > p_stuck[-1]  # the property is not vacuous: the weakest current leaves parts stuck
    assert all(a >= b for a, b in zip(p_stuck, p_stuck[1:]))
    assert all(a >= b for a, b in zip(medians, medians[1:]))


def test_summary_per_condition(demo):
    res = monte_carlo(demo, conditions=[(1e-6, 27.0), (10e-6, 125.0)], n=8, seed=2)
    s = res.summary()
    assert list(s["ramp_s"]) == [1e-6, 10e-6] and list(s["temperature_c"]) == [27.0, 125.0]
    assert set(s.columns) >= {"n", "p_stuck", "delay_median_s", "delay_p95_s"}
    assert (s["n"] == 8).all() and (s["p_stuck"] == 0).all()
    # the same parts at both conditions (common random numbers across conditions)
    by = res.samples.groupby("ramp_s")
    assert np.array_equal(by.get_group(1e-6)["i_start_a"].to_numpy(), by.get_group(10e-6)["i_start_a"].to_numpy())
    assert set(res.samples.columns) >= {"ramp_s", "temperature_c", "sample", "delay_s", "stuck", "verdict"}


def test_full_measurement_agrees_with_the_fast_path(demo):
    # The fast path is measure_arrays without its step-model fit: same verdicts and delays.
    fast = monte_carlo(demo, conditions=[(10e-6, 27.0)], n=3, seed=9).samples
    full = monte_carlo(demo, conditions=[(10e-6, 27.0)], n=3, seed=9, fit=True).samples
    assert list(fast["verdict"]) == list(full["verdict"])
    assert np.array_equal(fast["delay_s"].to_numpy(), full["delay_s"].to_numpy())
    assert "ring_hz" in full.columns and "damping" in full.columns


def test_a_sample_that_cannot_be_simulated_is_recorded_and_the_rest_go_on(demo):
    # Fault injection: sample 5's offset is not a number, so its node equations cannot be integrated.
    # It is listed with its parameters and the error; every other sample is as in a clean run (a
    # sample's result does not depend on its batch).
    z = draws(8, 3)
    clean = run_samples(demo, z, conditions=[(10e-6, 27.0)]).samples
    z[5, 0] = np.nan
    res = run_samples(demo, z, conditions=[(10e-6, 27.0)], chunk=8)
    assert list(res.samples["sample"]) == [0, 1, 2, 3, 4, 6, 7]
    assert np.array_equal(res.samples["delay_s"].to_numpy(), clean.drop(index=5)["delay_s"].to_numpy())
    (bad,) = res.failures.to_dict(orient="records")
    assert bad["sample"] == 5 and "integration failed" in bad["error"] and np.isnan(bad["amp_offset_v"])
    assert bad["i_start_a"] == pytest.approx(clean.loc[5, "i_start_a"])
    row = res.summary().iloc[0]
    assert row["n"] == 7 and row["n_failed"] == 1 and row["p_stuck"] == 0.0


def test_leakage_spread_is_log_normal_and_leaves_the_other_draws_alone(demo):
    # Adding the leakage columns (a second stream of the seed) left the first seven draws unchanged.
    import numpy.random as npr

    assert np.array_equal(draws(5, 2)[:, :7], npr.default_rng(2).standard_normal((5, 7)))
    d = demo.replace(sigma_leak_ln=0.5)
    values = sampled_values(d, draws(4000, 2))
    logs = np.log(values["leak_q1_a"] / demo.leak_q1_a)
    assert logs.std() == pytest.approx(0.5, rel=0.05) and abs(logs.mean()) < 0.03
    assert np.array_equal(sampled_values(demo, draws(10, 2))["leak_q2_a"], np.full(10, demo.leak_q2_a))
