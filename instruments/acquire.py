"""Run an acquisition plan unattended: one capture per step, stored as it arrives, resumable.

Exactly once: a step is done when the store holds a capture of this plan with the step's locator,
so a re-run skips it (whether the previous run stopped by error, a signal, lost link or kill -9).

Safety: the supply output is switched off after every power cycle and on every way out of the run
(error, lost link, SIGINT, SIGTERM, SIGHUP: the session reopens to send the off command). An output
that cannot be confirmed off stops the run with :class:`OutputNotOff` (exit code 6) and is never
switched on again in that run.

Honesty: a capture is stored only when the scope's wait says it acquired, its frame is not one seen
before, its supply trace shows a power-up, and the measured ramp and final supply match the plan
(within ``[run]`` tolerances; else refused or flagged).
"""

from __future__ import annotations

import json
import signal
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

from instruments.assemble import build_capture
from instruments.chamber import Chamber
from instruments.frames import FrameHistory, check_powered, off_plan, supply_figures
from instruments.journal import Journal
from instruments.plan import Plan, Step
from instruments.profile import Profile, load_profile
from instruments.scope import ChannelSetup, Scope
from instruments.session import Session
from instruments.stopping import shielded
from instruments.supply import SourceMeasureUnit, Supply
from labtool.capture import Capture, Conditions
from labtool.errors import (BlockError, ConnectionLost, InstrumentError, InstrumentTimeout, NoAcquisition,
                            OffPlanCapture, OutputNotOff, ScpiError)
from labtool.progress import progress
from labtool.store import Campaign

SAFETY_CAUTIONS = (
    "Bench safety: this plan switches real supply outputs on and off.",
    "  - Check the current limit and over-voltage protection in the plan suit the parts and the fixture.",
    "  - labtool switches outputs off after each power cycle and on any abort (error, lost link, Ctrl-C,",
    "    SIGTERM, SIGHUP); an output it cannot confirm off stops the run (exit 6) and is never switched on",
    "    again. A supply that stops answering keeps its output on: know where its off switch is.",
    "  - Never run a chamber without its own over-temperature limit switch; labtool's checks are not one.",
    "  - The lab's own safety rules and procedures come first.",
)

RETRYABLE = (ConnectionLost, InstrumentTimeout, BlockError, NoAcquisition)


def is_retryable(exc: Exception) -> bool:
    """Link and transfer faults and a missing acquisition are retried; SCPI query errors (-4xx, e.g.
    -410 Query INTERRUPTED, SCPI-1999) are transient too. Other SCPI errors mean the plan or profile
    is wrong, a capture off plan would be off plan again, and an output not confirmed off ends the run."""
    if isinstance(exc, ScpiError):
        return -499 <= exc.code <= -400
    return isinstance(exc, RETRYABLE)


@dataclass
class AcquireReport:
    planned: int
    stored: list[str] = field(default_factory=list)  # capture ids stored by this run
    already: int = 0  # steps found done in the store
    retries: int = 0
    refused: int = 0  # frames refused as no new acquisition
    flagged: int = 0  # captures stored with the off_plan tag
    aborted: str | None = None
    outputs_off_confirmed: bool | None = None
    journal_path: str = ""


def _safe(echo: Callable[[str], None]) -> Callable[[str], None]:
    """Messages must never stop an off sequence (after SIGHUP the terminal may be gone)."""
    def say(line: str) -> None:
        try:
            echo(line)
        except (OSError, ValueError):
            pass
    return say


class Bench:
    """The plan's instruments; :meth:`output_off` switches the supply off with retries, and an output
    once not confirmed off is never switched on again (:meth:`output_on` refuses)."""

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
        self.off_unconfirmed = False  # an off that could not be confirmed: never switch on again
        self.last_off_error = ""
        self.warnings = self._profile_warnings()

    def _profile_warnings(self) -> list[str]:
        plan, out = self.plan, []
        supply_spec = plan.instruments["supply"]
        supply_ignores = (("channel",) if supply_spec.channel == 1 else ()) + (("slot",) if len(plan.parts) == 1 else ())
        ignore = {"scope": (), "chamber": (), "supply": supply_ignores}
        for role, profile in self.profiles.items():
            for line in profile.unused_plan_values(role, ignore=ignore[role]):
                out.append(f"{role} profile {profile.name} ({profile.path}): {line}: that plan value never reaches "
                           f"the instrument")
        wait = self.profiles["scope"].operation("scope", "wait_complete")
        if wait.reply == "none" and wait.sync in ("none", "wait"):
            out.append(f"scope profile {self.profiles['scope'].name}: [scope.wait_complete] cannot tell whether an "
                       f"acquisition happened (sync = {wait.sync!r}); only a repeated frame or a supply trace "
                       f"that never rose will reveal a missed trigger")
        return out

    def set_log(self, log: Callable) -> None:
        for session in self.sessions.values():
            session.log = log

    def open(self) -> None:
        for session in self.sessions.values():
            session.open()

    def identities(self) -> dict[str, str]:
        return {role: str(s.identity) for role, s in self.sessions.items() if s.identity is not None}

    def output_on(self) -> None:
        if self.off_unconfirmed:
            raise OutputNotOff(f"{self.supply.session.name}: refusing to switch the output on: it could not be "
                               f"confirmed off earlier in this run", instrument=self.supply.session.name)
        self.switched_on = True
        self.supply.on()

    def output_off(self, attempts: int = 3) -> bool | None:
        """Switch the supply output off, reopening the link if needed. True: confirmed off; None: the
        off command was taken but the profile cannot read the state back; False: not confirmed."""
        with shielded():
            for _ in range(attempts):
                try:
                    state = self.supply.off()
                except InstrumentError as exc:
                    self.last_off_error = str(exc)
                    self.sessions["supply"].close()  # the next command reopens and resynchronises
                    continue
                if state is not False:
                    return state
                self.last_off_error = f"{self.supply.session.name}: the output still reads on after the off command"
            self.off_unconfirmed = True
            return False

    def ensure_off(self, when: str) -> bool | None:
        state = self.output_off()
        if state is False:
            raise OutputNotOff(f"{self.supply.session.name}: the output could not be confirmed off {when} "
                               f"({self.last_off_error}); the run stops and will not switch it on again",
                               instrument=self.supply.session.name)
        return state

    def close(self) -> None:
        for session in self.sessions.values():
            session.close()


def run_plan(plan: Plan, campaign: Campaign, *, echo: Callable[[str], None] = print,
             on_event: Callable[[str, Step], None] | None = None, bench: Bench | None = None) -> AcquireReport:
    """Acquire every step of ``plan`` not yet in ``campaign``. ``on_event(name, step)`` is called at
    each stage (configured, armed, powered, captured, stored) so tests can interrupt anywhere."""
    say = _safe(echo)
    steps = plan.steps()
    journal = Journal(campaign.root, plan.name)
    report = AcquireReport(planned=len(steps), journal_path=str(journal.path))
    stored = _stored_of_plan(campaign, plan)
    pending = [s for s in steps if s.key not in stored["locators"]]
    report.already = len(steps) - len(pending)
    if not pending:
        say(f"{plan.name}: all {len(steps)} captures already in the campaign; nothing to do")
        return report
    if plan.simulated:
        say("Simulated bench: no real outputs are driven.")
    else:
        for line in SAFETY_CAUTIONS:
            say(line)
    run = _Run(plan, campaign, bench or Bench(plan), FrameHistory(stored["frames"]), journal, report, say,
               on_event or (lambda name, step: None))
    for warning in run.bench.warnings:
        say(f"WARNING: {warning}")
    journal.write("run_started", plan=plan.name, plan_sha256=plan.sha256, planned=len(steps),
                  pending=len(pending), simulated=plan.simulated, warnings=run.bench.warnings)
    try:
        run.bench.open()
        run.bench.ensure_off("before the run")  # a known state before anything is configured
        journal.write("instruments", identities=run.bench.identities())
        for step in progress(pending, total=len(pending), what=f"acquire {plan.name}", unit="capture"):
            run.step(step)
    except KeyboardInterrupt as exc:
        report.aborted = str(exc) or "interrupted (Ctrl-C)"
        raise
    except BaseException as exc:
        report.aborted = str(exc) or type(exc).__name__
        raise
    finally:
        run.finish()
    return report


def _danger_lines(name: str) -> list[str]:
    return ["!" * 78,
            f"!! DANGER: the supply output ({name}) could NOT be confirmed off.",
            "!! Switch it off at the instrument now. labtool did not switch it on again after that.",
            "!" * 78]


@dataclass
class _Run:
    plan: Plan
    campaign: Campaign
    bench: Bench
    history: FrameHistory
    journal: Journal
    report: AcquireReport
    say: Callable[[str], None]
    notify: Callable[[str, Step], None]
    temperature: float | None = None  # where the chamber was last settled
    part: object = None  # the part last routed

    def __post_init__(self):
        self.bench.set_log(self.log)

    def log(self, event: str, **fields) -> None:
        self.journal.write(event, **fields)
        if event == "error_queue_at_open":
            self.say(f"{fields['instrument']}: its error queue held {fields['entries']} when the session "
                     f"{fields['session']}; logged here, not blamed on the next command")

    def step(self, step: Step) -> None:
        capture, digests = self.with_retries(step)
        result = self.campaign.add_capture(capture)
        self.history.remember(digests)
        self.journal.write("stored", step=step.key, capture_id=result.capture_id, status=result.status)
        self.report.stored.append(result.capture_id)
        self.notify("stored", step)
        time.sleep(self.plan.discharge_s)  # full discharge before the next power cycle

    def with_retries(self, step: Step) -> tuple[Capture, dict[str, str]]:
        plan, bench, retries = self.plan, self.bench, self.plan.run.retries
        for attempt in range(retries + 1):
            try:
                if step.temperature_c != self.temperature and bench.chamber is not None:
                    self.say(f"chamber → {step.temperature_c:g} °C (soak {plan.chamber.soak_s:g} s)")
                    bench.chamber.settle(step.temperature_c, tolerance_c=plan.chamber.tolerance_c,
                                         soak_s=plan.chamber.soak_s, timeout_s=plan.chamber.timeout_s)
                self.temperature = step.temperature_c
                if step.part != self.part and bench.supply.can_select_part and step.part.slot is not None:
                    bench.supply.select_part(step.part.slot)
                self.part = step.part
                return self.acquire(step, attempt)
            except OutputNotOff:
                raise
            except InstrumentError as exc:
                bench.ensure_off(f"after: {exc}")
                if isinstance(exc, NoAcquisition):
                    self.report.refused += 1
                    self.journal.write("refused", step=step.key, attempt=attempt + 1, error=str(exc))
                if not is_retryable(exc) or attempt == retries:
                    raise
                self.report.retries += 1
                self.journal.write("retry", step=step.key, attempt=attempt + 1, error=str(exc),
                                   kind=type(exc).__name__, instrument=exc.instrument, command=exc.command)
                self.say(f"{step.key}: attempt {attempt + 1} of {retries + 1} failed, outputs off, retrying: {exc}")
                self.part = None  # re-establish the routing on the reopened link
                time.sleep(plan.discharge_s)
        raise AssertionError("unreachable")  # the last attempt returns or raises

    def acquire(self, step: Step, attempt: int) -> tuple[Capture, dict[str, str]]:
        plan, bench, sc = self.plan, self.bench, self.plan.scope
        scope_name = bench.scope.session.name
        bench.scope.configure(channels={sc.supply_channel: ChannelSetup(*sc.channel_range("supply")),
                                        sc.output_channel: ChannelSetup(*sc.channel_range("output"))},
                              record_s=sc.record_s(step.ramp_s), points=sc.points,
                              pretrigger_s=sc.pretrigger_s(step.ramp_s), trigger_channel=sc.supply_channel,
                              trigger_level_v=sc.trigger_level_v, ramp_s=step.ramp_s)
        bench.supply.configure(voltage_v=plan.supply.voltage_v, current_limit_a=plan.supply.current_limit_a,
                               ovp_v=plan.supply.ovp_v, ramp_s=step.ramp_s)
        self.notify("configured", step)
        bench.scope.arm()
        self.notify("armed", step)
        bench.output_on()
        self.notify("powered", step)
        outcome = bench.scope.wait_complete()
        if outcome.done is False:
            raise NoAcquisition(f"{scope_name}: no new acquisition: {outcome.command!r} answered {outcome.reply!r} "
                                f"(not done) within {outcome.limit_s:g} s: the scope did not trigger",
                                instrument=scope_name, command=outcome.command)
        traces = {"supply": bench.scope.read(sc.supply_channel, deadline_s=sc.read_deadline_s),
                  "output": bench.scope.read(sc.output_channel, deadline_s=sc.read_deadline_s)}
        if isinstance(bench.supply, SourceMeasureUnit):
            traces["supply_current"] = bench.supply.read_current(deadline_s=sc.read_deadline_s)
        bench.ensure_off("after the power cycle")
        self.notify("captured", step)
        digests = self.history.check_new({role: t.data for role, t in traces.items()},
                                         instrument={"scope": scope_name, "supply": bench.supply.session.name})
        fig = supply_figures(traces["supply"].scaling.times(), traces["supply"].values)
        check_powered(fig, trigger_level_v=sc.trigger_level_v, instrument=scope_name)
        problems = off_plan(fig, voltage_v=plan.supply.voltage_v, ramp_s=step.ramp_s,
                            ramp_tolerance=plan.run.ramp_tolerance, supply_tolerance=plan.run.supply_tolerance)
        if problems and plan.run.off_plan == "refuse":
            raise OffPlanCapture(f"{step.key}: capture refused, the supply trace ({scope_name} channel "
                                 f"{sc.supply_channel}) is not what the plan asked for: {'; '.join(problems)} "
                                 f"(set [run] off_plan = \"flag\" to store such captures tagged off_plan)",
                                 instrument=scope_name)
        p = step.part
        tags = {**plan.tags, "plan": plan.name, **({"slot": str(p.slot)} if p.slot else {})}
        if problems:
            tags["off_plan"] = "; ".join(problems)
            self.report.flagged += 1
            self.journal.write("off_plan", step=step.key, problems=problems)
            self.say(f"WARNING: {step.key}: stored tagged off_plan: {'; '.join(problems)}")
        chamber_reading = bench.chamber.temperature() if bench.chamber is not None else None
        conditions = Conditions(lot=p.lot, wafer=p.wafer, die_x=p.die_x, die_y=p.die_y, part=p.part,
                                temperature_c=step.temperature_c, ramp_s=step.ramp_s, vdd_v=plan.supply.voltage_v,
                                repeat=step.repeat, tags=tags)
        metadata = {"plan_sha256": plan.sha256, "attempt": str(attempt + 1),
                    "measured_ramp_s": f"{fig.ramp_s:.6g}", "measured_supply_final_v": f"{fig.final_v:.6g}",
                    **{f"frame_sha256_{group}": d for group, d in digests.items()},
                    **{f"idn_{role}": idn for role, idn in bench.identities().items()},
                    **({"chamber_reading_c": f"{chamber_reading:.3f}"} if chamber_reading is not None else {}),
                    **({"measure_limits": plan.run.measure_limits} if plan.run.measure_limits else {})}
        capture = build_capture(traces, conditions, source_path=plan.source_path, locator=step.key,
                                profile_sha256={role: prof.sha256 for role, prof in bench.profiles.items()},
                                metadata=metadata)
        return capture, digests

    def finish(self) -> None:
        """Outputs off (shielded from signals), journal closed, links closed; OutputNotOff if unsafe."""
        bench, report = self.bench, self.report
        with shielded() as shield:
            report.outputs_off_confirmed = bench.output_off(
                attempts=3 if bench.switched_on or bench.off_unconfirmed else 1)
            unsafe = report.outputs_off_confirmed is False and (bench.switched_on or bench.off_unconfirmed)
            if shield.signal and not report.aborted:
                report.aborted = f"stopped by {signal.Signals(shield.signal).name}"
            if unsafe:
                shield.raise_pending = False  # exit 6 tells more than the signal's code
                for line in _danger_lines(bench.supply.session.name):
                    self.say(line)
            elif report.aborted and bench.switched_on:
                self.say("Stopped; the supply output is off." if report.outputs_off_confirmed else
                         "Stopped; the supply took the off command (this profile cannot read the output state back).")
            self.journal.write("run_ended", stored=len(report.stored), retries=report.retries,
                               refused=report.refused, flagged=report.flagged, aborted=report.aborted,
                               outputs_off=report.outputs_off_confirmed)
            bench.close()
        if unsafe:
            raise OutputNotOff(f"{bench.supply.session.name}: the supply output could not be confirmed off "
                               f"({bench.last_off_error}): switch it off at the instrument",
                               instrument=bench.supply.session.name)


def _stored_of_plan(campaign: Campaign, plan: Plan) -> dict:
    """Locators done, and the frame digests of the plan's stored captures (a stale frame after a
    resume is one of them)."""
    df = campaign.captures(current_only=False)
    out = {"locators": set(), "frames": {}}
    if df.empty:
        return out
    mine = df[df["source_path"] == plan.source_path]
    out["locators"] = set(mine["locator"])
    for text in mine.get("metadata_json", []):
        meta = json.loads(text)
        for key, value in meta.items():
            if key.startswith("frame_sha256_"):
                out["frames"].setdefault(key.removeprefix("frame_sha256_"), set()).add(value)
    return out
