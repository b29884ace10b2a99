"""Failure recipes: named design overrides that make the startup model show each failure class.

Each :class:`Scenario` is a set of flat parameter overrides (as ``load_design`` / ``Design.replace``
take them), the condition at which the measurement engine gives its verdict, and a one-line physical
reason. They drive the demo traces (sample_runs/make_samples.py) and the simulated bench's population;
tests/model/test_scenarios.py checks every verdict. Figures are from the model, not silicon.
Behavioural model, not transistor-level sign-off.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping


@dataclass(frozen=True)
class Scenario:
    name: str
    verdict: str  # what labtool.measure gives at (ramp_s, temperature_c) with ``limits``
    overrides: Mapping[str, Any]
    ramp_s: float
    temperature_c: float
    t_stop_s: float  # record length from the start of the ramp (the demo capture's record)
    physics: str
    limits: Mapping[str, float] = field(default_factory=dict)  # Limits fields the verdict needs

    def apply(self, design):
        """``design`` with this scenario's overrides."""
        return design.replace(**dict(self.overrides))


SCENARIOS: dict[str, Scenario] = {s.name: s for s in (
    Scenario("startup_open", "stuck_at_zero", {"i_start_a": 0.0}, 0.1, -40.0, 0.225,
             "no startup current (an open startup device): nothing lifts the core out of the zero state, "
             "which is stable at cold where the mirror's off-state current is femtoamps"),
    Scenario("starved_amplifier", "slow_start", {"amp_bias_min_a": 0.5e-9}, 1e-3, -40.0, 2.25e-3,
             "the self-biased amplifier's bias floor is 0.5 nA instead of 20 nA: near zero current it is "
             "starved, so the loop that lifts the core is slow and the delay grows to hundreds of µs",
             {"max_delay_s": 100e-6}),
    Scenario("late_strong_pulldown", "ringing",
             {"startup_kind": "pulldown", "startup_sense": "output", "startup_v_off_v": 1.0, "i_start_a": 20e-6,
              "amp_gbw_hz": 1e5}, 10e-6, 125.0, 180e-6,
             "a gate pull-down startup holds the mirror fully on until the output reaches 1.0 V; the slow "
             "amplifier (100 kHz) then needs microseconds to pull the gate back, so the output overshoots"),
    Scenario("hot_leaky_q1", "recollapse", {"leak_q1_a": 4e-9}, 0.1, 125.0, 0.225,
             "junction leakage at the Q1 node (4 nA at 27 °C, doubling every 10 K: ~3.6 µA at 125 °C) "
             "leaves no wanted operating point when hot: the output rises while the amplifier is still "
             "unbiased on the ramp (~0.25 V) and falls back to zero once it is biased"),
    Scenario("trim_ratio_low", "wrong_level", {"r2_over_r1": 7.0}, 10e-6, 25.0, 180e-6,
             "R2/R1 trimmed to 7.0 instead of 9.4: the PTAT term (R2/R1)·VT·ln N is short by ~0.13 V, "
             "the reference settles near 1.07 V", {"expect_v": 1.2}),
)}
