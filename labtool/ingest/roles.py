"""Which column is the supply, the reference output, the enable and the supply current.

Explicit picks (``--supply NAME`` …) win. Then a column is recognised by its name, case-insensitive,
ignoring its unit and channel prefixes such as ``CH1``: ``vdd``, ``CH1 VDD``, ``V(vdd)``, ``vref_out``.
Then columns with generic names (``CH1``, ``Channel A``, ``Ampl``, ``2``), or a file's only channel,
get the roles still open from their waveforms: a current (in A) is the supply current; of the voltage
channels the supply is the one that ramps first to the higher settled level (needs a second channel,
or an output named already), or, when only an enable edge moves at that level, the flat channel at it
(a supply already steady when the enable rises); once there is a supply, a two-level channel with a
fast rising edge is the enable (an active-low one is picked with ``--enable``); the output is the
channel that follows (the first that moves, else the first: a stuck output is flat). A lone generic channel is the output: scopes that trigger on the supply often keep only it.

A role two columns could fill by name, no supply and no output at all, or an unnamed voltage column
left over with no output found, is an InputError that lists the columns found.
"""

from __future__ import annotations

import re
import math
from typing import Callable, Sequence

from labtool.errors import InputError
from labtool.ingest.shape import ChannelShape

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
# Words of a generic column name, which says which input and not which signal (common practice, no source).
GENERIC_WORDS = frozenset({"ch", "chan", "channel", "c", "ampl", "amplitude", "value", "values", "voltage", "volt",
                           "volts", "signal", "trace", "wave", "waveform", "data", "math", "column", "col", "y",
                           "source", "input", "probe", "analog", "ai", "in", "min", "max", "a", "b", "c", "d",
                           "e", "f", "g", "h", "v"})
SAME_LEVEL = 0.10  # settled levels within 10 % of the highest count as "the higher level" (labtool's choice)
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


def is_generic(name: str) -> bool:
    """A name that says which input, not which signal: ``CH1``, ``Channel A``, ``Ampl``, ``2``, ``column3``."""
    words = [re.sub(r"\d+$", "", w) for w in _words(name)]
    return all(w in GENERIC_WORDS or w == "" for w in words)


def _find(names: Sequence[str], wanted: str) -> int | None:
    for test in (lambda n: n == wanted, lambda n: n.lower() == wanted.lower()):
        hits = [k for k, n in enumerate(names) if test(n)]
        if hits:
            return hits[0]
    return None


def assign_roles(names: Sequence[str], picks: dict[str, str], *, path: str, place: dict | None = None,
                 all_columns: Sequence[str] | None = None, shape_of: Callable[[int], ChannelShape] | None = None,
                 units: Sequence[str | None] | None = None, eligible: Sequence[bool] | None = None
                 ) -> list[tuple[str, str]]:
    """One (role, role_source) per column: by flag (``picks`` maps role → column name), by name, then by
    waveform (``shape_of(k)``, computed only for the generic columns); role_source is ``flag``, ``name``, ``shape`` or "" (no role).

    ``units`` are SI base units (``A`` columns can only be currents); ``eligible`` False keeps a column
    out of name and shape rules (the lower envelope of a min/max pair). ``all_columns`` (the time
    column too) is what error messages list; default ``names``.
    """
    place = place or {}
    n = len(names)
    units = list(units) if units is not None else [None] * n
    eligible = list(eligible) if eligible is not None else [True] * n
    shown = list(all_columns if all_columns is not None else names)
    listing = ", ".join(shown) if shown else "none"
    roles = ["other"] * n
    sources = [""] * n
    for role, wanted in picks.items():
        k = _find(names, wanted)
        if k is None:
            raise InputError(path, f"{FLAGS[role]} {wanted!r}: no such column (columns: {listing})", **place)
        if roles[k] != "other":
            raise InputError(path, f"column {names[k]!r} is picked both as {roles[k]} and as {role}", **place)
        roles[k], sources[k] = role, "flag"
    for role in ROLE_WORDS:
        if role in picks:
            continue
        hits = [k for k, name in enumerate(names) if roles[k] == "other" and eligible[k] and role_by_name(name) == role]
        if len(hits) > 1:
            raise InputError(path, f"several columns look like the {LABELS[role]} "
                                   f"({', '.join(names[k] for k in hits)}); pick one with {FLAGS[role]} NAME "
                                   f"(columns: {listing})", **place)
        if hits:
            roles[hits[0]], sources[hits[0]] = role, "name"
    if shape_of is not None:
        generic = [k for k in range(n) if roles[k] == "other" and eligible[k] and (is_generic(names[k]) or n == 1)]
        for k, role in _by_shape(generic, shape_of, units, set(roles)).items():
            roles[k], sources[k] = role, "shape"
    filled = set(roles)
    if "supply" not in filled and "output" not in filled:
        raise InputError(path, f"no {LABELS['supply']} column recognised (columns: {listing}); "
                               f"name it with {FLAGS['supply']} NAME", **place)
    unnamed = [k for k in range(n) if roles[k] == "other" and eligible[k] and units[k] in (None, "V")]
    if "output" not in filled and unnamed:  # a column that may well be the output, under a name we do not know
        raise InputError(path, f"no {LABELS['output']} column recognised (columns: {listing}); "
                               f"name it with {FLAGS['output']} NAME", **place)
    return list(zip(roles, sources))


def _by_shape(candidates: list[int], shape_of: Callable[[int], ChannelShape], units: Sequence[str | None],
              filled: set[str]) -> dict[int, str]:
    """Roles for generic columns from their waveforms (the rules are in the module docstring)."""
    found: dict[int, str] = {}
    currents = [k for k in candidates if units[k] == "A"]
    if currents and "supply_current" not in filled:
        found[currents[0]] = "supply_current"
    volts = [k for k in candidates if units[k] in (None, "V")]
    if not volts:
        return found
    need_output = "output" not in filled
    shapes = {k: shape_of(k) for k in volts}

    def onset(k: int) -> tuple[float, int]:
        return (shapes[k].t_half_s if shapes[k].t_half_s is not None else math.inf, volts.index(k))

    has_supply = "supply" in filled
    if not has_supply and (not need_output or len(volts) >= 2):
        moving = [k for k in volts if shapes[k].moves] or volts
        top = max(shapes[k].final_v for k in moving)
        near = [k for k in moving if shapes[k].final_v >= top - SAME_LEVEL * abs(top)]
        ramps = [k for k in near if not shapes[k].two_level_edge]
        steady = [k for k in volts if not shapes[k].moves and shapes[k].final_v >= top - SAME_LEVEL * abs(top)]
        if len(volts) >= 3 and ramps:  # with an enable among them, the supply is the one that ramps
            near = ramps
        elif steady and not ramps and len(volts) >= 3:  # only edges move: the supply is the flat one at the top
            near = steady
        supply = min(near, key=onset)
        found[supply] = "supply"
        volts.remove(supply)
        has_supply = True
    if "enable" not in filled and has_supply and len(volts) >= (2 if need_output else 1):
        # rising only: an output that collapses (a failed recovery) is two-level with a fast edge too
        edges = [k for k in volts if shapes[k].two_level_edge and shapes[k].final_v > shapes[k].initial_v]
        if edges:
            enable = min(edges, key=onset)
            found[enable] = "enable"
            volts.remove(enable)
    if need_output and volts:
        moving = [k for k in volts if shapes[k].moves]
        found[(moving or volts)[0]] = "output"
    return found
