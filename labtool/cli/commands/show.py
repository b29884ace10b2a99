"""``labtool show CAMPAIGN``: what a campaign holds, counted by lot and by condition."""

from __future__ import annotations

import json

from labtool.ingest.catalog import overview
from labtool.store import Campaign
from labtool.units import format_si


def register(sub) -> None:
    p = sub.add_parser("show", help="what a campaign holds: captures counted by lot and by temperature and ramp")
    p.add_argument("campaign")
    p.add_argument("--json", action="store_true", help="one JSON object instead of tables")
    p.set_defaults(handler=run)


def _text(v) -> str:
    return "—" if v is None else str(v)


def _table(headers: list[str], rows: list[list[str]]) -> list[str]:
    widths = [max(len(h), *(len(r[k]) for r in rows)) if rows else len(h) for k, h in enumerate(headers)]
    line = lambda cells: "  ".join(c.rjust(w) if k else c.ljust(w) for k, (c, w) in enumerate(zip(cells, widths)))
    return [line(headers), line(["-" * w for w in widths]), *(line(r) for r in rows)]


def run(args) -> int:
    with Campaign.open(args.campaign) as campaign:
        info = overview(campaign)
    if args.json:
        print(json.dumps(info))
        return 0
    print(f"{info['campaign']}: {info['captures']} captures ({info['versions']} versions stored), "
          f"{info['parts']} parts, {info['measurements']} measurement rows")
    if not info["captures"]:
        return 0
    print("\nby lot")
    for line in _table(["lot", "captures", "parts", "wafers", "with clipped samples"],
                       [[_text(r["lot"]), str(r["captures"]), str(r["parts"]), str(r["wafers"]),
                         str(r["clipped_captures"])] for r in info["by_lot"]]):
        print("  " + line)
    print("\nby condition")
    rows = [[_text(None if r["temperature_c"] is None else f"{r['temperature_c']:g} °C"),
             format_si(r["ramp_s"], "s"), str(r["captures"]), str(r["lots"])] for r in info["by_condition"]]
    for line in _table(["temperature", "ramp", "captures", "lots"], rows):
        print("  " + line)
    return 0
