"""Which column is the supply, the reference output, the enable and the supply current.

Explicit picks (``--supply NAME`` …) win. Otherwise a column is recognised by its name, case-insensitive,
ignoring its unit and channel prefixes such as ``CH1``: ``vdd``, ``CH1 VDD``, ``V(vdd)``, ``vref_out``.
A role two columns could fill, or a required role no column fills, is an InputError that lists the
columns found.
"""

from __future__ import annotations

import re
from typing import Sequence

from labtool.errors import InputError

# Words that name a role (common practice, no source). Checked on the whole cleaned name first,
# then on its single words.
ROLE_WORDS: dict[str, frozenset[str]] = {
    "supply": frozenset({"vdd", "vcc", "avdd", "dvdd", "vdda", "pvdd", "vin", "supply", "vsupply", "vsup",
                         "vbat", "vsupp"}),
    "output": frozenset({"vref", "vbg", "ref", "out", "vout", "bandgap", "vrefout", "refout", "vbgout"}),
    "enable": frozenset({"en", "enable", "ena", "enb", "pwren", "vena"}),
    "supply_current": frozenset({"idd", "icc", "isupply", "iin", "isup", "ivdd", "ivcc", "iavdd",
                                 "supplycurrent", "currentsupply", "iddq"}),
}
REQUIRED_ROLES = ("supply", "output")
FLAGS = {"supply": "--supply", "output": "--output", "enable": "--enable", "supply_current": "--supply-current"}
LABELS = {"supply": "supply", "output": "reference output", "enable": "enable",
          "supply_current": "supply current"}

_SPICE = re.compile(r"^\s*([vi])\((.+)\)\s*$", re.IGNORECASE)
_CHANNEL = re.compile(r"^(ch|c|chan|channel|ai|in)?\d+$")


def _words(name: str) -> list[str]:
    m = _SPICE.match(name)
    if m:  # V(vdd) is the node vdd; I(vdd) the current into it
        kind, node = m.group(1).lower(), m.group(2)
        inner = [w for w in _words(node)]
        return ["".join(inner) if kind == "v" else "i" + "".join(inner)]
    words = [w for w in re.split(r"[^0-9a-z]+", name.lower()) if w]
    return [w for w in words if not _CHANNEL.match(w)]


def role_by_name(name: str) -> str | None:
    """The role a column name suggests, or None."""
    words = _words(name)
    if not words:
        return None
    joined = "".join(words)
    for role, vocab in ROLE_WORDS.items():
        if joined in vocab:
            return role
    found = {role for w in words for role, vocab in ROLE_WORDS.items() if w in vocab}
    return found.pop() if len(found) == 1 else None


def _find(names: Sequence[str], wanted: str) -> int | None:
    for test in (lambda n: n == wanted, lambda n: n.lower() == wanted.lower()):
        hits = [k for k, n in enumerate(names) if test(n)]
        if hits:
            return hits[0]
    return None


def assign_roles(names: Sequence[str], picks: dict[str, str], *, path: str, place: dict | None = None,
                 all_columns: Sequence[str] | None = None) -> list[str]:
    """One role per column name; ``picks`` maps role → column name given by the user.

    ``all_columns`` (the time column too) is what error messages list; default ``names``.
    """
    place = place or {}
    shown = list(all_columns if all_columns is not None else names)
    listing = ", ".join(shown) if shown else "none"
    roles = ["other"] * len(names)
    for role, wanted in picks.items():
        k = _find(names, wanted)
        if k is None:
            raise InputError(path, f"{FLAGS[role]} {wanted!r}: no such column (columns: {listing})", **place)
        if roles[k] != "other":
            raise InputError(path, f"column {names[k]!r} is picked both as {roles[k]} and as {role}", **place)
        roles[k] = role
    for role in ROLE_WORDS:
        if role in picks:
            continue
        hits = [k for k, n in enumerate(names) if roles[k] == "other" and role_by_name(n) == role]
        if len(hits) > 1:
            raise InputError(path, f"several columns look like the {LABELS[role]} "
                                   f"({', '.join(names[k] for k in hits)}); pick one with {FLAGS[role]} NAME "
                                   f"(columns: {listing})", **place)
        if hits:
            roles[hits[0]] = role
        elif role in REQUIRED_ROLES:
            raise InputError(path, f"no {LABELS[role]} column recognised (columns: {listing}); "
                                   f"name it with {FLAGS[role]} NAME", **place)
    return roles
