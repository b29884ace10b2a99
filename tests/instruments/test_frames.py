"""The pure checks behind 'no new acquisition' and 'off plan', on generated supply traces."""

from __future__ import annotations

import numpy as np
import pytest

from instruments.frames import FrameHistory, check_powered, off_plan, supply_figures
from labtool.errors import NoAcquisition


def linear_ramp(ramp_s: float, vdd_v: float, *, pre_s: float, n: int = 4000, noise_v: float = 0.5e-3, seed: int = 0):
    """A supply switched on at t = 0 that rises linearly to vdd_v in ramp_s (invented, stating a property)."""
    t = np.linspace(-pre_s, 3 * ramp_s, n)
    v = np.clip(t / ramp_s, 0, 1) * vdd_v + np.random.default_rng(seed).normal(0, noise_v, n)
    return t, v


@pytest.mark.parametrize("ramp_s", [1e-5, 1e-4, 1e-3, 1e-1])
def test_measured_ramp_of_a_linear_ramp(ramp_s):
    # A linear 0→V ramp spends 0.8 of its time between 10 % and 90 % of V (geometry of a line;
    # common practice, no source), so (t90 − t10)/0.8 gives the ramp time back.
    t, v = linear_ramp(ramp_s, 1.8, pre_s=0.2 * ramp_s)
    fig = supply_figures(t, v)
    assert fig.ramp_s == pytest.approx(ramp_s, rel=0.01)
    assert fig.final_v == pytest.approx(1.8, abs=1e-3) and fig.first_v == pytest.approx(0.0, abs=1e-3)
    assert off_plan(fig, voltage_v=1.8, ramp_s=ramp_s, ramp_tolerance=0.25, supply_tolerance=0.05) == []


def test_off_plan_names_what_was_measured():
    t, v = linear_ramp(1e-4, 1.8, pre_s=2e-5)
    problems = off_plan(supply_figures(t, v), voltage_v=1.8, ramp_s=1e-3, ramp_tolerance=0.25, supply_tolerance=0.05)
    assert len(problems) == 1 and problems[0].startswith("ramp 9.99")
    assert problems[0].endswith("e-05 s measured, 0.001 s planned (tolerance ±25%)")
    flat = supply_figures(t, np.zeros_like(t))
    assert np.isnan(flat.ramp_s)
    assert len(off_plan(flat, voltage_v=1.8, ramp_s=1e-4, ramp_tolerance=0.25, supply_tolerance=0.05)) == 2


def test_unpowered_and_already_powered_frames_are_not_new_acquisitions():
    t, v = linear_ramp(1e-4, 1.8, pre_s=2e-5)
    check_powered(supply_figures(t, v), trigger_level_v=0.18, instrument="scope")  # a real power-up passes
    with pytest.raises(NoAcquisition, match="never reaches the trigger level 0.18 V .*before the supply was switched on"):
        check_powered(supply_figures(t, np.full_like(t, 0.01)), trigger_level_v=0.18, instrument="scope")
    with pytest.raises(NoAcquisition, match="already stands at 1.8 V when the record begins"):
        check_powered(supply_figures(t, np.full_like(t, 1.8)), trigger_level_v=0.18, instrument="scope")


def test_frame_history_refuses_a_repeat_of_any_group():
    history = FrameHistory({"scope": []})
    raw = {"supply": b"\x01\x02", "output": b"\x03\x04", "supply_current": b"\x05"}
    digests = history.check_new(raw, instrument={"scope": "scope A", "supply": "supply B"})
    history.remember(digests)
    with pytest.raises(NoAcquisition, match="scope A: no new acquisition: the supply and output data"):
        history.check_new({**raw, "supply_current": b"\x06"}, instrument={"scope": "scope A", "supply": "supply B"})
    with pytest.raises(NoAcquisition, match="supply B: .*supply_current data"):
        history.check_new({**raw, "output": b"\x07"}, instrument={"scope": "scope A", "supply": "supply B"})
    # A stored capture's digest (a resume) counts as seen.
    assert FrameHistory({"scope": [digests["scope"]]}).known["scope"] == {digests["scope"]}
