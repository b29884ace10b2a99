"""``labtool lot CAMPAIGN [--by KEYS] [--spec-max-delay S] [--json]``: statistics per lot or any grouping.

With ``--json``, one object per line: a group row (``"row": "group"``) then one set-up row
(``"row": "setup"``) per ramp × temperature × supply of that group. docs/statistics.md says what each
figure means.
"""

from __future__ import annotations

import json

from labtool.measure.verdict import VERDICTS
from labtool.stats.sources import text_table
from labtool.stats.table import parse_keys
from labtool.units import parse_quantity

GROUP_COLUMNS = ("n_captures", "n_parts", "n_parts_stuck", "parts_stuck_upper95", "start_stuck_rate",
                 "start_stuck_upper95", *(f"n_{v}" for v in reversed(VERDICTS)), "n_setups", "intermittent_parts")
SETUP_COLUMNS = ("ramp_s", "temperature_c", "vdd_v", "n_captures", "delay_n", "delay_median_s", "delay_p05_s",
                 "delay_p95_s", "output_valid", "vsupply_at_valid_median_v", "delay_fit", "cpk", "n_outliers")


def register(sub) -> None:
    p = sub.add_parser("lot", help="lot statistics: stuck-at-zero parts and bounds per group, delays per set-up")
    p.add_argument("campaign")
    p.add_argument("--by", metavar="KEYS", default=None,
                   help="comma-separated condition or tag columns to group by (default: lot)")
    p.add_argument("--spec-max-delay", metavar="S", default=None,
                   help="upper delay spec for Cpk, seconds (500e-6 or 500us)")
    p.add_argument("--json", action="store_true",
                   help="one JSON object per line: a group row, then a row per set-up of the group")
    p.set_defaults(handler=run)


def readable_setup(rec: dict) -> dict:
    """A set-up row for the readable table: the fit's law, the outlier count, and whether the output was
    ready before or after supply valid (a negative delay is not an early part but a slow ramp); where it
    was ready before, the supply at which it became valid is the figure to read, so it is shown there."""
    ready = rec["ready_before_supply_valid"]
    return {**rec, "delay_fit": rec["delay_fit"]["distribution"] if rec["delay_fit"] else None,
            "n_outliers": len(rec["outliers"]),
            "output_valid": None if ready is None else "ready before supply valid" if ready else "after supply valid",
            "vsupply_at_valid_median_v": rec["vsupply_at_valid_median_v"] if ready else None}


def run(args) -> int:
    from labtool._api.results import lot

    by = parse_keys(args.by)
    spec = None if args.spec_max_delay is None else parse_quantity(args.spec_max_delay, "s", what="--spec-max-delay")
    result = lot(args.campaign, by=by, spec_max_delay_s=spec)
    stats = result.groups
    if args.json:
        for rec in result.rows():
            print(json.dumps(rec, allow_nan=False))
        return 0
    print(text_table([s.to_json_dict() for s in stats], (*by, *GROUP_COLUMNS)))
    print("\nper set-up (delays of the captures that came up and stayed):")
    setup_keys = [k for k in by if k not in SETUP_COLUMNS]
    print(text_table([readable_setup(r) for s in stats for r in s.setup_rows()], (*setup_keys, *SETUP_COLUMNS)))
    return 0
