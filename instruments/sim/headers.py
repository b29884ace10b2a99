"""Matching SCPI program headers in long or short form (SCPI-1999 Vol. 1 §6.2.1: a mnemonic may be
sent as its short form, the upper-case letters, or in full; optional nodes in brackets; a numeric
suffix selects one of several like nodes)."""

from __future__ import annotations

import re
from functools import lru_cache


def _mnemonic(word: str) -> str:
    short = "".join(ch for ch in word if ch.isupper() or ch.isdigit() or ch in "*?")
    rest = word[len(short):].upper()
    body = re.escape(short) + (f"(?:{re.escape(rest)})?" if rest else "")
    return body


@lru_cache(maxsize=None)
def compile_header(form: str) -> re.Pattern:
    """``:SOURce#:VOLTage[:LEVel]`` → a regex; ``#`` is a numeric suffix captured as a group.

    A trailing ``?`` makes the form a query; common commands (``*IDN?``) match literally.
    """
    query = form.endswith("?")
    core = form[:-1] if query else form
    tail = r"\?" if query else ""
    if core.startswith("*"):
        return re.compile("^" + re.escape(core) + tail + "$", re.IGNORECASE)
    out = []
    for optional, node in re.findall(r"(\[?):?([A-Za-z#]+)\]?", core):
        suffix = node.endswith("#")
        piece = ":" + _mnemonic(node.rstrip("#")) + (r"(\d*)" if suffix else "")
        out.append(f"(?:{piece})?" if optional else piece)
    return re.compile("^:?" + "".join(out)[1:] + tail + "$", re.IGNORECASE)


def match(form: str, header: str) -> re.Match | None:
    return compile_header(form).match(header.strip())
