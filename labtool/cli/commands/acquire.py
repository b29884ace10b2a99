"""``labtool acquire PLAN --into CAMPAIGN [--sim]``: run an acquisition plan unattended, resumably."""

from __future__ import annotations

import sys
from pathlib import Path

from instruments.sim.population import DEFAULT_POPULATION
from labtool.errors import LabtoolError
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

    plan = load_plan(args.plan)
    running = None
    if args.sim:
        from instruments.sim.bench import start_population_bench

        population = args.population or plan.sim_population or str(DEFAULT_POPULATION)
        running = start_population_bench(population)
        plan = plan.with_resources(running.resources, profile="generic-scpi")
        print(f"simulated bench ({population}): " + ", ".join(f"{r} {res}" for r, res in running.resources.items()))
    try:
        with Campaign.open(args.into, create=True) as campaign:
            try:
                report = run_plan(plan, campaign, echo=lambda line: print(line, file=sys.stderr))
            except (LabtoolError, KeyboardInterrupt):
                print(f"labtool acquire: run the same command again to resume where it stopped "
                      f"(journal in {campaign.root / 'journal'})", file=sys.stderr)
                raise
    finally:
        if running is not None:
            running.stop()
    print(f"{args.into}: {len(report.stored)} capture(s) stored, {report.already} already present, "
          f"{report.retries} retr{'y' if report.retries == 1 else 'ies'} ({report.planned} planned); "
          f"journal {report.journal_path}")
    return 0
