"""``labtool bench check``: exercise every operation of a profile against a live instrument.

Supply operations use harmless values (0.1 V, 10 mA limit, 1 V protection); the chamber's set point
is set to its present reading, so the check never moves the temperature. The output is switched off
at the end whatever happened (a signal meanwhile waits for it). The scope's wait is tried armed and
not triggered: it must say "not done", or every missed trigger would store a stale frame.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

from instruments.profile import ROLE_OPERATIONS, OPTIONAL_OPERATIONS, Profile
from instruments.scope import read_trace
from instruments.scpi import describe_errors
from instruments.session import Session
from instruments.stopping import shielded
from labtool.errors import InstrumentError

CHECK_VOLTAGE_V = 0.1
CHECK_CURRENT_A = 0.01
CHECK_OVP_V = 1.0
CHECK_WAIT_S = 1.0  # how long the armed, untriggered scope is given to (wrongly) say done
SCOPE_SETUP = dict(record_s=1e-3, points=1000, pretrigger_s=1e-4, level_v=0.5, trigger_channel=1, ramp_s=1e-4)
SUPPLY_SETUP = dict(channel=1, voltage_v=CHECK_VOLTAGE_V, current_a=CHECK_CURRENT_A, ovp_v=CHECK_OVP_V, ramp_s=1e-3)
NOT_TRIGGERED = "wait_complete (armed, not triggered)"
TRIGGERED = "wait_complete (after force_trigger)"


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
    trigger = "force_trigger" in ops
    return [
        ("configure_channel", dict(SCOPE_SETUP, channel=1, span_v=4.0, offset_v=0.0)),
        ("configure_format", SCOPE_SETUP),
        ("configure_timebase", SCOPE_SETUP),
        ("configure_trigger", dict(SCOPE_SETUP, channel=1)),
        ("arm_single", SCOPE_SETUP),
        (NOT_TRIGGERED, "not done"),
        *([("force_trigger", SCOPE_SETUP), (TRIGGERED, "done"), ("read_scaling+read_data", dict(channel=1))]
          if trigger else [("read_scaling+read_data", "needs force_trigger")]),
    ]


def _supply_steps(profile: Profile):
    ch = dict(channel=1)
    return [
        ("set_ovp", SUPPLY_SETUP),
        ("set_current_limit", SUPPLY_SETUP),
        ("set_ramp_time", SUPPLY_SETUP),
        ("set_voltage", SUPPLY_SETUP),
        ("output_on", ch),
        ("output_state", ch),
        ("measure_current", ch),
        ("output_off", ch),
        ("read_current_scaling+read_current_data", ch),
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
    old = session.left_over_errors
    note(CheckResult("common", "error queue", "ok", f"{len(old)} old entr(ies) drained at open"
                     + (f": {describe_errors(old)}" if old else "")))
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
                parts = ["wait_complete"] if name.startswith("wait_complete") else name.split("+")
                covered.update(parts)
                missing = [p for p in parts if p not in ops]
                if isinstance(params, str) and params.startswith("needs"):
                    note(CheckResult(role, name, "skipped", f"{params} to complete an acquisition"))
                    continue
                if missing:
                    required = any(p in ROLE_OPERATIONS[role] for p in missing)
                    note(CheckResult(role, name, "absent" if required else "skipped", "not in the profile"))
                    continue
                if name.startswith("wait_complete"):
                    _wait(note, session, ops["wait_complete"], name, expect_done=params == "done")
                elif len(parts) == 2:
                    _try(note, role, name, lambda: _read(session, profile, ops[parts[0]], ops[parts[1]], params))
                elif params is None:  # chamber set point: to its present reading, so nothing moves
                    _try(note, role, name, lambda: _hold(session, ops))
                else:
                    _try(note, role, name, lambda op=ops[name], pr=params: _describe(op.run(session, **pr)))
            for name in sorted(wanted - covered):
                if name in ops:
                    note(CheckResult(role, name, "skipped", "not exercised by the check"))
    finally:
        with shielded():  # a signal now waits until the output is off
            if "supply" in roles and "output_off" in profile.tables.get("supply", {}):
                _final_off(note, session, profile)
            session.close()
    return results


FINAL_OFF = "final output_off"


def _final_off(note, session: Session, profile: Profile) -> None:
    """Off, and read back where the profile can: an output left on is reported as such (exit 6)."""
    ops = profile.tables["supply"]
    try:
        ops["output_off"].run(session, **SUPPLY_SETUP)
        still_on = ops["output_state"].run(session, channel=1) if "output_state" in ops else False
    except InstrumentError as exc:
        note(CheckResult("supply", FINAL_OFF, "failed", f"DANGER: {exc}: switch the output off at the instrument"))
        return
    if still_on:
        note(CheckResult("supply", FINAL_OFF, "failed", "DANGER: the output still reads on after the off command: "
                                                        "switch it off at the instrument"))


def _try(note, role: str, name: str, action) -> None:
    try:
        detail = action()
        note(CheckResult(role, name, "ok", "" if detail is None else str(detail)))
    except InstrumentError as exc:
        note(CheckResult(role, name, "failed", str(exc)))


def _describe(value) -> str | None:
    return None if value is None else repr(value)


def _read(session: Session, profile: Profile, scaling, data, params) -> str:
    trace = read_trace(session, profile, scaling, data, what="check", **params)
    return f"{trace.scaling.points} points, {len(trace.data)} bytes, first value {trace.values[0]:.6g}"


def _wait(note, session: Session, op, name: str, *, expect_done: bool) -> None:
    """Armed and not triggered, a wait must say "not done"; after a forced trigger, "done"."""
    try:
        outcome = op.wait(session, timeout_s=CHECK_WAIT_S if not expect_done else None, **SCOPE_SETUP)
    except InstrumentError as exc:
        note(CheckResult("scope", name, "failed", str(exc)))
        return
    said = f"{outcome.command!r} answered {outcome.reply!r}" if outcome.reply else f"{outcome.command!r}"
    if outcome.done is None:
        note(CheckResult("scope", name, "skipped", f"this wait cannot tell whether an acquisition happened "
                                                   f"(sync = {op.sync!r}): a missed trigger would go unseen"))
    elif outcome.done == expect_done:
        note(CheckResult("scope", name, "ok", f"{said}: {'done' if expect_done else 'not done'}, as it should"))
    elif expect_done:
        note(CheckResult("scope", name, "failed", f"{said}: not done after a forced trigger"))
    else:
        note(CheckResult("scope", name, "failed", f"{said}: done although nothing triggered; this wait does not "
                                                  f"wait, and captures would be stale frames"))


def _hold(session: Session, ops) -> str:
    if "read_temperature" not in ops:
        raise InstrumentError("needs read_temperature to know the present temperature; not set")
    reading = ops["read_temperature"].run(session)
    ops["set_point"].run(session, temperature_c=round(reading, 1))
    return f"set point {round(reading, 1):g} °C (the present reading)"
