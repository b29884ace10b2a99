"""``labtool report CAMPAIGN --out DIR [--by KEYS] [--model DESIGN] [--part LOT/PART ...] [--scheduler SPEC]``."""

from __future__ import annotations

import sys

from labtool.execute import add_scheduler_option, parse_scheduler
from labtool.report.build import ReportFiles, write_report


def register(sub) -> None:
    p = sub.add_parser("report", help="write the HTML report, the workbook and the PNG plots of a campaign")
    p.add_argument("campaign")
    p.add_argument("--out", required=True, metavar="DIR", help="folder for report.html, report.xlsx and plots/")
    p.add_argument("--by", metavar="KEYS", default="lot",
                   help="comma-separated columns to group by (default: lot), e.g. lot,temperature_c")
    p.add_argument("--model", metavar="DESIGN", default=None,
                   help="design file: the model's Monte Carlo at the measured set-ups is drawn and compared")
    p.add_argument("--part", action="append", default=[], metavar="LOT/PART",
                   help="a returned part to triage in the report, besides those tagged returned; repeat the flag "
                        "or separate parts with commas")
    add_scheduler_option(p)
    p.set_defaults(handler=run)


def print_files(files: ReportFiles) -> int:
    """Where the report is; failures on stderr; exit status 1 when anything was not drawn."""
    print(f"report:   {files.html}")
    print(f"workbook: {files.workbook}")
    print(f"plots:    {len(files.plots)} PNG files in {files.html.parent / 'plots'}")
    for what, why in files.failed:
        print(f"labtool report: {what}: {why}", file=sys.stderr)
    return 1 if files.failed else 0


def run(args) -> int:
    parts = [p.strip() for text in args.part for p in text.split(",") if p.strip()]
    files = write_report(args.campaign, args.out, by=args.by, design=args.model, parts=parts,
                         scheduler=parse_scheduler(args.scheduler))
    return print_files(files)
