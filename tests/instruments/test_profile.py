"""Profiles, SCPI header forms, the scaling record, error-queue overflow, chamber soak, bench check."""

from __future__ import annotations

import numpy as np
import pytest

from instruments.chamber import Chamber
from instruments.check import check_profile
from instruments.profile import load_profile
from instruments.sim.headers import match
from instruments.waveform import Scaling, decode
from labtool.errors import BlockError, InstrumentTimeout, ProfileError, ScpiError


def test_generic_profile_serves_every_role(profile):
    assert profile.roles() == ["scope", "supply", "smu", "chamber"]
    assert profile.operation("scope", "configure_timebase").parameters == ("record_s", "points", "pretrigger_s")
    assert profile.operation("supply", "set_ovp").render({"channel": 1, "ovp_v": 2.0}) == \
        ":SOURce1:VOLTage:PROTection:LEVel 2"


@pytest.mark.parametrize("edit, message", [
    (('version = 1', 'version = 7'), r"\[version\]: this labtool reads profile version 1, got 7"),
    (('reply = "scaling"', 'reply = "table"'), r"\[scope.read_scaling\] reply: 'table' is not one of"),
    (('format = "int16be"', 'format = "int12"'), r"\[scope.read_data\] format: 'int12'"),
    (('sync = "opc"\ntimeout_s = 20.0', 'sync = "poll"'), r"\[scope.wait_complete\]: sync = \"poll\" needs poll_query"),
    (('timeout_s = 5.0', 'timeout_s = "soon"'), r"\[transport\] timeout_s: 'soon' is not a number"),
    (('timeout_s = 5.0', 'timout_s = 5.0'), r"\[transport\]: unknown field\(s\) timout_s"),
])
def test_bad_profiles_name_file_and_field(tmp_path, profile, edit, message):
    text = open(profile.path, encoding="utf-8").read()
    assert edit[0] in text
    bad = tmp_path / "bad.toml"
    bad.write_text(text.replace(edit[0], edit[1], 1))
    with pytest.raises(ProfileError, match=message):
        load_profile(bad)


def test_unknown_profile_name():
    with pytest.raises(ProfileError, match="no such profile file"):
        load_profile("no-such-profile")


@pytest.mark.parametrize("header, ok", [
    # SCPI-1999 Vol. 1 §6.2.1: short form (upper-case letters) or long form, any case; optional nodes.
    ("SOUR1:VOLT", True), ("source1:voltage:level:immediate:amplitude", True), (":SOUR:VOLT:LEV", True),
    ("SOURC:VOLT", False), ("SOUR1:VOLTA", False),
])
def test_scpi_short_and_long_forms(header, ok):
    assert bool(match(":SOURce#:VOLTage[:LEVel][:IMMediate][:AMPLitude]", header)) is ok


def test_scaling_record_formula():
    # value = (code − code_zero)·lsb + zero_level; time = t_first_s + i·dt_s (common practice, no source).
    p = Scaling(points=4, dt_s=1e-6, t_first_s=-3e-6, lsb=0.01, code_zero=128.0, zero_level=0.5)
    values, clipped = decode(bytes([0, 128, 200, 255]), "uint8", p)
    assert np.allclose(values, [(0 - 128) * 0.01 + 0.5, 0.5, (200 - 128) * 0.01 + 0.5, (255 - 128) * 0.01 + 0.5])
    assert clipped.tolist() == [True, False, False, True]
    assert np.allclose(p.times(), [-3e-6, -2e-6, -1e-6, 0.0])
    with pytest.raises(BlockError, match="3 data bytes, but 4 points of 1 byte"):
        decode(bytes(3), "uint8", p)


def test_error_queue_overflow_reported(bench, sessions):
    # SCPI-1999 (from memory): a full queue replaces its newest entry by -350 "Queue overflow".
    for _ in range(12):
        sessions["supply"].write(":SOUR1:VOLT 99")
    with pytest.raises(ScpiError) as info:
        sessions["supply"].check_errors(":SOUR1:VOLT 99")
    assert info.value.code == -222
    assert [e.code for e in info.value.entries][-1] == -350
    assert "overflowed" in str(info.value)


def test_chamber_soaks_then_times_out(bench, sessions, profile):
    chamber = Chamber(sessions["chamber"], profile)
    result = chamber.settle(30.0, tolerance_c=0.5, soak_s=0.1, timeout_s=5.0)
    assert abs(result.temperature_c - 30.0) <= 0.5 and result.waited_s >= 0.1
    with pytest.raises(InstrumentTimeout, match=r"did not hold 100 ±0.1 °C for 10 s within 0.3 s"):
        chamber.settle(100.0, tolerance_c=0.1, soak_s=10.0, timeout_s=0.3)


def test_bench_check_reports_every_operation(bench, profile):
    results = {(r.role, r.operation): r for role, server in bench.servers.items()
               for r in check_profile(server.resource, profile, roles=[role])}
    assert all(r.status in ("ok", "skipped") for r in results.values()), \
        [r for r in results.values() if r.status not in ("ok", "skipped")]
    assert results[("scope", "read_scaling+read_data")].detail.startswith("1000 points, 2000 bytes")
    assert results[("supply", "output_state")].detail == "True"
    assert results[("supply", "select_part")].status == "skipped"
    assert bench.supply.output_on is False  # the check leaves the output off


def test_bench_check_names_what_failed(bench, profile, tmp_path):
    text = open(profile.path, encoding="utf-8").read().replace(":OUTPut{channel}:STATe?", ":OUTPut{channel}:STATus?")
    text = text.replace('[chamber.read_temperature]', '# [chamber.read_temperature] left out').replace(
        'command = ":MEASure:TEMPerature?"\nreply = "number"', '')
    text = text.replace("timeout_s = 5.0", "timeout_s = 0.5")  # a rejected query gets no reply: keep it short
    path = tmp_path / "p.toml"
    path.write_text(text)
    results = check_profile(bench.servers["supply"].resource, load_profile(path), roles=["supply", "chamber"])
    by_op = {r.operation: r for r in results}
    # The rejected query times out; the message carries the instrument's own reason from its queue.
    assert by_op["output_state"].status == "failed"
    assert "no reply to ':OUTPut1:STATus?'" in by_op["output_state"].detail
    assert '-113,"Undefined header' in by_op["output_state"].detail
    assert by_op["read_temperature"].status == "absent"


def test_poll_synchronisation_waits_for_the_status_bit(bench, sessions, profile):
    # wait_complete by status polling instead of *OPC?: the simulated scope holds STATus:OPERation
    # bit 3 (SWEeping; SCPI-1999 STATus:OPERation register, from memory) while armed.
    import dataclasses
    from instruments.profile import Operation
    from instruments.scope import ChannelSetup, Scope
    from instruments.supply import Supply
    poll = Operation("wait_complete", "", sync="poll", poll_query=":STATus:OPERation:CONDition?", poll_mask=8,
                     poll_done="clear", timeout_s=5.0)
    tables = {k: dict(v) for k, v in profile.tables.items()}
    tables["scope"]["wait_complete"] = poll
    polled = dataclasses.replace(profile, tables=tables)
    scope, supply = Scope(sessions["scope"], polled), Supply(sessions["supply"], polled)
    scope.configure(channels={1: ChannelSetup(4.0, 0.0)}, record_s=1e-3, points=500, pretrigger_s=0.0,
                    trigger_channel=1, trigger_level_v=0.18, ramp_s=1e-4)
    supply.configure(voltage_v=1.8, current_limit_a=0.01, ovp_v=2.0, ramp_s=1e-4)
    scope.arm()
    assert int(sessions["scope"].query(":STATus:OPERation:CONDition?")) & 8 == 8
    with pytest.raises(InstrumentTimeout, match="wait_complete not complete after 0.2 s"):
        dataclasses.replace(poll, timeout_s=0.2).run(sessions["scope"])  # nothing triggered yet
    supply.on()
    assert scope.wait_complete().done is True
    assert len(scope.read(1).values) == 500
    supply.off()


def test_esr_reports_command_error_and_clears_on_read(sessions):
    # IEEE 488.2 §11.5.1: an undefined header sets bit 5 (command error); *ESR? clears on read.
    from instruments.scpi import decode_esr
    s = sessions["scope"]
    s.write(":NOT:A:COMMand")
    assert "command_error" in decode_esr(int(s.query("*ESR?")))
    assert decode_esr(int(s.query("*ESR?"))) == frozenset()
    s.drain_errors()
