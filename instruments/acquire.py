"""Run an acquisition plan unattended: one capture per step, stored as it arrives, resumable.

Exactly once: a step is done when the store holds a capture of this plan with the step's locator,
so a re-run skips it (whether the previous run stopped by error, Ctrl-C, lost link or kill -9).
Safety: the supply output is switched off after every power cycle and on every way out of the run
(error, Ctrl-C, lost link: the session reopens to send the off command); when that cannot be
confirmed the run says so loudly.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

from instruments.assemble import build_capture
from instruments.chamber import Chamber
from instruments.journal import Journal
from instruments.plan import Plan, Step
from instruments.profile import Profile, load_profile
from instruments.scope import Scope
from instruments.session import Session
from instruments.supply import SourceMeasureUnit, Supply
from labtool.capture import Capture, Conditions
from labtool.errors import BlockError, ConnectionLost, InstrumentError, InstrumentTimeout, ScpiError
from labtool.progress import progress
from labtool.store import Campaign

SAFETY_CAUTIONS = (
    "Bench safety: this plan switches real supply outputs on and off.",
    "  - Check the current limit and over-voltage protection in the plan suit the parts and the fixture.",
    "  - labtool switches outputs off after each power cycle and on any abort (error, Ctrl-C, lost link);",
    "    a supply that stops answering keeps its output on: know where its off switch is.",
    "  - Never run a chamber without its own over-temperature limit switch; labtool's checks are not one.",
    "  - The lab's own safety rules and procedures come first.",
)

RETRYABLE = (ConnectionLost, InstrumentTimeout, BlockError)


def is_retryable(exc: Exception) -> bool:
    """Link and transfer faults are retried; SCPI query errors (-4xx, e.g. -410 Query INTERRUPTED,
    SCPI-1999) are transient too. Other SCPI errors mean the plan or profile is wrong: no retry."""
    if isinstance(exc, ScpiError):
        return -499 <= exc.code <= -400
    return isinstance(exc, RETRYABLE)


@dataclass
class AcquireReport:
    planned: int
    stored: list[str] = field(default_factory=list)  # capture ids stored by this run
    already: int = 0  # steps found done in the store
    retries: int = 0
    aborted: str | None = None
    outputs_off_confirmed: bool | None = None
    journal_path: str = ""


class Bench:
    """The plan's instruments, opened; :meth:`close` switches the supply off before closing."""

    def __init__(self, plan: Plan):
        self.plan = plan
        self.profiles: dict[str, Profile] = {}
        self.sessions: dict[str, Session] = {}
        base = Path(plan.path).parent if plan.path else None
        for role, spec in plan.instruments.items():
            self.profiles[role] = load_profile(spec.profile, base)
            self.sessions[role] = self.profiles[role].session(spec.resource, backend=spec.backend,
                                                              name=f"{role} {spec.resource}")
        s = plan.instruments["supply"]
        self.scope = Scope(self.sessions["scope"], self.profiles["scope"])
        supply_cls = SourceMeasureUnit if s.kind == "smu" else Supply
        self.supply = supply_cls(self.sessions["supply"], self.profiles["supply"], channel=s.channel)
        self.chamber = (Chamber(self.sessions["chamber"], self.profiles["chamber"])
                        if "chamber" in self.sessions else None)
        self.switched_on = False  # whether this run ever switched the output on

    def output_on(self) -> None:
        self.switched_on = True
        self.supply.on()

    def open(self) -> None:
        for session in self.sessions.values():
            session.open()

    def identities(self) -> dict[str, str]:
        return {role: str(s.identity) for role, s in self.sessions.items() if s.identity is not None}

    def output_off(self, attempts: int = 3) -> bool | None:
        """Switch the supply output off, reopening the link if needed; False when it could not be done."""
        for _ in range(attempts):
            try:
                return self.supply.off() is not False
            except InstrumentError:
                self.sessions["supply"].close()  # the next command reopens and resynchronises
        return False

    def close(self) -> None:
        for session in self.sessions.values():
            session.close()


def run_plan(plan: Plan, campaign: Campaign, *, echo: Callable[[str], None] = print,
             on_event: Callable[[str, Step], None] | None = None, bench: Bench | None = None) -> AcquireReport:
    """Acquire every step of ``plan`` not yet in ``campaign``. ``on_event(name, step)`` is called at
    each stage (configured, armed, powered, captured, stored) so tests can interrupt anywhere."""
    steps = plan.steps()
    journal = Journal(campaign.root, plan.name)
    report = AcquireReport(planned=len(steps), journal_path=str(journal.path))
    done = _done_locators(campaign, plan)
    pending = [s for s in steps if s.key not in done]
    report.already = len(steps) - len(pending)
    if not pending:
        echo(f"{plan.name}: all {len(steps)} captures already in the campaign; nothing to do")
        return report
    if plan.simulated:
        echo("Simulated bench: no real outputs are driven.")
    else:
        for line in SAFETY_CAUTIONS:
            echo(line)
    notify = on_event or (lambda name, step: None)
    bench = bench or Bench(plan)
    journal.write("run_started", plan=plan.name, plan_sha256=plan.sha256, planned=len(steps),
                  pending=len(pending), simulated=plan.simulated)
    try:
        bench.open()
        bench.output_off()  # a known state before anything is configured
        journal.write("instruments", identities=bench.identities())
        current_temp = current_part = None
        for step in progress(pending, total=len(pending), what=f"acquire {plan.name}", unit="capture"):
            for attempt in range(plan.retries + 1):
                try:
                    if step.temperature_c != current_temp and bench.chamber is not None:
                        echo(f"chamber → {step.temperature_c:g} °C (soak {plan.chamber.soak_s:g} s)")
                        bench.chamber.settle(step.temperature_c, tolerance_c=plan.chamber.tolerance_c,
                                             soak_s=plan.chamber.soak_s, timeout_s=plan.chamber.timeout_s)
                    current_temp = step.temperature_c
                    if step.part != current_part and bench.supply.can_select_part and step.part.slot is not None:
                        bench.supply.select_part(step.part.slot)
                    current_part = step.part
                    capture = _acquire_step(plan, bench, step, attempt, notify)
                    break
                except InstrumentError as exc:
                    bench.output_off()
                    if not is_retryable(exc) or attempt == plan.retries:
                        raise
                    report.retries += 1
                    journal.write("retry", step=step.key, attempt=attempt + 1, error=str(exc))
                    echo(f"retrying {step.key} after: {exc}")
                    current_part = None  # re-establish the routing on the reopened link
                    time.sleep(plan.discharge_s)
            result = campaign.add_capture(capture)
            journal.write("stored", step=step.key, capture_id=result.capture_id, status=result.status)
            report.stored.append(result.capture_id)
            notify("stored", step)
            time.sleep(plan.discharge_s)  # full discharge before the next power cycle
    except BaseException as exc:
        report.aborted = "interrupted (Ctrl-C)" if isinstance(exc, KeyboardInterrupt) else str(exc)
        raise
    finally:
        report.outputs_off_confirmed = bench.output_off(attempts=3 if bench.switched_on else 1)
        if report.outputs_off_confirmed is False and bench.switched_on:
            echo("WARNING: the supply output could not be confirmed off: switch it off at the instrument.")
        elif report.aborted and bench.switched_on:
            echo("Stopped; the supply output is off.")
        journal.write("run_ended", stored=len(report.stored), retries=report.retries, aborted=report.aborted,
                      outputs_off=report.outputs_off_confirmed)
        bench.close()
    return report


def _acquire_step(plan: Plan, bench: Bench, step: Step, attempt: int, notify) -> Capture:
    sc = plan.scope
    bench.scope.configure(channels={sc.supply_channel: (sc.span_v, sc.offset_v),
                                    sc.output_channel: (sc.span_v, sc.offset_v)},
                          record_s=sc.record_s(step.ramp_s), points=sc.points,
                          pretrigger_s=sc.pretrigger_s(step.ramp_s), trigger_channel=sc.supply_channel,
                          trigger_level_v=sc.trigger_level_v)
    bench.supply.configure(voltage_v=plan.supply.voltage_v, current_limit_a=plan.supply.current_limit_a,
                           ovp_v=plan.supply.ovp_v, ramp_s=step.ramp_s)
    notify("configured", step)
    bench.scope.arm()
    notify("armed", step)
    bench.output_on()
    notify("powered", step)
    bench.scope.wait_complete()
    traces = {"supply": bench.scope.read(sc.supply_channel, deadline_s=sc.read_deadline_s),
              "output": bench.scope.read(sc.output_channel, deadline_s=sc.read_deadline_s)}
    if isinstance(bench.supply, SourceMeasureUnit):
        traces["supply_current"] = bench.supply.read_current(deadline_s=sc.read_deadline_s)
    if bench.supply.off() is False:
        raise InstrumentError(f"{bench.supply.session.name}: output still on after the off command")
    notify("captured", step)
    chamber_reading = bench.chamber.temperature() if bench.chamber is not None else None
    p = step.part
    conditions = Conditions(lot=p.lot, wafer=p.wafer, die_x=p.die_x, die_y=p.die_y, part=p.part,
                            temperature_c=step.temperature_c, ramp_s=step.ramp_s, vdd_v=plan.supply.voltage_v,
                            repeat=step.repeat,
                            tags={**plan.tags, "plan": plan.name, **({"slot": str(p.slot)} if p.slot else {})})
    metadata = {"plan_sha256": plan.sha256, "attempt": str(attempt + 1),
                **{f"idn_{role}": idn for role, idn in bench.identities().items()},
                **({"chamber_reading_c": f"{chamber_reading:.3f}"} if chamber_reading is not None else {}),
                **({"measure_limits": plan.measure_limits} if plan.measure_limits else {})}
    return build_capture(traces, conditions, source_path=plan.source_path, locator=step.key,
                         profile_sha256={role: prof.sha256 for role, prof in bench.profiles.items()},
                         metadata=metadata)


def _done_locators(campaign: Campaign, plan: Plan) -> set[str]:
    df = campaign.captures(current_only=False)
    if df.empty:
        return set()
    return set(df.loc[df["source_path"] == plan.source_path, "locator"])
