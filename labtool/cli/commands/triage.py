"""``labtool triage CAMPAIGN --part LOT/PART [--json]``: ranked causes for a returned part."""

from __future__ import annotations

import json

from labtool.stats.sources import load_measurements, text_table
from labtool.stats.triage import triage


def register(sub) -> None:
    p = sub.add_parser("triage", help="rank likely causes for a failing part against its lot, with next experiments")
    p.add_argument("campaign")
    p.add_argument("--part", required=True, metavar="LOT/PART", help="the part, e.g. ZR24A/p07")
    p.add_argument("--model", metavar="DESIGN", default=None,
                   help="design file: adds the model's startup margin to the evidence")
    p.add_argument("--json", action="store_true", help="the report as one JSON object")
    p.set_defaults(handler=run)


def run(args) -> int:
    design = None
    if args.model:
        from labtool.model import load_design

        design = load_design(args.model)
    report = triage(load_measurements(args.campaign), args.part, design=design)
    if args.json:
        print(json.dumps(report.to_json_dict(), allow_nan=False))
        return 0
    verdicts = ", ".join(f"{k} {v}" for k, v in sorted(report.verdicts.items()))
    print(f"part {report.part}: {report.n_captures} captures ({verdicts}); lot baseline {report.n_baseline} captures")
    print(text_table([{"rank": i + 1, "score": h.score, "hypothesis": h.name, "what": h.title}
                      for i, h in enumerate(report.hypotheses)], ("rank", "score", "hypothesis", "what")))
    for h in report.hypotheses[:3]:
        if h.score > 0:
            print(f"\n{h.name}: {h.title}")
            print("  evidence: " + json.dumps(h.to_json_dict()["evidence"]))
            print(f"  next: {h.next_experiment}")
    return 0
