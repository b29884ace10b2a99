"""``labtool measure FILE... | CAMPAIGN``: startup metrics and verdicts per capture (per dip for supply dips).

A path that is a campaign directory (it holds ``catalog.sqlite``) is measured in place: every current
capture, results saved in its catalog under the limits' key (replacing earlier results for the same
limits). Any other path is read as a capture file and measured without storing anything.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

from labtool.cli.columns import add_column_options, column_picks
from labtool.errors import LabtoolError, UsageError
from labtool.execute import add_scheduler_option, parse_scheduler
from labtool.ingest import IngestOptions
from labtool.measure import Limits
from labtool.measure.batch import measure_campaign, measure_files
from labtool.stats.sources import text_table
from labtool.store import Campaign
from labtool.store.campaign import CATALOG_NAME

_LIMIT_FLAGS = {"supply_ref": "supply_ref", "supply_min": "supply_min_v", "expect": "expect_v",
                "level_tol": "level_tol_pct", "band": "band_pct", "max_delay": "max_delay_s",
                "max_overshoot": "max_overshoot_pct"}
# Columns of the readable table; each is shown in the unit its name says (labtool.display).
_TABLE = ("file", "capture_id", "verdict", "t_supply_s", "delay_s", "rise_s", "settle_s", "overshoot_pct", "ring_hz",
          "damping", "vout_final_v", "vsupply_final_v", "ramp_v_per_s", "supply_at_start_v", "vsupply_at_valid_v")
# Shown only when some row has them: enable edges, supply dips, power-downs.
_EVENT_TABLE = ("t_enable_s", "dip_index", "dip_depth_v", "dip_duration_s", "dip_min_v", "vout_min_during_dip_v",
                "recovery_s", "vsupply_dropout_v")


def register(sub) -> None:
    p = sub.add_parser("measure", help="startup delay, settling, overshoot, ringing and a verdict per capture")
    p.add_argument("paths", nargs="+", metavar="FILE|CAMPAIGN",
                   help="capture files (CSV, CSV.gz, XLSX) or a campaign directory")
    add_column_options(p, note=" (files only)")
    p.add_argument("--supply-ref", metavar="X", help="supply valid level: percent of its final level (90%%) or volts")
    p.add_argument("--supply-min", metavar="V", help="no_supply when the supply never reaches this voltage")
    p.add_argument("--expect", metavar="V", help="expected output level (volts)")
    p.add_argument("--level-tol", metavar="PCT", help="wrong_level beyond ±PCT %% of --expect (default 5)")
    p.add_argument("--band", metavar="PCT", help="settling band, ±PCT %% of the final level (default 1)")
    p.add_argument("--max-delay", metavar="S", help="slow_start above this delay (500e-6 or 500us)")
    p.add_argument("--max-overshoot", metavar="PCT", help="ringing above this overshoot in %% (default 10)")
    p.add_argument("--limits", metavar="F", help="TOML limits file; flags override it")
    p.add_argument("--json", action="store_true",
                   help="one JSON object per line: per capture, or per dip of a capture with supply dips")
    add_scheduler_option(p)
    p.set_defaults(handler=run)


def _limits(args) -> Limits:
    limits = Limits.from_toml(args.limits) if args.limits else Limits()
    for flag, field in _LIMIT_FLAGS.items():
        value = getattr(args, flag)
        if value is None:
            continue
        try:
            limits = limits.merged(**{field: value})
        except UsageError as exc:  # name the flag the user typed, not the field behind it
            raise UsageError(f"--{flag.replace('_', '-')}: {str(exc).removeprefix(field + ': ')}") from None
    return limits


def is_campaign(path: str) -> bool:
    return (Path(path) / CATALOG_NAME).is_file()


def _campaign_rows(path: str, limits: Limits, scheduler):
    with Campaign.open(path) as campaign:
        report = measure_campaign(campaign, limits, scheduler)
    for row in report.rows:
        yield "ok", row
    for capture_id, message in report.failed:
        yield "error", f"{path}: capture {capture_id}: {message}"
    print(f"labtool measure: {path}: {report.measured} capture(s) measured and saved under limits "
          f"{report.limits_key}" + (f", {len(report.failed)} failed" if report.failed else ""), file=sys.stderr)


def run(args) -> int:
    limits = _limits(args)
    scheduler = parse_scheduler(args.scheduler)
    files = [p for p in args.paths if not is_campaign(p)]
    sources = [_campaign_rows(p, limits, scheduler) for p in args.paths if is_campaign(p)]
    sources.append(measure_files(files, IngestOptions(**column_picks(args)), limits, scheduler))
    failures = 0
    table = []
    for source in sources:
        try:
            for status, item in source:
                if status == "error":
                    failures += 1
                    print(f"labtool measure: {item}", file=sys.stderr)
                elif args.json:
                    print(json.dumps(item, allow_nan=False), flush=True)
                else:
                    table.append(item)
        except LabtoolError as exc:  # a whole campaign that cannot be opened; the other paths go on
            failures += 1
            print(f"labtool measure: {exc}", file=sys.stderr)
    if table:
        print(text_table(table, _TABLE + tuple(c for c in _EVENT_TABLE if any(r.get(c) is not None for r in table))))
    if failures:
        print(f"labtool measure: {failures} failure(s)", file=sys.stderr)
    return 1 if failures else 0
