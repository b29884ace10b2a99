"""``labtool compare CAMPAIGN (--model DESIGN | --predictions FILE) [--by KEYS] [--json]``.

With ``--model`` the Monte Carlo runs at the measured set-ups with the limits the campaign was
measured with. With ``--json``, one object per line: a group row (``"row": "group"``: the stuck-at-zero
test over parts and the findings) then one row per matched set-up (``"row": "setup"``: the delays).
"""

from __future__ import annotations

import json

from labtool.display import format_pvalue
from labtool.stats.sources import add_monte_carlo_options, text_table
from labtool.stats.table import parse_keys

GROUP_COLUMNS = ("n_measured", "n_setups", "measured_n_parts", "measured_n_parts_stuck", "predicted_n_parts",
                 "predicted_p_part_stuck", "stuck_pvalue", "finding")
SETUP_COLUMNS = ("n_measured", "n_parts", "n_predicted", "measured_delay_median_s", "predicted_delay_median_s",
                 "delay_shift_s", "ks_pvalue", "ad_pvalue", "measured_n_stuck", "predicted_n_stuck", "finding")


def register(sub) -> None:
    p = sub.add_parser("compare", help="compare lot statistics with the model's or the design team's predictions")
    p.add_argument("campaign")
    src = p.add_mutually_exclusive_group(required=True)
    src.add_argument("--model", metavar="DESIGN",
                     help="design file: Monte Carlo at the measured set-ups, with the campaign's measurement limits")
    src.add_argument("--predictions", metavar="FILE",
                     help="predictions table, CSV or XLSX (layout: docs/predictions-format.md)")
    p.add_argument("--by", metavar="KEYS", default=None, help="comma-separated columns to group by (default: lot)")
    add_monte_carlo_options(p, samples=200, samples_help="Monte Carlo parts per measured set-up with --model")
    p.add_argument("--json", action="store_true",
                   help="one JSON object per line: a group row, then a row per matched set-up")
    p.set_defaults(handler=run)


def run(args) -> int:
    from labtool._api.results import compare

    by = parse_keys(args.by)
    result = compare(args.campaign, model=args.model, predictions=args.predictions, by=by, samples=args.samples,
                     seed=args.seed, scheduler=args.scheduler or "local")  # the CLI uses every core by default
    results = result.groups
    if args.json:
        for rec in result.rows():
            print(json.dumps(rec, allow_nan=False))
        return 0
    print(text_table([c.to_json_dict() for c in results], (*by, *GROUP_COLUMNS)))
    cols = results[0].match_columns if results else ()
    setup_rows = [{**r, "ad_pvalue": format_pvalue(r["ad_pvalue"], r["ad_pvalue_bound"]),
                   "ks_pvalue": format_pvalue(r["ks_pvalue"])} for c in results for r in c.setup_rows()]
    print("\nper set-up (each part's median delay against the simulated parts' delays):")
    print(text_table(setup_rows, (*dict.fromkeys([*by, *cols]), *SETUP_COLUMNS)))
    print()
    for c in results:
        print(f"{', '.join(f'{k}={v}' for k, v in c.group.items())}: {c.finding_text}")
    return 0
