"""``labtool triage CAMPAIGN (--part LOT/PART ... | --all-returned) [--model DESIGN] [--json]``:
ranked causes for returned parts, with posteriors, deciding captures and the next experiment."""

from __future__ import annotations

import json
import sys

from labtool.errors import UsageError
from labtool.stats.sources import text_table


def register(sub) -> None:
    p = sub.add_parser("triage", help="rank likely causes for returned parts against their lot, with posteriors "
                                      "and the next experiment")
    p.add_argument("campaign")
    p.add_argument("--part", action="append", default=[], metavar="LOT/PART",
                   help="a part, e.g. ZR24A/p07; repeat the flag or separate parts with commas for several")
    p.add_argument("--all-returned", action="store_true",
                   help="every part with a capture tagged returned (a manifest column `returned` with yes/1/true, "
                        "or any tag whose value is `returned`)")
    p.add_argument("--model", metavar="DESIGN", default=None,
                   help="design file: back the stories that have a failure recipe with the model's Monte Carlo at "
                        "the parts' set-ups, and add the model's startup margins to the evidence")
    p.add_argument("--model-samples", type=int, default=None, metavar="N",
                   help="Monte Carlo parts per set-up and recipe with --model (default 16)")
    p.add_argument("--seed", type=int, default=1, help="Monte Carlo seed with --model (default 1)")
    p.add_argument("--json", action="store_true", help="one JSON object per part, one per line")
    from labtool.execute import add_scheduler_option

    add_scheduler_option(p)
    p.set_defaults(handler=run)


def _parts(args, table) -> list[str]:
    from labtool.stats.triage import returned_parts

    named = [p.strip() for text in args.part for p in text.split(",") if p.strip()]
    if args.all_returned:
        tagged = returned_parts(table)
        if not tagged:
            raise UsageError(f"--all-returned: no part of {args.campaign} is tagged returned (give the manifest a "
                             "`returned` column, or a tag whose value is `returned`)")
        named += [p for p in tagged if p not in named]
    if not named:
        raise UsageError("give --part LOT/PART (one or more) or --all-returned")
    return list(dict.fromkeys(named))


def run(args) -> int:
    from labtool._api.results import triage_parts
    from labtool.store import Campaign

    if args.model_samples is not None and args.model_samples < 1:
        raise UsageError(f"--model-samples {args.model_samples}: must be at least 1")
    with Campaign.open(args.campaign) as camp:
        table = camp.measurements()
        if table.empty:
            raise UsageError(f"{args.campaign}: no measurements yet; run `labtool measure {args.campaign}` first")
        parts = _parts(args, table)
    reports, failed = triage_parts(args.campaign, parts, model=args.model, model_samples=args.model_samples,
                                   seed=args.seed, scheduler=args.scheduler or "local")  # every core by default
    for i, report in enumerate(reports.values()):
        if args.json:
            print(json.dumps(report.to_json_dict(), allow_nan=False))
        else:
            print(("\n" if i else "") + render(report))
    for line in failed:
        print(f"labtool triage: {line}", file=sys.stderr)
    return 1 if failed else 0


def render(report) -> str:
    """The readable report of one part."""
    verdicts = ", ".join(f"{k} {v}" for k, v in sorted(report.verdicts.items()))
    lines = [f"part {report.part}: {report.n_captures} captures ({verdicts}); "
             f"lot baseline {report.n_baseline} captures",
             f"conclusion: {report.conclusion.text}"]
    shown = [h for h in report.hypotheses if h.testable]
    lines.append(text_table([{"rank": i + 1, "posterior": f"{h.posterior:.3f}",
                              "ln_lr_next": None if h.log_lr_to_next is None else f"{h.log_lr_to_next:.2f}",
                              "hypothesis": h.name, "where": h.where or "-"} for i, h in enumerate(shown)],
                             ("rank", "posterior", "ln_lr_next", "hypothesis", "where")))
    deciding = report.deciding_evidence
    for key, what in (("against_healthy", f"{deciding['for']} over the healthy pattern"),
                      ("captures", f"{deciding['for']} over {deciding['against']}")):
        if deciding.get(key):
            lines.append(f"\ndeciding captures ({what}, nats):")
            lines += [f"  {c['nats']:+.2f}  {c['verdict']:<14} {c.get('file') or c['capture_id']}"
                      for c in deciding[key]]
    lines.append(f"\nnext experiment: {report.next_experiment.text}")
    top = report.top
    if top.bench_check:
        lines.append(f"bench check for {top.name}: {top.bench_check}")
    lines += [f"note: {n}" for n in report.notes]
    return "\n".join(lines)
