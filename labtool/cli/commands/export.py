"""``labtool export CAMPAIGN --to FILE.parquet|.csv``: the catalog with conditions (and measurements)."""

from __future__ import annotations

from labtool.ingest.catalog import export_table, write_table
from labtool.store import Campaign


def register(sub) -> None:
    p = sub.add_parser("export", help="write the campaign's catalog and conditions (plus measurements when "
                                      "present) to a Parquet or CSV file")
    p.add_argument("campaign")
    p.add_argument("--to", required=True, metavar="FILE", help="output file ending in .parquet or .csv")
    p.set_defaults(handler=run)


def run(args) -> int:
    with Campaign.open(args.campaign) as campaign:
        table = export_table(campaign)
    write_table(table, args.to)
    print(f"{args.to}: {len(table)} rows, {len(table.columns)} columns")
    return 0
