"""``--supply/--output/--enable/--supply-current`` and ``--supply-valid-at``: the column options every
command that reads files takes."""

from __future__ import annotations

from labtool.errors import UsageError
from labtool.units import parse_quantity

_PICKS = (("supply", "the supply voltage"), ("output", "the reference output"), ("enable", "the enable signal"),
          ("supply_current", "the supply current"))


def add_column_options(parser, *, note: str = "") -> None:
    for role, what in _PICKS:
        parser.add_argument(f"--{role.replace('_', '-')}", metavar="N", help=f"column holding {what}{note}")
    parser.add_argument("--supply-valid-at", metavar="SECONDS",
                        help="for captures without a supply channel: when the supply became valid, on the "
                             "capture's time axis (default: the enable edge, else the trigger instant t = 0)")


def column_picks(args) -> dict:
    """IngestOptions keywords from the parsed flags."""
    picks: dict = {role: getattr(args, role) for role, _ in _PICKS}
    picks["supply_valid_at_s"] = None
    if args.supply_valid_at is not None:
        try:
            picks["supply_valid_at_s"] = parse_quantity(args.supply_valid_at, "s", what="--supply-valid-at")
        except UsageError as exc:
            raise UsageError(str(exc)) from None
    return picks
