"""Command templates: Python format strings whose fields are expressions with a format spec.

``":TRIG:LEV {level_v:.4f}"``, ``"CH{channel}:VDIV {span_v / 10:.4g}"``, ``"TRIG:POS {pretrigger_s /
record_s * 100:.1f}"``. ``{{`` and ``}}`` are literal braces. A field without a spec sends a whole
number as it is and any other number with up to 9 significant digits. Templates are parsed and
their specs tried when the profile loads, so a bad one fails there, not in the middle of a run.
"""

from __future__ import annotations

import math
import string
from dataclasses import dataclass
from typing import Any, Mapping

from instruments.expression import Expression, parse_expression
from labtool.errors import ProfileError

# Names the drivers fill with whole numbers; every other value is a float.
WHOLE_NUMBER_NAMES = frozenset({"channel", "points", "slot", "trigger_channel"})


@dataclass(frozen=True)
class Field:
    expression: Expression
    spec: str


@dataclass(frozen=True)
class Template:
    text: str
    pieces: tuple[str | Field, ...]

    @property
    def names(self) -> frozenset[str]:
        return frozenset(self.field_names)

    @property
    def field_names(self) -> tuple[str, ...]:
        """Each name once, in the order of the fields (names within one field sorted)."""
        ordered = (n for p in self.pieces if isinstance(p, Field) for n in sorted(p.expression.names))
        return tuple(dict.fromkeys(ordered))

    def render(self, values: Mapping[str, Any]) -> str:
        out = []
        for piece in self.pieces:
            if isinstance(piece, str):
                out.append(piece)
                continue
            value = piece.expression.evaluate(values)
            out.append(format_value(value, piece.spec, f"{{{piece.expression.text}}}"))
        return "".join(out)


def format_value(value: Any, spec: str, what: str) -> str:
    if isinstance(value, float) and not math.isfinite(value):
        raise ProfileError(f"{what}: cannot send the non-finite value {value!r} to an instrument")
    if spec:
        try:
            return format(value, spec)
        except (ValueError, TypeError) as exc:
            raise ProfileError(f"{what}: format spec {spec!r} does not suit the value {value!r}: {exc}") from None
    if isinstance(value, bool):
        return "ON" if value else "OFF"
    if isinstance(value, float):
        return format(value, ".9g")
    return str(value)


def parse_template(text: str, *, where: str, allowed: frozenset[str] | None = None) -> Template:
    """Parse a command template; ``allowed`` (if given) are the only names its fields may use.

    Each field's spec is tried on a value of the kind the drivers send (a whole number for
    channel, points, slot; a float otherwise), so ``{span_v:d}`` fails here.
    """
    pieces: list[str | Field] = []
    try:
        parsed = list(string.Formatter().parse(text))
    except ValueError as exc:
        raise ProfileError(f"{where}: bad template {text!r}: {exc}") from None
    for literal, field_text, spec, conversion in parsed:
        if literal:
            pieces.append(literal)
        if field_text is None:
            continue
        if conversion:
            raise ProfileError(f"{where}: {{{field_text}!{conversion}}}: conversions (!r, !s) are not allowed")
        if not field_text.strip():
            raise ProfileError(f"{where}: {text!r} has an empty field {{}}; name a value, e.g. {{channel}}")
        if "{" in spec:
            raise ProfileError(f"{where}: {{{field_text}:{spec}}}: nested fields in a format spec are not allowed")
        expression = parse_expression(field_text, where=f"{where} {{{field_text}}}")
        unknown = sorted(expression.names - allowed) if allowed is not None else []
        if unknown:
            raise ProfileError(f"{where}: {{{field_text}}} uses {', '.join(unknown)}, which this operation is not "
                               f"given (it is given: {', '.join(sorted(allowed)) or 'nothing'})")
        pieces.append(Field(expression, spec))
        _try_spec(expression, spec, where)
    return Template(text, tuple(pieces))


def _try_spec(expression: Expression, spec: str, where: str) -> None:
    sample = {name: (3 if name in WHOLE_NUMBER_NAMES else 1.5) for name in expression.names}
    try:
        value = expression.evaluate(sample)
    except ProfileError:
        return  # e.g. a division by zero at the sample values: the values of a run decide
    if spec:
        try:
            format(value, spec)
        except (ValueError, TypeError) as exc:
            kind = "a whole number" if isinstance(value, int) else "a number with a fraction"
            raise ProfileError(f"{where}: {{{expression.text}:{spec}}}: format spec {spec!r} does not suit "
                               f"{kind}: {exc}") from None
