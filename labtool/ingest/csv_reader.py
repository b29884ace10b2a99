"""CSV and other delimited text exports (optionally gzip-compressed) → one Capture.

The sniffer finds the layout from the head of the file; the numeric body goes to pyarrow's columnar
CSV parser in one call (no Python loop per row). Only when pyarrow rejects the body does a line scan
run, to name the first bad line and column.
"""

from __future__ import annotations

import gzip
import io
import re
import zlib
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

from labtool.capture import Capture, sha256_bytes
from labtool.errors import InputError
from labtool.ingest.footer import KEPT_LINES, find_footer
from labtool.ingest.options import IngestOptions
from labtool.ingest.sniff import (DELIMITER_NAMES, MAX_DECOMPRESSED_BYTES, NA_TOKENS, NULL_TOKENS, NUMBER_DOT,
                                  TextLayout, check_line_lengths, clean_cell, decode_line, drop_padding,
                                  normalise_encoding, shorten, sniff, split_fields)
from labtool.ingest.stamps import parse_stamps
from labtool.ingest.table import RawTable, build_capture

GZIP_MAGIC = b"\x1f\x8b"
NUMBER_COMMA = re.compile(r"[-+]?(?:\d+(?:,\d*)?|,\d+)(?:[eE][-+]?\d+)?\Z")


def gunzip(data: bytes, path: str) -> bytes:
    """Decompress every gzip member, refusing more than MAX_DECOMPRESSED_BYTES."""
    out = io.BytesIO()
    try:
        with gzip.GzipFile(fileobj=io.BytesIO(data)) as fh:
            while chunk := fh.read(16 * 1024 * 1024):
                out.write(chunk)
                if out.tell() > MAX_DECOMPRESSED_BYTES:
                    raise InputError(path, f"decompresses to more than {MAX_DECOMPRESSED_BYTES >> 20} MiB "
                                           f"(split the export)")
    except (OSError, EOFError, zlib.error) as exc:
        raise InputError(path, f"corrupt gzip data: {exc}") from None
    return out.getvalue()


def _squeeze_blanks(body: bytes) -> bytes:
    """Whitespace-delimited text → single-space-delimited, so a one-character delimiter parser reads it."""
    body = re.sub(rb"[ \t]+", b" ", body)
    body = re.sub(rb" ?(\r\n|\n|\r) ?", rb"\1", body)
    return body[1:] if body.startswith(b" ") else body


def _unpad_quotes(body: bytes, delimiter: str) -> bytes:
    """``1.0, "2.0"`` → ``1.0,"2.0"``: a quote must open its field for the parser to see it (line ends kept)."""
    d = re.escape(delimiter.encode())
    return re.sub(rb'(?<=' + d + rb') +(?=")|(?<=") +(?=' + d + rb'|\r|\n|\Z)', b"", body)


@dataclass(frozen=True)
class Body:
    """The parsed columns (float64, missing values NaN; time stamps in seconds from the first) and
    what the stamps said about their origin."""

    columns: list[np.ndarray]
    metadata: dict[str, str]


def parse_body(data: bytes, layout: TextLayout, path: str, end: int | None = None) -> Body:
    """The columns of the body (up to byte ``end``, where a footer starts)."""
    stop = len(data) if end is None else end
    # A zero-copy view of the body; whitespace-delimited text is rewritten to single spaces first, and
    # blanks before quotes are dropped (copies, for those layouts only).
    if layout.delimiter == " " or layout.padded_quotes:
        text = data[layout.body_offset:stop]
        body = _squeeze_blanks(text) if layout.delimiter == " " else _unpad_quotes(text, layout.delimiter)
    else:
        body = pa.py_buffer(data).slice(layout.body_offset, stop - layout.body_offset)
    names = [f"c{k}" for k in range(layout.n_fields)]
    stamp_fields = {k for field, clock in layout.stamps for k in (field, clock) if k is not None}
    wanted = [names[k] for k in sorted({*layout.columns, *stamp_fields})]
    types = {names[k]: pa.string() if k in stamp_fields else pa.float64() for k in range(layout.n_fields)}
    try:
        table = _arrow_read(body, names, wanted, types, layout)
    except (pa.ArrowInvalid, pa.ArrowTypeError) as exc:
        # Lines of only blanks are empty to a reader but not to pyarrow: drop them and try once more.
        text = body.to_pybytes() if isinstance(body, pa.Buffer) else body
        cleaned = _BLANK_LINE.sub(b"", text)
        if cleaned == text:
            raise _locate_problem(text, layout, path, exc) from None
        try:
            table = _arrow_read(cleaned, names, wanted, types, layout)
        except (pa.ArrowInvalid, pa.ArrowTypeError) as exc2:
            raise _locate_problem(text, layout, path, exc2) from None
    stamps = dict(layout.stamps)
    columns, metadata = [], {}
    for k, name in zip(layout.columns, layout.names):
        if k not in stamps:
            columns.append(table.column(names[k]).to_numpy(zero_copy_only=False).astype(np.float64, copy=False))
            continue
        texts = table.column(names[k]).combine_chunks()
        if stamps[k] is not None:  # a date column and a time-of-day column: one stamp
            texts = pc.binary_join_element_wise(texts, table.column(names[stamps[k]]).combine_chunks(), " ")
        found = parse_stamps(texts)
        if found.bad is not None:
            cell = texts[found.bad].as_py()
            raise InputError(path, f"{shorten(cell)!r} is not a date and time (as in 2026-11-02 13:01:02.125) "
                                   f"nor a time (13:01:02.125)", line=_row_locator(data, layout)(found.bad),
                             field=name)
        columns.append(found.seconds)
        metadata.update(found.metadata)
    return Body(columns, metadata)


_BLANK_LINE = re.compile(rb"(?<=[\r\n])[ \t]+(?=[\r\n]|\Z)")


def _arrow_read(body: bytes | pa.Buffer, names: list[str], wanted: list[str], types: dict, layout: TextLayout
                ) -> pa.Table:
    return pacsv.read_csv(
        pa.BufferReader(body),
        read_options=pacsv.ReadOptions(column_names=names, block_size=4 << 20),
        parse_options=pacsv.ParseOptions(delimiter=layout.delimiter, ignore_empty_lines=True),
        convert_options=pacsv.ConvertOptions(
            column_types={n: types[n] for n in wanted}, include_columns=wanted,
            decimal_point=layout.decimal, null_values=list(NULL_TOKENS), strings_can_be_null=True,
            quoted_strings_can_be_null=True))


def _locate_problem(body: bytes, layout: TextLayout, path: str, exc: Exception) -> InputError:
    """The first line the columnar parser could not take, with its column (error path only)."""
    number = NUMBER_COMMA if layout.decimal == "," else NUMBER_DOT
    stamps = {k for field, clock in layout.stamps for k in (field, clock) if k is not None}
    for line, raw in enumerate(body.splitlines(), start=layout.first_data_line):
        text = decode_line(raw)
        if not text.strip():
            continue
        fields = split_fields(text, layout.delimiter)
        if len(fields) != layout.n_fields:
            return InputError(path, f"{len(fields)} field{'s' if len(fields) != 1 else ''}, expected "
                                    f"{layout.n_fields} (line cut short or extra delimiter)", line=line)
        for k, name in zip(layout.columns, layout.names):
            cell = clean_cell(fields[k])
            if k in stamps or cell.lower() in NA_TOKENS or number.match(cell):
                continue
            hint = " (this file uses a decimal comma)" if layout.decimal == "," and NUMBER_DOT.match(cell) else ""
            return InputError(path, f"{shorten(cell)!r} is not a number{hint}", line=line, field=name)
    return InputError(path, f"cannot parse the numeric table: {exc}", line=layout.first_data_line)


def _row_locator(data: bytes, layout: TextLayout):
    """Map a data row index to its line number, skipping blank lines like the parser does (only
    computed when an error needs it)."""
    cache: list[int] = []
    first_line = layout.first_data_line

    def line_of(row: int) -> int:
        if not cache:
            body = data[layout.body_offset:]
            cache.extend(k for k, raw in enumerate(body.splitlines(), start=first_line) if raw.strip())
        return cache[row] if row < len(cache) else first_line + row

    return line_of


def read_csv(path: str, data: bytes, options: IngestOptions) -> list[Capture]:
    """One delimited text export (plain or gzip) → a list with its one Capture."""
    # The raw bytes' hash runs on a second thread while the text is parsed (hashlib and pyarrow both
    # release the GIL): on a large export it would otherwise add a third to the parse time.
    with ThreadPoolExecutor(max_workers=1) as hasher:
        digest = hasher.submit(sha256_bytes, data)
        table = _parse_text(path, data)
        return [build_capture(table, digest.result(), options)]


def _parse_text(path: str, data: bytes) -> RawTable:
    importer = "csv"
    if data.startswith(GZIP_MAGIC):
        data = gunzip(data, path)
        importer = "csv+gzip"
    data = drop_padding(normalise_encoding(data, path))
    check_line_lengths(data, path)
    layout = sniff(data, path)
    footer = find_footer(data, layout)
    body = parse_body(data, layout, path, None if footer is None else footer.offset)
    line_of = _row_locator(data, layout)
    header_line = layout.header_line or layout.first_data_line
    metadata = {**layout.preamble, **body.metadata}
    warnings = list(layout.warnings)
    if footer is not None and footer.lines:
        first = _line_number(data, footer.first_offset)
        count = len(footer.lines)
        warnings.append(f"{count} line{'s' if count != 1 else ''} after the data (from line {first}: "
                        f"{shorten(footer.lines[0])!r}) read as a footer, not as samples")
        metadata["footer"] = " | ".join(footer.lines[:KEPT_LINES])

    names = list(layout.names)  # build_capture may name header-less channels (in this list)

    def place(row: int | None, col: int | None) -> dict:
        where = {"line": header_line if row is None else line_of(row)}
        if col is not None:
            where["field"] = names[col]
        return where

    preamble_lines = _preamble_lines(data, layout)
    return RawTable(
        source_path=path, importer=importer, names=names, units=list(layout.units),
        columns=body.columns, place=place, metadata=metadata,
        metadata_place=lambda key: {"line": preamble_lines.get(key, 1)}, notes=list(layout.notes),
        layout=f"{DELIMITER_NAMES[layout.delimiter]}-delimited, decimal "
               f"{'comma' if layout.decimal == ',' else 'point'}, data from line {layout.first_data_line}",
        warnings=warnings)


def _line_number(data: bytes, offset: int) -> int:
    """1-based line number of a byte offset (LF, CRLF or bare-CR line ends)."""
    newline = b"\n" if data.find(b"\n", 0, offset) >= 0 else b"\r"
    return data.count(newline, 0, offset) + 1


def _preamble_lines(data: bytes, layout: TextLayout) -> dict[str, int]:
    """Line number of each preamble key (for error messages)."""
    found: dict[str, int] = {}
    head = data[:layout.body_offset].splitlines()
    for key in layout.preamble:
        for k, raw in enumerate(head, start=1):
            if key in decode_line(raw):
                found[key] = k
                break
    return found
