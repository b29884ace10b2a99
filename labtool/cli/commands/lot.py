"""``labtool lot CAMPAIGN [--by KEYS] [--spec-max-delay S] [--json]``: statistics per lot or any grouping."""

from __future__ import annotations

from labtool.stats.lot import lot_statistics
from labtool.stats.sources import json_line, load_measurements, text_table
from labtool.stats.table import parse_keys
from labtool.units import parse_quantity

_COLUMNS = ("n", "n_parts", "n_started", "n_stuck", "n_slow", "n_ringing", "n_recollapse", "n_wrong_level",
            "n_incomplete", "n_no_supply", "stuck_ppm_ucl95", "delay_median_s", "delay_p05_s", "delay_p95_s",
            "delay_fit", "cpk", "n_outliers", "intermittent_parts")


def register(sub) -> None:
    p = sub.add_parser("lot", help="lot statistics: verdict counts, stuck-at-zero bound, delay distribution")
    p.add_argument("campaign")
    p.add_argument("--by", metavar="KEYS", default=None,
                   help="comma-separated condition or tag columns to group by (default: lot)")
    p.add_argument("--spec-max-delay", metavar="S", default=None,
                   help="upper delay spec for Cpk, seconds (500e-6 or 500us)")
    p.add_argument("--json", action="store_true", help="one JSON object per group per line")
    p.set_defaults(handler=run)


def run(args) -> int:
    by = parse_keys(args.by)
    spec = None if args.spec_max_delay is None else parse_quantity(args.spec_max_delay, "s", what="--spec-max-delay")
    stats = lot_statistics(load_measurements(args.campaign), by=by, spec_max_delay_s=spec)
    records = [s.to_json_dict() for s in stats]
    if args.json:
        for rec in records:
            print(json_line(rec))
        return 0
    for rec in records:
        rec["delay_fit"] = rec["delay_fit"]["distribution"] if rec["delay_fit"] else None
        rec["n_outliers"] = len(rec["outliers"])
    print(text_table(records, (*by, *_COLUMNS)))
    return 0
