"""``labtool bench check``: exercise every operation of a profile against a live instrument.

Supply operations use harmless values (0.1 V, 10 mA limit, 1 V protection); the chamber's set point
is set to its present reading, so the check never moves the temperature. The output is switched off
at the end whatever happened.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

from instruments.profile import ROLE_OPERATIONS, OPTIONAL_OPERATIONS, Profile
from instruments.scope import read_trace
from instruments.session import Session
from labtool.errors import InstrumentError

CHECK_VOLTAGE_V = 0.1
CHECK_CURRENT_A = 0.01
CHECK_OVP_V = 1.0


@dataclass(frozen=True)
class CheckResult:
    role: str
    operation: str
    status: str  # "ok", "failed", "absent" (required but not in the profile), "skipped"
    detail: str = ""

    def to_json_dict(self) -> dict:
        return {"role": self.role, "operation": self.operation, "status": self.status, "detail": self.detail}


def _scope_steps(profile: Profile):
    ops = profile.tables.get("scope", {})
    trigger = ops.get("force_trigger")
    return [
        ("configure_channel", dict(channel=1, span_v=4.0, offset_v=0.0)),
        ("configure_format", {}),
        ("configure_timebase", dict(record_s=1e-3, points=1000, pretrigger_s=1e-4)),
        ("configure_trigger", dict(channel=1, level_v=0.5)),
        ("arm_single", {}),
        *([("force_trigger", {})] if trigger else []),
        ("wait_complete", {}),
        ("read_preamble+read_data", dict(channel=1)),
    ]


def _supply_steps(profile: Profile):
    ch = dict(channel=1)
    return [
        ("set_ovp", dict(ch, ovp_v=CHECK_OVP_V)),
        ("set_current_limit", dict(ch, current_a=CHECK_CURRENT_A)),
        ("set_ramp_time", dict(ch, ramp_s=1e-3)),
        ("set_voltage", dict(ch, voltage_v=CHECK_VOLTAGE_V)),
        ("output_on", ch),
        ("output_state", ch),
        ("measure_current", {}),
        ("output_off", ch),
        ("read_current_preamble+read_current_data", ch),
    ]


def check_profile(resource: str, profile: Profile, *, roles: list[str] | None = None, backend: str = "@py",
                  report: Callable[[CheckResult], None] = lambda r: None) -> list[CheckResult]:
    results: list[CheckResult] = []

    def note(result: CheckResult) -> None:
        results.append(result)
        report(result)

    session = profile.session(resource, backend=backend, name=resource)
    try:
        identity = session.open()
    except InstrumentError as exc:
        note(CheckResult("common", "open + *IDN?", "failed", str(exc)))
        return results
    note(CheckResult("common", "open + *IDN?", "ok", str(identity)))
    _try(note, "common", "error queue", lambda: f"{len(session.drain_errors())} entr(ies) drained")
    roles = roles or [r for r in ("scope", "supply", "chamber") if r in profile.tables]
    try:
        for role in roles:
            table = {"scope": "scope", "supply": "supply", "chamber": "chamber"}[role]
            ops = profile.tables.get(table, {})
            wanted = set(ROLE_OPERATIONS[role]) | set(OPTIONAL_OPERATIONS.get(role, ()))
            if role == "supply":
                wanted |= set(ROLE_OPERATIONS["smu"])
            steps = {"scope": _scope_steps, "supply": _supply_steps}.get(role, lambda p: [])(profile)
            if role == "chamber":
                steps = [("read_temperature", {}), ("set_point", None)]
            covered = set()
            for name, params in steps:
                parts = name.split("+")
                covered.update(parts)
                missing = [p for p in parts if p not in ops]
                if missing:
                    required = any(p in ROLE_OPERATIONS[role] for p in missing)
                    note(CheckResult(role, name, "absent" if required else "skipped", "not in the profile"))
                    continue
                if len(parts) == 2:
                    _try(note, role, name, lambda: _read(session, profile, ops[parts[0]], ops[parts[1]], params))
                elif params is None:  # chamber set point: to its present reading, so nothing moves
                    _try(note, role, name, lambda: _hold(session, ops))
                else:
                    _try(note, role, name, lambda op=ops[name], pr=params: _describe(op.run(session, **pr)))
            for name in sorted(wanted - covered):
                if name in ops:
                    note(CheckResult(role, name, "skipped", "not exercised by the check"))
    finally:
        off = profile.tables.get("supply", {}).get("output_off")
        if off is not None and "supply" in roles:
            try:
                off.run(session, channel=1)
            except InstrumentError as exc:
                note(CheckResult("supply", "final output_off", "failed",
                                 f"{exc}: switch the output off at the instrument"))
        session.close()
    return results


def _try(note, role: str, name: str, action) -> None:
    try:
        detail = action()
        note(CheckResult(role, name, "ok", "" if detail is None else str(detail)))
    except InstrumentError as exc:
        note(CheckResult(role, name, "failed", str(exc)))


def _describe(value) -> str | None:
    return None if value is None else repr(value)


def _read(session: Session, profile: Profile, pre, data, params) -> str:
    trace = read_trace(session, profile, pre, data, what="check", **params)
    return f"{trace.preamble.points} points, {len(trace.data)} bytes, first value {trace.values[0]:.6g}"


def _hold(session: Session, ops) -> str:
    if "read_temperature" not in ops:
        raise InstrumentError("needs read_temperature to know the present temperature; not set")
    reading = ops["read_temperature"].run(session)
    ops["set_point"].run(session, temperature_c=round(reading, 1))
    return f"set point {round(reading, 1):g} °C (the present reading)"
