"""``--supply/--output/--enable/--supply-current``: the column picks every command that reads files takes."""

from __future__ import annotations

_PICKS = (("supply", "the supply voltage"), ("output", "the reference output"), ("enable", "the enable signal"),
          ("supply_current", "the supply current"))


def add_column_options(parser, *, note: str = "") -> None:
    for role, what in _PICKS:
        parser.add_argument(f"--{role.replace('_', '-')}", metavar="N", help=f"column holding {what}{note}")


def column_picks(args) -> dict[str, str | None]:
    """IngestOptions keywords from the parsed flags."""
    return {role: getattr(args, role) for role, _ in _PICKS}
