"""SI units and prefixes (BIPM SI Brochure, 9th ed., 2019, §3 table 7) and quantity parsing."""

from __future__ import annotations

import math
import re

from labtool.errors import UsageError

# SI prefixes, BIPM SI Brochure 9th ed. table 7 (the ones bench files use, plus "u" for micro).
SI_PREFIXES: dict[str, float] = {
    "Y": 1e24, "Z": 1e21, "E": 1e18, "P": 1e15, "T": 1e12, "G": 1e9, "M": 1e6, "k": 1e3,
    "": 1.0,
    "m": 1e-3, "µ": 1e-6, "μ": 1e-6, "u": 1e-6, "n": 1e-9, "p": 1e-12, "f": 1e-15, "a": 1e-18,
}

_PREFIX_BY_EXPONENT = {24: "Y", 21: "Z", 18: "E", 15: "P", 12: "T", 9: "G", 6: "M", 3: "k", 0: "",
                       -3: "m", -6: "µ", -9: "n", -12: "p", -15: "f", -18: "a"}

# Base units labtool stores; everything is converted to these on import.
BASE_UNITS = ("s", "V", "A", "Hz", "Ohm", "F", "C", "%")

_UNIT_ALIASES = {"sec": "s", "secs": "s", "second": "s", "seconds": "s", "volt": "V", "volts": "V",
                 "amp": "A", "amps": "A", "ampere": "A", "ohm": "Ohm", "Ω": "Ohm", "°C": "C",
                 "degc": "C", "degC": "C", "hz": "Hz"}


def parse_unit(text: str) -> tuple[str, float]:
    """Split a unit such as ``mV`` or ``µs`` into (base unit, factor to SI).

    Raises UsageError for a unit labtool does not know.
    """
    u = text.strip()
    if u in _UNIT_ALIASES:
        return _UNIT_ALIASES[u], 1.0
    if u in BASE_UNITS:
        return u, 1.0
    for base in sorted((*BASE_UNITS, *_UNIT_ALIASES), key=len, reverse=True):
        prefix = u[: -len(base)]
        if u.endswith(base) and prefix and prefix in SI_PREFIXES:
            return _UNIT_ALIASES.get(base, base), SI_PREFIXES[prefix]
    raise UsageError(f"unknown unit {text!r}")


_QUANTITY = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([^\d\s].*)?\s*$")


def parse_quantity(text: str | float, unit: str, *, what: str = "value") -> float:
    """Parse ``500e-6``, ``500us`` or ``0.5 ms`` into a float in the SI unit ``unit``.

    A bare number is taken as already in ``unit``. A suffix must be an SI prefix followed by
    ``unit`` (or the prefix alone, e.g. ``500u`` for seconds).
    """
    if isinstance(text, (int, float)):
        return float(text)
    m = _QUANTITY.match(str(text))
    if not m:
        raise UsageError(f"{what}: cannot read {text!r} as a number in {unit}")
    number = float(m.group(1))
    suffix = (m.group(2) or "").strip()
    if not suffix:
        return number
    if suffix in SI_PREFIXES:
        return number * SI_PREFIXES[suffix]
    try:
        base, factor = parse_unit(suffix)
    except UsageError:
        raise UsageError(f"{what}: unknown unit in {text!r} (expected {unit})") from None
    if base != unit:
        raise UsageError(f"{what}: {text!r} is in {base}, expected {unit}")
    return number * factor


def parse_level(text: str | float, *, what: str = "level") -> tuple[str, float]:
    """Parse a reference level: ``90%`` → ("fraction", 0.9); ``1.62`` or ``1.62V`` → ("volts", 1.62)."""
    s = str(text).strip()
    if s.endswith("%"):
        try:
            pct = float(s[:-1])
        except ValueError:
            raise UsageError(f"{what}: cannot read {text!r} as a percentage") from None
        if not 0.0 < pct <= 100.0:
            raise UsageError(f"{what}: {text!r} must be between 0 and 100 %")
        return "fraction", pct / 100.0
    return "volts", parse_quantity(s, "V", what=what)


def format_si(value: float | None, unit: str, digits: int = 3) -> str:
    """Format ``value`` with an engineering SI prefix: 2.5e-5 s → '25.0 µs'."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "—"
    if value == 0:
        return f"0 {unit}"
    exp3 = int(math.floor(math.log10(abs(value)) / 3)) * 3
    exp3 = max(-18, min(24, exp3))
    prefix = _PREFIX_BY_EXPONENT[exp3]
    scaled = value / 10.0 ** exp3
    return f"{scaled:.{digits}g} {prefix}{unit}"
