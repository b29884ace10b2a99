"""``labtool verify CAMPAIGN``: check the catalog against the waveform files."""

from __future__ import annotations

from labtool.store import Campaign


def register(sub) -> None:
    p = sub.add_parser("verify", help="check a campaign store: catalog, waveform hashes, orphan files")
    p.add_argument("campaign")
    p.set_defaults(handler=run)


def run(args) -> int:
    with Campaign.open(args.campaign) as camp:
        problems = camp.verify()
    for line in problems:
        print(line)
    if problems:
        print(f"{len(problems)} problem(s) in {args.campaign}")
        return 1
    print(f"{args.campaign}: ok")
    return 0
