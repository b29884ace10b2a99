"""The session and drivers through the real VISA stack (pyvisa + pyvisa-py, TCPIP SOCKET loopback),
with every fault the simulated bench injects. Each fault must give a clear error or a working
recovery, never a silently short capture."""

from __future__ import annotations

import numpy as np
import pytest

from instruments.scope import ChannelSetup, Scope
from instruments.sim.server import Fault
from instruments.supply import SourceMeasureUnit, Supply
from labtool.errors import BlockError, ConnectionLost, InstrumentError, InstrumentTimeout, ProfileError, ScpiError

POINTS = 5000


def acquire_once(bench, sessions, profile, *, ramp_s=1e-4):
    scope = Scope(sessions["scope"], profile)
    supply = Supply(sessions["supply"], profile)
    scope.configure(channels={1: ChannelSetup(4.0, 0.0), 2: ChannelSetup(4.0, 0.0)}, record_s=4 * ramp_s,
                    points=POINTS, pretrigger_s=0.2 * ramp_s, trigger_channel=1, trigger_level_v=0.18, ramp_s=ramp_s)
    supply.configure(voltage_v=1.8, current_limit_a=0.01, ovp_v=2.0, ramp_s=ramp_s)
    scope.arm()
    supply.on()
    assert scope.wait_complete().done is True
    traces = scope.read(1), scope.read(2)
    assert supply.off() is True
    return traces


def test_identity_and_scaled_capture(bench, sessions, profile):
    assert str(sessions["scope"].identity).startswith("LABTOOL-SIM,SCOPE-2CH")
    supply_tr, out_tr = acquire_once(bench, sessions, profile)
    p = supply_tr.scaling
    assert p.points == POINTS and len(supply_tr.values) == POINTS
    # Scaling: value = (code − code_zero)·lsb + zero_level with lsb = 4 V / 2^16 (INTeger,16 over a 4 V span).
    assert p.lsb == pytest.approx(4.0 / 65536)
    codes = np.frombuffer(supply_tr.data, ">i2")
    assert np.allclose(supply_tr.values, (codes - p.code_zero) * p.lsb + p.zero_level)
    assert supply_tr.values[-1] == pytest.approx(1.8, abs=2e-3)
    assert out_tr.values[-1] == pytest.approx(1.2, abs=2e-3)
    # The trigger (0.18 V = 10 % of 1.8 V on the ramp) is at t = 0: the supply is 0.18 V there.
    t = p.times()
    assert np.interp(0.0, t, supply_tr.values) == pytest.approx(0.18, abs=5e-3)


def test_smu_current_trace(bench, sessions, profile):
    acquire_once(bench, sessions, profile)
    smu = SourceMeasureUnit(sessions["supply"], profile)
    trace = smu.read_current()
    assert trace.values[-1] == pytest.approx(1.8 * 50e-6, abs=1e-6)


@pytest.mark.parametrize("kind", ["drop_mid_block", "reset_mid_block", "truncated_block"])
def test_block_cut_short_is_an_error_then_recovery(bench, sessions, profile, kind):
    bench.servers["scope"].add_fault(Fault(kind, match=r"TRAC\w*:DATA\? CH2", connection=0))
    with pytest.raises((BlockError, ConnectionLost, InstrumentTimeout)) as info:
        acquire_once(bench, sessions, profile)
    # The wire is "#510000" + 10000 data bytes + NL; the fault sends half of it (5004 bytes): the message
    # gives the 4997 data bytes that really came, and why the rest did not.
    why = {"drop_mid_block": "the instrument closed the connection", "reset_mid_block": "the connection broke",
           "truncated_block": "the instrument sent nothing for 0.5 s"}[kind]
    assert f"block reply to ':TRACe:DATA? CH2' cut short ({why}" in str(info.value)
    assert f"received 4997 of {POINTS * 2} data bytes" in str(info.value)
    Supply(sessions["supply"], profile).off()
    # The next command reopens and resynchronises (*IDN?); a second acquisition is complete.
    _, out = acquire_once(bench, sessions, profile)
    assert len(out.values) == POINTS
    assert sessions["scope"].reopen_count == 1


@pytest.mark.parametrize("delta, message", [(-2, "header announces 9998 bytes"), (+6, "header announces 10006 bytes")])
def test_wrong_length_header_refused_against_scaling(bench, sessions, profile, delta, message):
    bench.servers["scope"].add_fault(Fault("wrong_length_header", match=r"TRAC\w*:DATA\?", delta=delta))
    with pytest.raises(BlockError, match=message + ", but the scaling reply implies 10000"):
        acquire_once(bench, sessions, profile)


def test_timeout_names_the_time_really_waited(bench, sessions):
    # The transport timeout is 0.5 s; this query was given 1.2 s, and the message says so.
    bench.servers["scope"].add_fault(Fault("no_reply", match=r"SCAL"))
    with pytest.raises(InstrumentTimeout, match=r"no reply to ':TRACe:SCALing\? CH1' within 1.2 s"):
        sessions["scope"].query(":TRACe:SCALing? CH1", timeout_s=1.2)


def test_no_reply_is_a_timeout_naming_the_command(bench, sessions, profile):
    bench.servers["scope"].add_fault(Fault("no_reply", match=r"SCAL"))
    with pytest.raises(InstrumentTimeout, match=r"no reply to ':TRACe:SCALing\? CH1' within 0.5 s"):
        acquire_once(bench, sessions, profile)


def test_late_reply_is_not_taken_as_the_next_answer(bench, sessions, profile):
    # A reply later than the timeout must not be read as the answer to the next query (stale reply):
    # the session reopens its raw socket after the timeout.
    bench.servers["scope"].add_fault(Fault("late_reply", match=r"SCAL", delay_s=0.8))
    with pytest.raises(InstrumentTimeout):
        acquire_once(bench, sessions, profile)
    assert sessions["scope"].query("*IDN?").startswith("LABTOOL-SIM,SCOPE")


def test_late_reply_within_timeout_is_fine(bench, sessions, profile):
    bench.servers["scope"].add_fault(Fault("late_reply", match=r"SCAL", delay_s=0.1))
    _, out = acquire_once(bench, sessions, profile)
    assert len(out.values) == POINTS


def test_error_queue_entries_attached_to_command(bench, sessions, profile):
    bench.servers["supply"].add_fault(Fault("error_queue", match=r"RAMP",
                                            errors=[(-222, "Data out of range"), (-350, "Queue overflow")]))
    with pytest.raises(ScpiError) as info:
        acquire_once(bench, sessions, profile)
    assert info.value.code == -222
    assert "RAMP:TIME" in info.value.command
    assert "then -350" in str(info.value)


def test_real_scpi_error_from_bad_value(bench, sessions, profile):
    supply = Supply(sessions["supply"], profile)
    with pytest.raises(ScpiError, match=r'-222,"Data out of range'):
        supply.configure(voltage_v=50.0, current_limit_a=0.01, ovp_v=60.0, ramp_s=1e-3)


def test_reset_on_command_is_connection_lost(bench, sessions, profile):
    bench.servers["supply"].add_fault(Fault("reset", match=r"OUTP\w*:STAT\w* ON"))
    with pytest.raises((ConnectionLost, InstrumentTimeout)):
        acquire_once(bench, sessions, profile)


def test_refused_connection(profile):
    import socket
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    session = profile.session(f"TCPIP::127.0.0.1::{port}::SOCKET")
    session.timeout_s = 0.5
    with pytest.raises(ConnectionLost, match=r"cannot connect: \[Errno 111\] Connection refused"):
        session.open()


def test_identity_pattern_checked(bench, profile):
    import dataclasses
    strict = dataclasses.replace(profile, identity_pattern=r"^OTHER,")
    with pytest.raises(InstrumentError, match="does not match the profile's identity pattern"):
        strict.session(bench.servers["scope"].resource).open()


def test_supply_refuses_profile_without_limits(profile):
    import dataclasses
    tables = {k: dict(v) for k, v in profile.tables.items()}
    del tables["supply"]["set_ovp"]
    bare = dataclasses.replace(profile, tables=tables)
    with pytest.raises(ProfileError, match=r"cannot drive a supply: no operation \[supply.set_ovp\]"):
        Supply(None, bare)
