"""A small arithmetic language for profiles: numbers, names, + - * /, unary minus, parentheses.

Profiles compute what an instrument wants from what the plan gives (volts per division from a span,
a slew rate from volts and ramp time, a trigger position in percent). The text is parsed with
:mod:`ast` and only the node kinds above are accepted; it is evaluated by walking that tree, never
by ``eval``, so a profile cannot call, import, index or reach attributes of anything.
"""

from __future__ import annotations

import ast
import math
import operator
from dataclasses import dataclass
from typing import Mapping

from labtool.errors import ProfileError

_BINARY = {ast.Add: operator.add, ast.Sub: operator.sub, ast.Mult: operator.mul, ast.Div: operator.truediv}
_UNARY = {ast.USub: operator.neg, ast.UAdd: operator.pos}
_SYMBOL = {ast.Pow: "**", ast.FloorDiv: "//", ast.Mod: "%", ast.MatMult: "@", ast.BitAnd: "&", ast.BitOr: "|",
           ast.BitXor: "^", ast.LShift: "<<", ast.RShift: ">>"}
_NODE_WORD = {ast.Call: "a function call", ast.Attribute: "an attribute", ast.Subscript: "an index",
              ast.Compare: "a comparison", ast.BoolOp: "and/or", ast.Lambda: "a lambda", ast.IfExp: "if/else",
              ast.List: "a list", ast.Tuple: "a tuple", ast.Dict: "a dict", ast.Set: "a set",
              ast.JoinedStr: "an f-string", ast.NamedExpr: "an assignment"}


@dataclass(frozen=True)
class Expression:
    """A parsed expression; :attr:`names` are the values it needs."""

    text: str
    tree: ast.expr
    names: frozenset[str]

    def evaluate(self, values: Mapping[str, float | int]) -> float | int:
        """The value; names missing from ``values``, text values and division by zero raise ProfileError."""
        return _walk(self.tree, values, self.text)


def parse_expression(text: str, *, where: str = "expression") -> Expression:
    """Parse ``text``; anything outside the grammar raises ProfileError naming what was found."""
    try:
        tree = ast.parse(text.strip(), mode="eval").body
    except SyntaxError as exc:
        raise ProfileError(f"{where}: {text.strip()!r} is not an expression of numbers, names, + - * / "
                           f"and parentheses ({exc.msg})") from None
    names: set[str] = set()
    _check(tree, text.strip(), where, names)
    return Expression(text.strip(), tree, frozenset(names))


def _check(node: ast.AST, text: str, where: str, names: set[str]) -> None:
    if isinstance(node, ast.Constant):
        if isinstance(node.value, bool) or not isinstance(node.value, (int, float)):
            raise ProfileError(f"{where}: {text!r}: only numbers may be written as constants, not {node.value!r}")
        return
    if isinstance(node, ast.Name):
        names.add(node.id)
        return
    if isinstance(node, ast.BinOp):
        if type(node.op) not in _BINARY:
            raise ProfileError(f"{where}: {text!r}: the operator {_SYMBOL.get(type(node.op), '?')} is not "
                               f"allowed (only + - * /)")
        _check(node.left, text, where, names)
        _check(node.right, text, where, names)
        return
    if isinstance(node, ast.UnaryOp):
        if type(node.op) not in _UNARY:
            raise ProfileError(f"{where}: {text!r}: only a leading + or - is allowed")
        _check(node.operand, text, where, names)
        return
    what = _NODE_WORD.get(type(node), type(node).__name__)
    raise ProfileError(f"{where}: {text!r}: {what} is not allowed (only numbers, names, + - * / and parentheses)")


def _walk(node: ast.expr, values: Mapping[str, float | int], text: str) -> float | int:
    if isinstance(node, ast.Constant):
        return node.value
    if isinstance(node, ast.Name):
        if node.id not in values:
            raise ProfileError(f"{text!r}: no value for {node.id}")
        value = values[node.id]
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ProfileError(f"{text!r}: {node.id} is {value!r}, not a number")
        return value
    if isinstance(node, ast.UnaryOp):
        return _UNARY[type(node.op)](_walk(node.operand, values, text))
    left, right = _walk(node.left, values, text), _walk(node.right, values, text)
    if isinstance(node.op, ast.Div) and right == 0:
        raise ProfileError(f"{text!r}: division by zero")
    result = _BINARY[type(node.op)](left, right)
    if isinstance(result, float) and not math.isfinite(result):
        raise ProfileError(f"{text!r}: the result {result!r} is not a finite number")
    return result
