"""An instrument labtool has never seen: the second simulated dialect (dialect_b.py) driven through
a profile written from the docs (profiles/dialect-b.toml), happy path and every fault of the bench
safety and honest-capture rules. Through the real stack (pyvisa + pyvisa-py, TCPIP SOCKET on 127.0.0.1)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from instruments.acquire import Bench, run_plan
from instruments.check import check_profile
from instruments.journal import Journal
from instruments.plan import load_plan
from instruments.profile import load_profile
from instruments.sim.server import Fault
from labtool.errors import ConnectionLost, NoAcquisition, OffPlanCapture, OutputNotOff
from labtool.store import Campaign

PROFILE_B = Path(__file__).parent / "profiles" / "dialect-b.toml"

PLAN_B = """
schema = "labtool-acquisition-plan"
version = 1
name = "b-plan"

[instruments.scope]
resource = "{scope}"
profile = "dialect-b.toml"
[instruments.supply]
resource = "{supply}"
profile = "dialect-b.toml"

[[parts]]
lot = "QX7A"
wafer = "W02"
part = "p01"
slot = 1
[[parts]]
lot = "QX7A"
wafer = "W02"
part = "p02"
slot = 9

[matrix]
ramp_s = ["100us", "1ms"]
discharge_s = "1ms"

[scope]
points = 1000
trigger_level_v = 0.18
supply_span_v = 2.5       # the supply channel shows -0.25 … 2.25 V
supply_offset_v = 1.0
output_span_v = 2.0       # the output channel -0.2 … 1.8 V
output_offset_v = 0.8

[supply]
voltage_v = 1.8
current_limit_a = "10mA"
ovp_v = 2.0

[run]
retries = 1
"""


def make_plan(bench, tmp_path, *, profile_edits=(), plan_edits=()):
    """The plan and a copy of the dialect-B profile beside it, each with ``(old, new)`` edits."""
    profile = PROFILE_B.read_text()
    for old, new in profile_edits:
        assert old in profile, old
        profile = profile.replace(old, new)
    (tmp_path / "dialect-b.toml").write_text(profile)
    text = PLAN_B.format(**{r: s.resource for r, s in bench.servers.items()})
    for old, new in plan_edits:
        assert old in text, old
        text = text.replace(old, new)
    (tmp_path / "plan.toml").write_text(text)
    return load_plan(tmp_path / "plan.toml").with_resources({r: s.resource for r, s in bench.servers.items()})


def run(plan, camp, *, lines=None, on_event=None, bench=None):
    return run_plan(plan, camp, bench=bench or Bench(plan), echo=(lines.append if lines is not None else lambda _: None),
                    on_event=on_event)


def journal(camp, plan):
    return list(Journal(camp.root, plan.name).events())


def test_happy_path_measures_right_and_sends_what_the_profile_computes(bench_b, tmp_path):
    plan = make_plan(bench_b, tmp_path)
    assert Bench(plan).warnings == []
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        report = run(plan, camp)
        assert len(report.stored) == 4 and report.refused == report.retries == report.flagged == 0
        df = camp.captures()
        for _, row in df.iterrows():
            cap = camp.load_capture(row["capture_id"])
            t, vdd, vref = cap.times(), cap.channel("supply").values, cap.channel("output").values
            meta = cap.provenance.metadata
            # The invented stand-in part: supply ramps linearly to 1.8 V, slot 1's output settles at 1.2 V,
            # slot 9's stays at 0 (conftest.first_order_start).
            assert vdd[-50:].mean() == pytest.approx(1.8, abs=2e-3)
            assert vref[-50:].mean() == pytest.approx(1.2 if row["part"] == "p01" else 0.0, abs=2e-3)
            assert np.interp(0.0, t, vdd) == pytest.approx(0.18, abs=5e-3)  # the trigger is at t = 0
            assert float(meta["measured_ramp_s"]) == pytest.approx(row["ramp_s"], rel=0.02)
            assert meta["scaling_supply"].startswith("CH1,V,") and meta["scaling_output"].startswith("CH2,V,")
    sent = bench_b.scope.received + bench_b.supply.received
    # span 2.5 V / 10 div; centre 1.0 V → position −1.0 / 0.25 = −4 div; output 2.0 V, centre 0.8 V → −4 div.
    for command in ("CH1:VDIV 0.25", "CH1:POS -4.0000", "CH2:VDIV 0.2", "CH2:POS -4.0000", "TRIG:LEV 0.1800",
                    # record 3 × 100 µs + 200 µs = 500 µs → 50 µs/div; pre-trigger 0.2 × 100 µs + 10 µs = 30 µs = 6 %
                    "TB:SCALE 5e-05", "ACQ:NPTS 1000", "TRIG:POS 6.000",
                    "PSU:SLEW 18000", "PSU:SLEW 1800", "PSU:VSET 1.8000", "PSU:ILIM 0.01000", "PSU:SOCKET 9"):
        assert command in sent, command
    assert bench_b.supply.on_events == bench_b.supply.off_events == 4 and not bench_b.supply.output_on


def test_scaling_reply_with_text_fields_a_constant_and_a_compound_answer(bench_b, tmp_path):
    # The codes off the wire, scaled by hand from the reply: value = code·vstep + centre_v (the
    # dialect's own convention), time = (i − trigger_index)·tstep.
    from instruments.scope import ChannelSetup, Scope
    from instruments.supply import Supply
    profile = load_profile(PROFILE_B)
    sessions = {r: profile.session(s.resource, name=f"b {r}") for r, s in bench_b.servers.items()}
    scope, supply = Scope(sessions["scope"], profile), Supply(sessions["supply"], profile)
    scope.configure(channels={1: ChannelSetup(2.5, 1.0)}, record_s=5e-4, points=1000, pretrigger_s=3e-5,
                    trigger_channel=1, trigger_level_v=0.18, ramp_s=1e-4)
    supply.configure(voltage_v=1.8, current_limit_a=0.01, ovp_v=2.0, ramp_s=1e-4)
    scope.arm()
    supply.on()
    assert scope.wait_complete().done is True
    trace = scope.read(1)
    assert supply.off() is True
    source, unit, tstep, trig_index, vstep, centre, npts = trace.scaling_text.replace(";", ",").split(",")
    assert (source, unit, int(npts)) == ("CH1", "V", 1000)
    codes = np.frombuffer(trace.data, "<i2")
    assert np.allclose(trace.values, codes * float(vstep) + float(centre))
    assert np.allclose(trace.scaling.times(), (np.arange(1000) - int(trig_index)) * float(tstep))
    for s in sessions.values():
        s.close()


def test_missed_trigger_is_refused_as_no_new_acquisition_then_retried(bench_b, tmp_path):
    # The wait times out and answers 0; the data query would hand back the previous frame.
    plan = make_plan(bench_b, tmp_path)
    lines = []

    def miss_on_second_step(name, step):
        if name == "stored" and step.index == 0:
            bench_b.scope.miss_triggers = 1

    with Campaign.open(tmp_path / "camp", create=True) as camp:
        report = run(plan, camp, lines=lines, on_event=miss_on_second_step)
        assert len(report.stored) == 4 and report.refused == 1 and report.retries == 1
        refused = [e for e in journal(camp, plan) if e["event"] == "refused"]
        assert len(refused) == 1 and "'ACQ:WAIT? 1' answered '0' (not done)" in refused[0]["error"]
        digests = [json.loads(m)["frame_sha256_scope"] for m in camp.captures()["metadata_json"]]
        assert len(set(digests)) == 4  # no stored frame is a copy of another
    retry = [line for line in lines if "retrying" in line]
    assert len(retry) == 1 and "scope TCPIP::127.0.0.1::" in retry[0] and "'ACQ:WAIT? 1'" in retry[0]
    assert bench_b.supply.on_events == bench_b.supply.off_events == 5 and not bench_b.supply.output_on


def test_scope_that_never_triggers_stores_nothing_and_leaves_outputs_off(bench_b, tmp_path):
    plan = make_plan(bench_b, tmp_path)
    bench_b.scope.miss_triggers = 99
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        with pytest.raises(NoAcquisition, match=r"no new acquisition: 'ACQ:WAIT\? 1' answered '0'") as info:
            run(plan, camp)
        assert camp.captures().empty
    assert info.value.exit_code == 4
    assert bench_b.supply.on_events == bench_b.supply.off_events == 2 and not bench_b.supply.output_on


def test_wait_that_cannot_tell_is_caught_by_the_identical_frame(bench_b, tmp_path):
    # A profile whose wait is a fixed pause: a missed trigger is only seen in the data, which are the
    # previous frame byte for byte. It is refused, never stored as a second capture.
    plan = make_plan(bench_b, tmp_path, profile_edits=[(
        'command = "ACQ:WAIT? {timeout_s:.3g}"\nreply = "text"\ndone = "1"\nnot_done = "0"\ntimeout_s = 1.0',
        'command = ""\nsync = "wait"\nwait_s = 0.05')])
    assert any("cannot tell whether an acquisition happened" in w for w in Bench(plan).warnings)

    def miss_on_second_step(name, step):
        if name == "stored" and step.index == 0:
            bench_b.scope.miss_triggers = 1

    with Campaign.open(tmp_path / "camp", create=True) as camp:
        report = run(plan, camp, on_event=miss_on_second_step)
        assert len(report.stored) == 4 and report.refused == 1
        (refused,) = [e for e in journal(camp, plan) if e["event"] == "refused"]
        assert "byte for byte those of an earlier frame" in refused["error"]


def test_stale_frame_left_from_an_earlier_run_is_refused_on_resume(bench_b, tmp_path):
    # The first run stops after one capture; on the re-run the scope misses its first trigger and,
    # with a wait that cannot tell, hands back the frame already stored.
    plan = make_plan(bench_b, tmp_path, profile_edits=[(
        'command = "ACQ:WAIT? {timeout_s:.3g}"\nreply = "text"\ndone = "1"\nnot_done = "0"\ntimeout_s = 1.0',
        'command = ""\nsync = "wait"\nwait_s = 0.05')])

    def stop_after_first(name, step):
        if name == "stored":
            raise KeyboardInterrupt

    with Campaign.open(tmp_path / "camp", create=True) as camp:
        with pytest.raises(KeyboardInterrupt):
            run(plan, camp, on_event=stop_after_first)
        bench_b.scope.miss_triggers = 1
        report = run(plan, camp)
        assert len(report.stored) == 3 and report.refused == 1
        assert len(set(camp.captures()["source_sha256"])) == 4


def test_frame_taken_before_the_supply_was_switched_on_is_refused(bench_b, tmp_path):
    # The scope triggers on noise when armed: its wait truly says done, but the frame shows a supply
    # that never rose. Stored, it would be a flat output: "stuck at zero", the failure this tool hunts.
    plan = make_plan(bench_b, tmp_path)
    bench_b.scope.trigger_at_arm = 1
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        report = run(plan, camp)
        assert len(report.stored) == 4 and report.refused == 1
        (refused,) = [e for e in journal(camp, plan) if e["event"] == "refused"]
        assert "never reaches the trigger level 0.18 V" in refused["error"]
        assert "taken before the supply was switched on" in refused["error"]
        assert (camp.captures()["locator"].str.count("/") == 5).all()


def test_off_command_dropped_stops_the_run_and_never_energises_again(bench_b, tmp_path):
    # From the first power-up on, the supply drops the connection on every off command: its output
    # stays on. The run must stop at once, say so loudly, exit 6, and never switch on again.
    plan = make_plan(bench_b, tmp_path)
    lines = []

    def drop_offs(name, step):
        if name == "powered":
            bench_b.servers["supply"].add_fault(Fault("reset", match=r"PSU:OUT 0", connection=None, times=999))

    with Campaign.open(tmp_path / "camp", create=True) as camp:
        with pytest.raises(OutputNotOff, match="could not be confirmed off") as info:
            run(plan, camp, lines=lines, on_event=drop_offs)
        assert camp.captures().empty
        ended = journal(camp, plan)[-1]
    assert info.value.exit_code == 6
    assert bench_b.supply.on_events == 1  # never energised again
    assert bench_b.supply.output_on  # the instrument really is still on: that is why the run says so
    assert any("DANGER: the supply output" in line for line in lines)
    assert ended["event"] == "run_ended" and ended["outputs_off"] is False
    assert not any(e["event"] == "retry" for e in journal(camp, plan))


def test_peer_death_mid_block_is_seen_at_once_with_the_bytes_received(bench_b, tmp_path):
    # The scope closes the link half-way through the channel-2 block. With a 30 s transport timeout,
    # only the closed connection itself can explain a quick, exact message.
    plan = make_plan(bench_b, tmp_path)
    bench_b.servers["scope"].add_fault(Fault("drop_mid_block", match=r"WAVE:DATA\? CH2", connection=None, times=99))
    b = Bench(plan)
    b.sessions["scope"].timeout_s = 30.0
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        with pytest.raises(ConnectionLost) as info:
            run(plan, camp, bench=b)
        assert camp.captures().empty
    # The wire is "#42000" + 2000 data bytes (no terminator); the fault sends half of it, 1003 bytes.
    assert "the instrument closed the connection): received 997 of 2000 data bytes" in str(info.value)
    assert "'WAVE:DATA? CH2'" in str(info.value) and "scope TCPIP::127.0.0.1::" in str(info.value)
    assert bench_b.supply.on_events == bench_b.supply.off_events == 2 and not bench_b.supply.output_on


def test_stale_error_queue_is_drained_and_logged_not_blamed(bench_b, tmp_path):
    plan = make_plan(bench_b, tmp_path)
    bench_b.scope.push_error(-410, "Query INTERRUPTED")
    bench_b.supply.push_error(-222, "Data out of range")
    lines = []
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        report = run(plan, camp, lines=lines)
        assert len(report.stored) == 4
        logged = {e["instrument"].split()[0]: e for e in journal(camp, plan) if e["event"] == "error_queue_at_open"}
    assert logged["scope"]["entries"] == '-410,"Query INTERRUPTED"' and logged["scope"]["session"] == "opened"
    assert logged["supply"]["entries"] == '-222,"Data out of range"'
    assert any("not blamed on the next command" in line for line in lines)


TEXT_POLL = ('command = "ACQ:WAIT? {timeout_s:.3g}"\nreply = "text"\ndone = "1"\nnot_done = "0"\ntimeout_s = 1.0',
             'command = ""\nsync = "poll"\npoll_query = "ACQ:STATE?"\ndone = "DONE"\nnot_done = "WAIT"\n'
             'timeout_s = 0.5\npoll_interval_s = 0.01')


def test_text_status_poll_waits_for_done_and_refuses_a_missed_trigger(bench_b, tmp_path):
    plan = make_plan(bench_b, tmp_path, profile_edits=[TEXT_POLL])
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        assert len(run(plan, camp).stored) == 4
    assert "ACQ:STATE?" in bench_b.scope.received
    bench_b.scope.miss_triggers = 99
    plan2 = make_plan(bench_b, tmp_path, profile_edits=[TEXT_POLL], plan_edits=[('name = "b-plan"', 'name = "b2"')])
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        with pytest.raises(NoAcquisition, match=r"'ACQ:STATE\?' answered 'WAIT' \(not done\) within 0.5 s"):
            run(plan2, camp)
    assert not bench_b.supply.output_on


def test_profile_that_ignores_the_ramp_is_warned_at_load_and_its_captures_refused(bench_b, tmp_path):
    # The plan asks for 1 ms; the profile sends a fixed slew, so the supply ramps in 180 µs.
    edits = [('command = "PSU:SLEW {voltage_v / ramp_s:.6g}"', 'command = "PSU:SLEW 10000"')]
    plan = make_plan(bench_b, tmp_path, profile_edits=edits, plan_edits=[('["100us", "1ms"]', '["1ms"]')])
    assert any("[supply.set_ramp_time] does not send ramp_s" in w for w in Bench(plan).warnings)
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        with pytest.raises(OffPlanCapture, match=r"ramp 0.00018 s measured, 0.001 s planned \(tolerance ±25%\)"):
            run(plan, camp)
        assert camp.captures().empty
    flagged = make_plan(bench_b, tmp_path, profile_edits=edits,
                        plan_edits=[('["100us", "1ms"]', '["1ms"]'), ("retries = 1", 'retries = 1\noff_plan = "flag"')])
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        report = run(flagged, camp)
        assert len(report.stored) == 2 and report.flagged == 2
        tags = camp.captures()["off_plan"]
        assert tags.str.contains("ramp 0.00018 s measured").all()


def test_supply_voltage_off_plan_is_refused(bench_b, tmp_path):
    # A profile slip that halves the set voltage: the capture would be labelled 1.8 V at 0.9 V.
    plan = make_plan(bench_b, tmp_path, profile_edits=[('"PSU:VSET {voltage_v:.4f}"', '"PSU:VSET {voltage_v / 2:.4f}"')])
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        with pytest.raises(OffPlanCapture, match=r"final supply 0.9\d* V measured, 1.8 V planned \(tolerance ±5%\)"):
            run(plan, camp)
        assert camp.captures().empty


def test_bench_check_proves_the_wait_waits(bench_b, tmp_path):
    profile = load_profile(PROFILE_B)
    results = {r.operation: r for r in check_profile(bench_b.servers["scope"].resource, profile, roles=["scope"])}
    assert all(r.status == "ok" for r in results.values()), [r for r in results.values() if r.status != "ok"]
    assert results["wait_complete (armed, not triggered)"].detail.startswith("'ACQ:WAIT? 1' answered '0': not done")
    assert results["wait_complete (after force_trigger)"].detail.startswith("'ACQ:WAIT? 1' answered '1': done")
    assert results["read_scaling+read_data"].detail.startswith("1000 points, 2000 bytes")
    bench_b.scope.wait_never_waits = True
    results = {r.operation: r for r in check_profile(bench_b.servers["scope"].resource, profile, roles=["scope"])}
    bad = results["wait_complete (armed, not triggered)"]
    assert bad.status == "failed" and "done although nothing triggered" in bad.detail


def test_bench_check_text_poll_and_supply(bench_b, tmp_path):
    path = tmp_path / "poll.toml"
    path.write_text(PROFILE_B.read_text().replace(*TEXT_POLL))
    results = check_profile(bench_b.servers["scope"].resource, load_profile(path), roles=["scope"])
    waits = {r.operation: r for r in results if r.operation.startswith("wait_complete")}
    assert waits["wait_complete (armed, not triggered)"].detail == "'ACQ:STATE?' answered 'WAIT': not done, as it should"
    assert waits["wait_complete (after force_trigger)"].status == "ok"
    supply = {r.operation: r for r in check_profile(bench_b.servers["supply"].resource, load_profile(PROFILE_B),
                                                    roles=["supply"])}
    assert supply["output_state"].detail == "True" and supply["output_off"].status == "ok"
    assert not bench_b.supply.output_on


def test_bench_check_that_cannot_switch_the_output_off_exits_6(bench_b, capsys):
    from labtool.cli import main
    bench_b.servers["supply"].add_fault(Fault("reset", match=r"PSU:OUT 0", connection=None, times=999))
    code = main(["bench", "check", bench_b.servers["supply"].resource, "--profile", str(PROFILE_B), "--role", "supply"])
    out = capsys.readouterr().out
    assert code == 6 and bench_b.supply.output_on
    assert "failed   supply   final output_off" in out and "DANGER" in out


def test_supply_channel_the_profile_never_sends_is_warned(bench_b, tmp_path):
    # This supply has one output and its profile names none; a plan for channel 2 would drive channel 1.
    plan = make_plan(bench_b, tmp_path, plan_edits=[('profile = "dialect-b.toml"\n\n[[parts]]',
                                                      'profile = "dialect-b.toml"\nchannel = 2\n\n[[parts]]')])
    warnings = Bench(plan).warnings
    assert any("[supply.output_off] does not send channel" in w for w in warnings)
    assert not any(w.startswith("scope") for w in warnings)
