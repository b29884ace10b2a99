"""SI units and prefixes (BIPM SI Brochure, 9th ed., 2019, §3 table 7) and quantity parsing."""

from __future__ import annotations

import math
import re
from decimal import Decimal

from labtool.errors import UsageError

# The SI prefixes: BIPM SI Brochure, 9th ed. (2019), §3, table 7 — (name, symbol, factor).
SI_PREFIX_TABLE: tuple[tuple[str, str, float], ...] = (
    ("yotta", "Y", 1e24), ("zetta", "Z", 1e21), ("exa", "E", 1e18), ("peta", "P", 1e15),
    ("tera", "T", 1e12), ("giga", "G", 1e9), ("mega", "M", 1e6), ("kilo", "k", 1e3),
    ("hecto", "h", 1e2), ("deca", "da", 1e1), ("deci", "d", 1e-1), ("centi", "c", 1e-2),
    ("milli", "m", 1e-3), ("micro", "μ", 1e-6), ("nano", "n", 1e-9), ("pico", "p", 1e-12),
    ("femto", "f", 1e-15), ("atto", "a", 1e-18), ("zepto", "z", 1e-21), ("yocto", "y", 1e-24),
)
# Prefix symbol → factor inside a unit ("mV", "daHz"). Bench files also write the micro sign
# U+00B5 and a plain "u" for micro.
SI_PREFIXES: dict[str, float] = {"": 1.0, **{sym: f for _, sym, f in SI_PREFIX_TABLE}, "µ": 1e-6, "u": 1e-6}
# A bare prefix after a number ("500u" seconds) is read only for the powers of 1000, so "25c" is
# never taken as 0.25.
ENGINEERING_PREFIXES: dict[str, float] = {s: f for s, f in SI_PREFIXES.items()
                                          if s and round(math.log10(f)) % 3 == 0}

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
    if len(u) > 2 and u.lower() in _UNIT_ALIASES:  # "Volts", "SEC"; short symbols stay case-sensitive
        return _UNIT_ALIASES[u.lower()], 1.0
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
    if suffix in ENGINEERING_PREFIXES:
        return _scaled(m.group(1), ENGINEERING_PREFIXES[suffix])
    try:
        base, factor = parse_unit(suffix)
    except UsageError:
        raise UsageError(f"{what}: unknown unit in {text!r} (expected {unit})") from None
    if base != unit:
        raise UsageError(f"{what}: {text!r} is in {base}, expected {unit}")
    return _scaled(m.group(1), factor)


def _scaled(number_text: str, factor: float) -> float:
    """``number_text`` × ``factor`` rounded once, so "10us" is exactly the float 1e-05."""
    return float(Decimal(number_text) * Decimal(repr(factor)))


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
    """Format ``value`` with an engineering SI prefix to ``digits`` significant digits: 2.5e-5 s → '25 µs'.

    The value is rounded before the prefix is chosen, so a value that rounds up to the next power of
    1000 takes the next prefix: 999.6e-6 s → '1 ms' at three digits, '999.6 µs' at four.
    """
    if value is None or not math.isfinite(value):
        return "—"
    if value == 0:
        return f"0 {unit}"
    rounded = float(f"{value:.{digits}g}")
    exp3 = max(-18, min(24, int(math.floor(math.log10(abs(rounded)) / 3)) * 3))
    text = f"{rounded / 10.0 ** exp3:.{digits}g}"
    if abs(float(text)) >= 1000 and exp3 < 24:  # log10 a hair below a power of ten
        exp3 += 3
        text = f"{rounded / 10.0 ** exp3:.{digits}g}"
    return f"{text} {_PREFIX_BY_EXPONENT[exp3]}{unit}"
