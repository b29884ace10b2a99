"""``labtool ingest PATH... --into CAMPAIGN``: read CSV/XLSX captures into a campaign store."""

from __future__ import annotations

import sys
from collections import Counter

from labtool.cli.columns import add_column_options, column_picks
from labtool.execute import add_scheduler_option, parse_scheduler
from labtool.ingest import IngestOptions, ingest_paths, load_manifest
from labtool.ingest.conditions import compile_name_pattern
from labtool.ingest.pairing import token_pattern
from labtool.store import Campaign


def register(sub) -> None:
    p = sub.add_parser("ingest", help="read CSV / CSV.gz / XLSX captures (files or folders, recursive) into a "
                                      "campaign store")
    p.add_argument("paths", nargs="+", metavar="PATH", help="capture files or folders")
    p.add_argument("--into", required=True, metavar="CAMPAIGN", help="campaign directory (created if missing)")
    p.add_argument("--name-pattern", metavar="P",
                   help='conditions from file names, fields in braces: "{lot}_{part}_{temp_c}C.csv"; '
                        "lot, wafer, die_x, die_y, part, temperature_c (temp_c), ramp_s (ramp), vdd_v, repeat "
                        "are typed, any other field becomes a tag")
    p.add_argument("--manifest", metavar="F", help="run sheet (CSV or XLSX): a file column and condition columns")
    add_column_options(p)
    p.add_argument("--pair-channels", metavar="RULE", default="auto",
                   help="join files saved one channel per file (C1_run.csv + C2_run.csv) into one capture: "
                        "auto (default: same name apart from a channel token C1, CH2, chan3), off, or a regular "
                        "expression for the token")
    p.add_argument("--update-conditions", action="store_true",
                   help="a file stored before, now under new conditions (run sheet, name pattern): change the "
                        "stored capture's conditions instead of storing a new version")
    add_scheduler_option(p)
    p.set_defaults(handler=run)


def run(args) -> int:
    if args.name_pattern:
        compile_name_pattern(args.name_pattern)  # a bad pattern is a usage error before any file is read
    scheduler = parse_scheduler(args.scheduler)
    manifest = load_manifest(args.manifest) if args.manifest else None
    token_pattern(args.pair_channels)  # a bad expression is a usage error before any file is read
    options = IngestOptions(name_pattern=args.name_pattern, manifest=manifest, pair_channels=args.pair_channels,
                            update_conditions=args.update_conditions, **column_picks(args))
    with Campaign.open(args.into, create=True) as campaign:
        report = ingest_paths(args.paths, campaign, options, scheduler,
                              exclude=[args.manifest] if args.manifest else ())
    for line in [*report.warnings, *report.versions]:
        print(f"labtool ingest: warning: {line}", file=sys.stderr)
    for _, message in report.failed:
        print(message, file=sys.stderr)
    updated = f", {len(report.updated)} updated" if report.updated else ""
    print(f"{args.into}: {len(report.added)} added{updated}, {len(report.skipped)} skipped, {len(report.failed)} "
          f"failed ({report.files} file{'s' if report.files != 1 else ''} read)")
    # Roles found from the waveform or given by flag, grouped; name-only assignments go without saying.
    inferred = Counter(roles for _, roles in report.roles if "(shape)" in roles or "(flag)" in roles)
    for assignment, count in inferred.most_common():
        print(f"  roles {assignment}: {count} capture{'s' if count != 1 else ''}")
    return 1 if report.failed else 0
