"""``labtool compare CAMPAIGN (--model DESIGN | --predictions FILE) [--by KEYS] [--json]``."""

from __future__ import annotations

from labtool.execute import parse_scheduler
from labtool.stats.compare import compare
from labtool.stats.predictions import load_predictions, predictions_from_model
from labtool.stats.sources import add_monte_carlo_options, json_line, load_measurements, text_table
from labtool.stats.table import parse_keys

_COLUMNS = ("n_measured", "n_predicted", "measured_delay_median_s", "predicted_delay_median_s", "ks_pvalue",
            "ad_pvalue", "measured_n_stuck", "predicted_p_stuck", "stuck_pvalue", "finding")


def register(sub) -> None:
    p = sub.add_parser("compare", help="compare lot statistics with the model's or the design team's predictions")
    p.add_argument("campaign")
    src = p.add_mutually_exclusive_group(required=True)
    src.add_argument("--model", metavar="DESIGN", help="design file: Monte Carlo at the measured set-ups")
    src.add_argument("--predictions", metavar="FILE",
                     help="predictions table, CSV or XLSX (layout: docs/predictions-format.md)")
    p.add_argument("--by", metavar="KEYS", default=None, help="comma-separated columns to group by (default: lot)")
    add_monte_carlo_options(p, samples=200, samples_help="Monte Carlo parts per measured set-up with --model")
    p.add_argument("--json", action="store_true", help="one JSON object per group per line")
    p.set_defaults(handler=run)


def run(args) -> int:
    by = parse_keys(args.by)
    meas = load_measurements(args.campaign)
    if args.model:
        from labtool.model import load_design

        pred = predictions_from_model(load_design(args.model), meas, n=args.samples, seed=args.seed,
                                      scheduler=parse_scheduler(args.scheduler))
    else:
        pred = load_predictions(args.predictions)
    results = compare(meas, pred, by=by)
    if args.json:
        for c in results:
            print(json_line(c.to_json_dict()))
        return 0
    print(text_table([c.to_json_dict() for c in results], (*by, *_COLUMNS)))
    for c in results:
        print(f"{', '.join(f'{k}={v}' for k, v in c.group.items())}: {c.finding_text}")
    return 0
