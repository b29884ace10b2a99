"""``labtool bench check RESOURCE --profile P`` and ``labtool bench sim``: try a profile on a live
instrument; serve the simulated bench on 127.0.0.1."""

from __future__ import annotations

import json
import sys
import threading
from pathlib import Path

from instruments.sim.population import DEFAULT_POPULATION
from labtool.errors import OutputNotOff, Terminated, UsageError


def register(sub) -> None:
    p = sub.add_parser("bench", help="bench instruments: check a command profile, run the simulated bench")
    bench_sub = p.add_subparsers(dest="bench_command", metavar="ACTION")
    bench_sub.required = True
    c = bench_sub.add_parser("check", help="exercise every operation of a profile against a live instrument")
    c.add_argument("resource", help="VISA resource, e.g. TCPIP::192.0.2.10::5025::SOCKET")
    c.add_argument("--profile", required=True, metavar="P", help="profile file, or a shipped name (generic-scpi)")
    c.add_argument("--role", action="append", choices=("scope", "supply", "chamber"),
                   help="only these roles (repeatable; default every role the profile defines)")
    c.add_argument("--backend", default="@py", help="PyVISA backend (default @py, pyvisa-py)")
    c.add_argument("--json", action="store_true", help="one JSON object per operation")
    c.set_defaults(handler=run_check)
    s = bench_sub.add_parser("sim", help="serve a simulated scope, supply and chamber on 127.0.0.1")
    s.add_argument("--port", type=int, default=0, help="scope port; supply +1, chamber +2 (default: free ports)")
    s.add_argument("--population", metavar="FILE", help=f"parts on the bench (default {DEFAULT_POPULATION})")
    s.add_argument("--fault", action="append", default=[], metavar="ROLE:KIND:REGEX",
                   help="inject a fault once, when REGEX matches a message to ROLE (scope, supply, chamber); "
                        "KIND: no_reply, late_reply, drop_mid_block, reset_mid_block, truncated_block, "
                        "wrong_length_header, error_queue, reset (repeatable)")
    s.set_defaults(handler=run_sim)


def run_check(args) -> int:
    from instruments.acquire import SAFETY_CAUTIONS
    from instruments.check import CHECK_CURRENT_A, CHECK_OVP_V, CHECK_VOLTAGE_V, FINAL_OFF, check_profile
    from instruments.profile import load_profile
    from instruments.stopping import stop_on_signals

    profile = load_profile(args.profile)
    roles = args.role or None
    if roles is None or "supply" in roles:
        print(f"The check switches a supply output on at {CHECK_VOLTAGE_V:g} V ({CHECK_CURRENT_A * 1e3:g} mA "
              f"limit, {CHECK_OVP_V:g} V protection) for a moment. Disconnect the parts first.", file=sys.stderr)
        for line in SAFETY_CAUTIONS[1:]:
            print(line, file=sys.stderr)

    def show(r):
        if args.json:
            print(json.dumps(r.to_json_dict()), flush=True)
        else:
            print(f"{r.status:<8} {r.role:<8} {r.operation:<42} {r.detail}", flush=True)

    with stop_on_signals():  # a signal stops the check as Ctrl-C does, after the output is off
        try:
            results = check_profile(args.resource, profile, roles=roles, backend=args.backend, report=show)
        except Terminated as exc:
            print(f"labtool bench check: {exc}", file=sys.stderr)
            return exc.exit_code
    bad = [r for r in results if r.status in ("failed", "absent")]
    if not args.json:
        ok = sum(r.status == "ok" for r in results)
        print(f"{args.resource}: {ok} operation(s) worked, {len(bad)} failed or missing "
              f"(profile {profile.name}, {profile.path})")
    if any(r.operation == FINAL_OFF for r in bad):
        return OutputNotOff.exit_code  # the output may still be on
    return 1 if bad else 0


def run_sim(args) -> int:
    from instruments.sim.bench import start_population_bench

    population = Path(args.population) if args.population else DEFAULT_POPULATION
    if not population.exists():
        raise UsageError(f"{population}: no population file (give --population FILE)")
    if not 0 <= args.port <= 65533:
        raise UsageError(f"--port {args.port}: expected 0 (free ports) or 1-65533")
    faults = [parse_fault(text) for text in args.fault]
    running = start_population_bench(str(population), port=args.port)
    for role, fault in faults:
        running.servers[role].add_fault(fault)
    for role, resource in running.resources.items():
        print(f"{role:<8} {resource}", flush=True)
    print("simulated bench on 127.0.0.1 (loopback only), generic-scpi profile; Ctrl-C stops it", flush=True)
    try:
        threading.Event().wait()
    finally:
        running.stop()
    return 0


def parse_fault(text: str):
    from instruments.sim.server import FAULT_KINDS, Fault

    role, _, rest = text.partition(":")
    kind, _, regex = rest.partition(":")
    if role not in ("scope", "supply", "chamber") or kind not in FAULT_KINDS:
        raise UsageError(f"--fault {text!r}: expected ROLE:KIND:REGEX with ROLE scope, supply or chamber and "
                         f"KIND one of {', '.join(FAULT_KINDS)}")
    return role, Fault(kind, match=regex, connection=None, times=1)
