"""Lines after the data of a text export: a footer (``End of data``, statistics lines) ends the table.

Scopes and loggers often close an export with a few lines that are not samples: an end marker, the
minimum, maximum and mean of each channel, a line count. The rule: walking back from the end of the
file over at most FOOTER_LINES lines, the lines after the last data row are a footer when the first
of them does not begin with a value in the first data column (``Max,1.8,1.2`` or ``End of data``
do not; ``1e-6,0.9,abc`` does, and stays a bad data row that the parser names). Empty rows after
the data (only delimiters, as spreadsheets save them) are cut without a word. Only the end of the
file is read, so a plain export costs one line's look.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from labtool.ingest.sniff import NA_TOKENS, VALUE_ANY, VALUE_DOT, TextLayout, clean_cell, decode_line, split_fields

FOOTER_LINES = 64  # more lines than this after the last data row are not a footer but a broken file
TAIL_BYTES = 64 * 1024  # of the file, searched from the end
KEPT_LINES = 20  # footer lines kept in the provenance


@dataclass(frozen=True)
class Footer:
    offset: int  # byte offset where the data ends
    lines: tuple[str, ...]  # the footer's lines, as written (none: only empty lines after the data)
    first_offset: int | None = None  # byte offset of the first of them


def _cells(text: str, layout: TextLayout) -> list[str] | None:
    fields = split_fields(text, layout.delimiter)
    if len(fields) < layout.n_fields and layout.delimiter == " " and fields:
        return None
    return [clean_cell(fields[k]) if k < len(fields) else "" for k in layout.columns]


def find_footer(data: bytes, layout: TextLayout) -> Footer | None:
    """The footer after the data, or None (no footer, or lines that are a broken table instead)."""
    value = VALUE_DOT if layout.decimal == "." else VALUE_ANY
    start = max(layout.body_offset, len(data) - TAIL_BYTES)
    lines = data[start:].splitlines(keepends=True)
    if start > layout.body_offset:
        lines = lines[1:]  # the first line may be cut
    offset = len(data)
    cut = None  # where the lines after the last data row start
    footer: list[tuple[int, str]] = []
    for raw in reversed(lines):
        offset -= len(raw)
        text = decode_line(raw.rstrip(b"\r\n"))
        if any(clean_cell(c) for c in split_fields(text, layout.delimiter)):
            if _is_data(text, layout, value):
                break
            footer.insert(0, (offset, text))
            if len(footer) > FOOTER_LINES:
                return None
        cut = offset  # blank lines, and lines of only delimiters (empty spreadsheet rows), are cut unsaid
    else:
        return None  # no data row in the tail: not a footer
    if cut is None:
        return None
    first = _cells(footer[0][1], layout) if footer else None
    if first and first[0] and value.match(first[0]):
        return None  # a data row with a bad cell, or cut short: the parser names it
    return Footer(offset=cut, lines=tuple(text.strip() for _, text in footer),
                  first_offset=footer[0][0] if footer else None)


def _is_data(text: str, layout: TextLayout, value: re.Pattern) -> bool:
    if len(split_fields(text, layout.delimiter)) != layout.n_fields:
        return False
    cells = _cells(text, layout)
    return all(value.match(c) or c.lower() in NA_TOKENS for c in cells) and any(value.match(c) for c in cells)


def _cells(text: str, layout: TextLayout) -> list[str]:
    """The data columns' cells of a line (missing ones empty)."""
    fields = split_fields(text, layout.delimiter)
    return [clean_cell(fields[k]) if k < len(fields) else "" for k in layout.columns]
