"""``labtool acquire PLAN --into CAMPAIGN [--sim]``: run an acquisition plan unattended, resumably."""

from __future__ import annotations

import sys
from pathlib import Path

from instruments.sim.population import DEFAULT_POPULATION
from labtool.errors import LabtoolError, OutputNotOff, PlanError, ProfileError, Terminated, UsageError
from labtool.store import Campaign


def register(sub) -> None:
    p = sub.add_parser("acquire", help="run an acquisition plan: captures stored as they arrive, re-run resumes")
    p.add_argument("plan", help="acquisition plan (TOML)")
    p.add_argument("--into", required=True, metavar="CAMPAIGN", help="campaign directory (created if missing)")
    p.add_argument("--sim", action="store_true",
                   help="start the simulated bench on free loopback ports and run the plan against it")
    p.add_argument("--population", metavar="FILE",
                   help="with --sim: the parts on the simulated bench (default: the plan's [sim] population, "
                        f"else {DEFAULT_POPULATION})")
    p.set_defaults(handler=run)


def run(args) -> int:
    from instruments.acquire import run_plan
    from instruments.plan import load_plan
    from instruments.stopping import stop_on_signals

    plan = load_plan(args.plan)
    running = None
    with stop_on_signals():  # SIGTERM and SIGHUP stop the run as Ctrl-C does: outputs off, journal closed
        try:
            if args.sim:
                from instruments.sim.bench import start_population_bench

                population = args.population or plan.sim_population or str(DEFAULT_POPULATION)
                running = start_population_bench(population)
                plan = plan.with_resources(running.resources, profile="generic-scpi")
                print(f"simulated bench ({population}): " + ", ".join(f"{r} {res}" for r, res in running.resources.items()))
            with Campaign.open(args.into, create=True) as campaign:
                try:
                    report = run_plan(plan, campaign, echo=lambda line: print(line, file=sys.stderr))
                except (LabtoolError, Terminated) as exc:
                    _err(f"labtool acquire: {exc}")
                    _resume_hint(exc, campaign.root / "journal")
                    return exc.exit_code
        except Terminated as exc:  # before the run started (the simulated bench, the store)
            _err(f"labtool acquire: {exc}")
            return exc.exit_code
        finally:
            if running is not None:
                running.stop()
    print(f"{args.into}: {len(report.stored)} capture(s) stored, {report.already} already present, "
          f"{report.retries} retr{'y' if report.retries == 1 else 'ies'}, {report.refused} frame(s) refused, "
          f"{report.flagged} flagged off plan ({report.planned} planned); journal {report.journal_path}")
    return 0


def _err(text: str) -> None:
    try:
        print(text, file=sys.stderr, flush=True)
    except (OSError, ValueError):
        pass  # no terminal any more (SIGHUP)


def _resume_hint(exc: BaseException, journal_dir: Path) -> None:
    """Only where running again can help: not for a bad plan or profile, which would fail the same way."""
    if isinstance(exc, (ProfileError, PlanError, UsageError)):
        return
    if isinstance(exc, OutputNotOff):
        _err(f"labtool acquire: switch the supply output off at the instrument first; then run the same command "
             f"again to resume where it stopped (journal in {journal_dir})")
        return
    _err(f"labtool acquire: run the same command again to resume where it stopped (journal in {journal_dir})")
