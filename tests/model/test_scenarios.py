"""Failure recipes (labtool.model.scenarios): each override set makes the model show its failure class.

Property tests (invented demo design, sample_runs/design.toml): the verdict is the measurement
engine's (labtool.measure), and the nominal design at the same condition starts, so it is the override
that makes the failure. Figures are the model's, not silicon's.
"""

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
