"""Parsing of SCPI / IEEE 488.2 replies: numbers, error-queue entries, *IDN?, *ESR?.

Pure functions over reply strings; nothing here touches a socket.

References: IEEE 488.2-1992 §8.7 (response data: NR1/NR2/NR3 numbers, string response data with
doubled quotes), §10.14 (*IDN? four fields), §11.5.1 (Standard Event Status Register bits);
SCPI-1999 Vol. 1 §7.2.1 (not-a-number 9.91E37, ±infinity ±9.9E37) and Vol. 2 SYSTem:ERRor?
(``<code>,"<text>[;<device information>]"``, 0 "No error", -350 "Queue overflow").
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from labtool.errors import InstrumentError, ScpiError

SCPI_NAN = 9.91e37
SCPI_INF = 9.9e37

_NUMBER = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")
_WORD_VALUES = {"NAN": math.nan, "INF": math.inf, "INFINITY": math.inf, "NINF": -math.inf,
                "-INF": -math.inf, "+INF": math.inf, "ON": 1.0, "OFF": 0.0}


def parse_number(text: str, *, what: str = "reply") -> float:
    """One numeric reply; SCPI's 9.91E37 is NaN and ±9.9E37 is ±infinity (SCPI-1999 Vol. 1 §7.2.1)."""
    s = text.strip()
    if s.upper() in _WORD_VALUES:
        return _WORD_VALUES[s.upper()]
    if not _NUMBER.match(s):
        raise InstrumentError(f"{what}: expected a number, got {text.strip()[:60]!r}")
    value = float(s)
    if value == SCPI_NAN:
        return math.nan
    if abs(value) == SCPI_INF:
        return math.copysign(math.inf, value)
    return value


def parse_numbers(text: str, *, what: str = "reply") -> list[float]:
    """A comma-separated list of numbers (IEEE 488.2 §8.4.1 response data separator)."""
    s = text.strip()
    if not s:
        return []
    return [parse_number(part, what=f"{what} item {i + 1}") for i, part in enumerate(s.split(","))]


def split_unquoted(text: str, separators: str) -> list[str]:
    """``text`` split at any of ``separators`` outside quoted strings (IEEE 488.2 §7.7.5 / §8.7.8
    string data may hold separators); pieces stripped."""
    items, current, quote = [], [], None
    for ch in text:
        if quote:
            quote = None if ch == quote else quote
        elif ch in "\"'":
            quote = ch
        elif ch in separators:
            items.append("".join(current).strip())
            current = []
            continue
        current.append(ch)
    items.append("".join(current).strip())
    return items


def split_reply(text: str) -> list[str]:
    """Data elements of a reply: split at ``,`` (data separator) and at ``;``, which joins the answers
    to the queries of one compound message (IEEE 488.2 §8.4.1, from memory)."""
    return [] if not text.strip() else split_unquoted(text.strip(), ",;")


def parse_item(text: str) -> float | str:
    """One data element: a number when it reads as one (SCPI special values included), else its text."""
    try:
        return parse_number(text)
    except InstrumentError:
        return unquote(text)


def parse_bool(text: str, *, what: str = "reply") -> bool:
    """A boolean reply, 1/0 (ON/OFF accepted)."""
    value = parse_number(text, what=what)
    if value not in (0.0, 1.0):
        raise InstrumentError(f"{what}: expected 0 or 1, got {text.strip()[:60]!r}")
    return value == 1.0


def parse_int(text: str, *, what: str = "reply") -> int:
    value = parse_number(text, what=what)
    if not math.isfinite(value) or not float(value).is_integer():
        raise InstrumentError(f"{what}: expected a whole number, got {text.strip()[:60]!r}")
    return int(value)


def unquote(text: str) -> str:
    """String response data: "..." with inner quotes doubled (IEEE 488.2 §8.7.8)."""
    s = text.strip()
    if len(s) >= 2 and s[0] == s[-1] and s[0] in "\"'":
        q = s[0]
        return s[1:-1].replace(q + q, q)
    return s


@dataclass(frozen=True)
class ErrorEntry:
    """One SYSTem:ERRor? entry: code (0 none, negative standard, positive device-specific) and text."""

    code: int
    text: str

    @property
    def is_error(self) -> bool:
        return self.code != 0


_ERROR_REPLY = re.compile(r'^\s*([+-]?\d+)\s*,\s*(".*"|\'.*\'|.*?)\s*$', re.S)


def parse_error(text: str) -> ErrorEntry:
    """``0,"No error"``, ``+0,"No error"``, ``-113,"Undefined header;FOO:BAR"``."""
    m = _ERROR_REPLY.match(text)
    if not m:
        raise InstrumentError(f"SYSTem:ERRor? reply not of the form <code>,\"<text>\": {text.strip()[:80]!r}")
    return ErrorEntry(int(m.group(1)), unquote(m.group(2)))


def describe_errors(entries: list[ErrorEntry]) -> str:
    return "; ".join(f'{e.code},"{e.text}"' for e in entries)


QUEUE_OVERFLOW = -350  # SCPI-1999: the queue was full, entries were lost


def errors_to_exception(entries: list[ErrorEntry], command: str | None,
                        instrument: str | None = None) -> ScpiError | None:
    """The first entry as a ScpiError naming ``instrument`` and ``command``, every entry in its message."""
    real = [e for e in entries if e.is_error]
    if not real:
        return None
    first = real[0]
    text = first.text
    if len(real) > 1:
        text += "; then " + describe_errors(real[1:])
    if any(e.code == QUEUE_OVERFLOW for e in real):
        text += " (error queue overflowed: earlier entries were lost)"
    err = ScpiError(first.code, text, command, instrument)
    err.entries = real
    return err


@dataclass(frozen=True)
class Identity:
    """*IDN? reply: manufacturer, model, serial number, firmware (IEEE 488.2 §10.14)."""

    manufacturer: str
    model: str
    serial: str
    firmware: str

    def __str__(self) -> str:
        return ",".join((self.manufacturer, self.model, self.serial, self.firmware))


def parse_idn(text: str) -> Identity:
    fields = [f.strip() for f in text.strip().split(",")]
    if len(fields) != 4:
        raise InstrumentError(f"*IDN? reply has {len(fields)} field(s), IEEE 488.2 §10.14 requires 4: "
                              f"{text.strip()[:80]!r}")
    return Identity(*fields)


# Standard Event Status Register bits, IEEE 488.2 §11.5.1.
ESR_BITS = {0: "operation_complete", 1: "request_control", 2: "query_error", 3: "device_error",
            4: "execution_error", 5: "command_error", 6: "user_request", 7: "power_on"}
ESR_ERROR_MASK = (1 << 2) | (1 << 3) | (1 << 4) | (1 << 5)


def decode_esr(value: int) -> frozenset[str]:
    """Names of the bits set in an *ESR? value (0–255)."""
    if not 0 <= value <= 255:
        raise InstrumentError(f"*ESR? value {value} outside 0-255")
    return frozenset(name for bit, name in ESR_BITS.items() if value >> bit & 1)
