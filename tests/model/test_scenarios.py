"""Failure recipes (labtool.model.scenarios): each override set makes the model show its failure class.

Property tests (invented demo design, sample_runs/design.toml): the verdict is the measurement
engine's (labtool.measure), and the nominal design at the same condition starts, so it is the override
that makes the failure. Figures are the model's, not silicon's.
"""

from pathlib import Path

import pytest

from labtool.measure import Limits, measure_capture
from labtool.model import simulate
from labtool.model.scenarios import SCENARIOS
from labtool.measure.verdict import VERDICTS


def _verdict(design, sc):
    cap = simulate(design, ramp_s=sc.ramp_s, temperature_c=sc.temperature_c, t_stop_s=sc.t_stop_s, n_samples=1500)
    return measure_capture(cap, Limits(**sc.limits))


@pytest.mark.parametrize("name", sorted(SCENARIOS))
def test_recipe_gives_its_verdict_and_the_nominal_part_starts(demo, name):
    sc = SCENARIOS[name]
    assert sc.verdict in VERDICTS
    assert _verdict(sc.apply(demo), sc).verdict == sc.verdict
    assert _verdict(demo, sc).verdict == "started"


def test_every_failure_class_has_a_recipe():
    assert {s.verdict for s in SCENARIOS.values()} == {"stuck_at_zero", "slow_start", "ringing", "recollapse",
                                                      "wrong_level"}


def test_ringing_recipe_overshoots_and_rings(demo):
    # overshoot beyond the engine's default 10 % limit, with a fitted ring frequency and damping < 1
    sc = SCENARIOS["late_strong_pulldown"]
    r = _verdict(sc.apply(demo), sc)
    assert r.overshoot_pct > 15.0
    assert r.ring_hz is not None and 2e4 < r.ring_hz < 2e5 and 0.2 < r.damping < 0.9


@pytest.mark.parametrize("slot, ramp_s, temperature_c, verdict", [
    (1, 100e-6, 25.0, "started"), (5, 10e-6, 25.0, "ringing"), (6, 100e-6, 25.0, "stuck_at_zero"),
    (7, 100e-6, 25.0, "slow_start"), (9, 100e-6, 25.0, "started"), (9, 0.1, 125.0, "recollapse")])
def test_simulated_bench_population_parts_show_their_failure(slot, ramp_s, temperature_c, verdict):
    # The demo population (sample_runs/population.toml) on the plans' records (3 × ramp + 200 µs,
    # 20 % pre-trigger; sim-plan.toml at 25 °C, sim-plan-hot.toml at 125 °C), 100 µs delay limit.
    import numpy as np

    from instruments.sim.population import ModelSource, load_population
    from labtool.measure import measure_arrays

    source = ModelSource(load_population(Path(__file__).resolve().parents[2] / "sample_runs" / "population.toml"))
    t = np.linspace(-0.2 * ramp_s, 3 * ramp_s + 200e-6, 3000)
    traces = source(slot, np.maximum(t, 0.0), ramp_s=ramp_s, vdd_v=1.8, temperature_c=temperature_c)
    assert measure_arrays(t, traces["supply"], traces["output"], Limits(max_delay_s=100e-6)).verdict == verdict
