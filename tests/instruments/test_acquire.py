"""Unattended plans against the simulated bench through pyvisa-py: exactly-once resume after
interruption at random points, retries after a lost link, outputs off on every abort path."""

from __future__ import annotations

import random

import pytest

from instruments.acquire import run_plan
from instruments.plan import load_plan
from instruments.sim.server import Fault
from instruments.journal import Journal
from labtool.errors import BlockError, ConnectionLost, InstrumentError, OutputNotOff, PlanError, ScpiError
from labtool.store import Campaign

PLAN = """
schema = "labtool-acquisition-plan"
version = 1
name = "t-plan"

[instruments.scope]
resource = "{scope}"
profile = "generic-scpi"
[instruments.supply]
resource = "{supply}"
profile = "generic-scpi"
kind = "smu"
[instruments.chamber]
resource = "{chamber}"
profile = "generic-scpi"

[[parts]]
lot = "ZR24A"
wafer = "W03"
part = "p01"
die_x = 3
die_y = 4
slot = 1
[[parts]]
lot = "ZR24A"
wafer = "W03"
part = "p02"
slot = 9

[matrix]
temperatures_c = [25.0, 30.0]
ramp_s = ["50us", "200us"]
repeats = 1
discharge_s = "1ms"

[scope]
points = 1000
trigger_level_v = 0.18

[supply]
voltage_v = 1.8
current_limit_a = "10mA"
ovp_v = 2.0

[chamber]
tolerance_c = 0.5
soak_s = 0.05
timeout_s = 5

[run]
retries = 1
"""


@pytest.fixture
def plan(bench, tmp_path):
    path = tmp_path / "plan.toml"
    path.write_text(PLAN.format(**{r: s.resource for r, s in bench.servers.items()}))
    p = load_plan(path)
    return p.with_resources({r: s.resource for r, s in bench.servers.items()})  # marks it simulated


def short_timeouts(bench_obj):
    for s in bench_obj.sessions.values():
        s.timeout_s = 0.5


def run(plan, camp, **kw):
    from instruments.acquire import Bench
    b = Bench(plan)
    short_timeouts(b)
    return run_plan(plan, camp, bench=b, echo=lambda line: None, **kw)


def stored_locators(camp):
    df = camp.captures(current_only=False)
    return sorted(df["locator"])


def test_full_run_stores_every_capture_with_conditions(bench, plan, tmp_path):
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        report = run(plan, camp)
        assert len(report.stored) == 8 and report.aborted is None and report.outputs_off_confirmed
        assert stored_locators(camp) == sorted(s.key for s in plan.steps())
        df = camp.captures()
        row = df[df["locator"] == "ZR24A/W03/p01/T30C/ramp5e-05s/r0"].iloc[0]
        assert (row["lot"], row["wafer"], row["part"], row["die_x"], row["temperature_c"], row["ramp_s"],
                row["vdd_v"]) == ("ZR24A", "W03", "p01", 3, 30.0, 5e-5, 1.8)
        cap = camp.load_capture(row["capture_id"])
        assert cap.capture_id == row["capture_id"]
        assert {c.role for c in cap.channels} == {"supply", "output", "supply_current"}
        assert cap.time.n == 1000
        meta = cap.provenance.metadata
        assert "scaling_output" in meta and meta["profile_sha256_scope"] == plan_profile_sha()
        assert abs(float(meta["chamber_reading_c"]) - 30.0) <= 0.5
        # Slot 9 is the stand-in's stuck part: its output stays near zero.
        stuck = camp.load_capture(df[df["part"] == "p02"].iloc[0]["capture_id"])
        assert abs(stuck.channel("output").values[-100:].mean()) < 0.01
        # Re-running adds nothing.
        again = run(plan, camp)
        assert again.stored == [] and again.already == 8
    assert bench.supply.output_on is False
    assert bench.supply.on_events == bench.supply.off_events == 8


def plan_profile_sha():
    from instruments.profile import load_profile
    return load_profile("generic-scpi").sha256


EVENTS = ("configured", "armed", "powered", "captured", "stored")


@pytest.mark.parametrize("seed", [11, 23, 47])
def test_interrupted_anywhere_then_resumed_has_every_capture_once(bench, plan, tmp_path, seed):
    rng = random.Random(seed)
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        for _ in range(20):
            stop_at = rng.randrange(0, 12)
            seen = []

            def interrupt(name, step):
                seen.append(name)
                if len(seen) > stop_at:
                    raise KeyboardInterrupt

            try:
                report = run(plan, camp, on_event=interrupt)
            except KeyboardInterrupt:
                assert bench.supply.output_on is False  # outputs off after Ctrl-C
                continue
            if report.stored == [] and report.already == 8:
                break
        locs = stored_locators(camp)
        assert locs == sorted(s.key for s in plan.steps())  # every planned capture, exactly once
        assert camp.verify() == []
        events = [e["event"] for e in __import__("instruments.journal", fromlist=["Journal"]).Journal(camp.root, plan.name).events()]
        assert events.count("run_started") >= 2
    assert bench.supply.on_events == bench.supply.off_events


def test_lost_link_after_power_on_is_retried(bench, plan, tmp_path):
    # The scope link resets while waiting for the acquisition (supply output on): retried once, then fine.
    bench.servers["scope"].add_fault(Fault("reset", match=r"^\*OPC\?$", connection=None, times=1))
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        report = run(plan, camp)
        assert report.retries == 1 and len(report.stored) == 8
        assert stored_locators(camp) == sorted(s.key for s in plan.steps())
    assert bench.supply.output_on is False


def test_lost_link_for_good_aborts_with_outputs_off(bench, plan, tmp_path):
    bench.servers["scope"].add_fault(Fault("reset", match=r"^\*OPC\?$", connection=None, times=99))
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        with pytest.raises(ConnectionLost):
            run(plan, camp)
        assert stored_locators(camp) == []
    assert bench.supply.on_events >= 2 and bench.supply.output_on is False


def test_supply_link_lost_with_output_on_is_switched_off_on_reconnect(bench, plan, tmp_path):
    # The supply resets right after taking OUTPut ON (before *OPC? answers): its output stays on,
    # so the run must reconnect to switch it off before retrying.
    bench.servers["supply"].add_fault(Fault("reset", match=r"STATe ON;\*OPC\?$", connection=0, times=1))
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        report = run(plan, camp)
        assert report.retries >= 1 and len(report.stored) == 8
    assert bench.supply.output_on is False


def test_scpi_error_aborts_without_retry_and_outputs_off(bench, plan, tmp_path):
    bench.servers["supply"].add_fault(Fault("error_queue", match=r"OUTP\w*:STAT\w* ON", errors=[(-221, "Settings conflict")]))
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        with pytest.raises(ScpiError, match=r"-221"):
            run(plan, camp)
    assert bench.supply.output_on is False and bench.supply.on_events == 1


def test_block_faults_never_store_a_short_capture(bench, plan, tmp_path):
    for kind in ("truncated_block", "wrong_length_header", "drop_mid_block"):
        bench.servers["scope"].add_fault(Fault(kind, match=r"TRAC\w*:DATA\? CH2", connection=None, times=1))
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        # retries = 1: the truncated block is retried, the wrong header on the retry aborts the run.
        with pytest.raises(BlockError, match="header announces 1998 bytes, but the scaling reply implies 2000"):
            run(plan, camp)
        assert stored_locators(camp) == []  # nothing short was stored
        report = run(plan, camp)  # the dropped link on the resumed run is retried
        assert report.retries == 1
        df = camp.captures(current_only=False)
        assert all(int(n) == 1000 for n in df["n_samples"])
        assert stored_locators(camp) == sorted(s.key for s in plan.steps())


@pytest.mark.parametrize("edit, message", [
    (("ovp_v = 2.0", "ovp_v = 1.5"), r"\[supply\] ovp_v: 1.5 V is below voltage_v = 1.8 V"),
    (('current_limit_a = "10mA"', 'current_limit_a = "1A"'), r"current_limit_a: 1 A must be > 0 and ≤ \[limits\] max_current_a = 0.1"),
    (('ramp_s = ["50us", "200us"]', 'ramp_s = ["fast"]'), r"\[matrix\] ramp_s"),
    (("slot = 9", ""), r"each needs a slot"),
    (("[supply]\nvoltage_v = 1.8", "[supply]\nvolts = 1.8"), r"voltage_v, current_limit_a and ovp_v are required"),
])
def test_bad_plans_are_refused_before_anything_is_driven(tmp_path, edit, message):
    path = tmp_path / "bad.toml"
    path.write_text(PLAN.format(scope="x", supply="y", chamber="z").replace(*edit))
    with pytest.raises(PlanError, match=message):
        load_plan(path)


def test_output_that_will_not_switch_off_is_reported_loudly(bench, plan, tmp_path):
    # A supply that ignores OUTPut OFF (stuck relay, front panel lock): the run stops at once, says so,
    # and never switches the output on again (one power cycle, no retry).
    from instruments.acquire import Bench
    lines = []
    stuck = bench.supply._output
    bench.supply._output = lambda on: stuck(True) if not on and bench.supply.output_on else stuck(on)
    b = Bench(plan)
    short_timeouts(b)
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        with pytest.raises(OutputNotOff, match="could not be confirmed off .*the output still reads on") as info:
            run_plan(plan, camp, bench=b, echo=lines.append)
        assert stored_locators(camp) == []
        ended = list(Journal(camp.root, plan.name).events())[-1]
    assert info.value.exit_code == 6
    assert bench.supply.on_events == 1 and b.off_unconfirmed
    assert any("DANGER: the supply output" in line for line in lines)
    assert ended["event"] == "run_ended" and ended["outputs_off"] is False
