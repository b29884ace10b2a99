"""Find the table inside a text export: preamble, header, units row, delimiter and decimal mark.

Bench scopes, data loggers and lab scripts write many shapes: key/value preamble lines before the
header (``Sample Interval,2e-9``, ``# lot: ZR24A``, ``Record Length: 100000``) or beside the data,
comma, semicolon, tab or whitespace delimiters, quoted cells, a decimal comma, CRLF line ends, a
byte-order mark or UTF-16, units in the header (``Time [s]``, ``CH1 (mV)``, ``t/ms``, ``vdd_v``) or
in a row of their own, time stamps as dates and clock times. The sniffer looks only at the head of
the file; the body is parsed by a columnar reader (see ``csv_reader``), its end by ``footer``.

:func:`locate_table` works on rows of text cells, so the XLSX reader uses it for sheets too.
"""

from __future__ import annotations

import csv
import dataclasses
import re
from collections import Counter
from dataclasses import dataclass
from typing import Sequence

from labtool.errors import InputError, UsageError
from labtool.ingest.stamps import STAMP_CELL, stamp_kind
from labtool.units import parse_unit

HEAD_BYTES = 256 * 1024
HEAD_LINES = 256  # lines the sniffer looks at first (scope preambles are a few dozen)
LONG_HEAD_LINES = 16384  # ... and at most, when no table starts in the first HEAD_LINES (long preambles)
LONG_HEAD_BYTES = 4 * 1024 * 1024
SAMPLE_ROWS = 16  # data rows that decide which leading and trailing columns are empty
MAX_CHANNEL_NUMBER = 64  # a header cell "1" … "64" can name a channel

# Caps that keep time and memory bounded on hostile or broken files; each refusal says which cap.
MAX_FILE_BYTES = 1 << 30  # a file on disk, checked from its size before it is read
MAX_DECOMPRESSED_BYTES = 1 << 30  # gzip text or a workbook's XML, decompressed
MAX_COLUMNS = 1024
MAX_LINE_BYTES = 256 * 1024
QUOTED_CHARS = 40  # of a bad cell, in a message

# Cells that stand for a missing, non-finite or over-range value: NULL_TOKENS are what pyarrow is told
# to read as missing (stored as NaN with a clip flag, like the SCPI values); "inf" it parses as a
# number, flagged later the same way. Besides the usual spellings: the C runtime's old printf forms
# ("1.#INF", "-1.#IND"), a spreadsheet's "#N/A", and the overload marks of meters and loggers
# ("OL", "OVER"; common practice, no source).
NULL_TOKENS = ("", "nan", "NaN", "NAN", "-nan", "+nan", "-NaN", "+NaN", "NA", "N/A", "n/a", "na", "null", "NULL",
               "None", "none", "#N/A", "1.#INF", "-1.#INF", "1.#IND", "-1.#IND", "1.#QNAN", "-1.#QNAN",
               "OL", "+OL", "-OL", "OVER", "+OVER", "-OVER", "Over", "OVLD", "-OVLD", "+OVLD")
# The same, lower case, for sniffing; the inf spellings pyarrow reads as numbers.
NA_TOKENS = frozenset({t.lower() for t in NULL_TOKENS} | {"inf", "+inf", "-inf", "infinity", "+infinity",
                                                          "-infinity"})

NUMBER_DOT = re.compile(r"[-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?\Z")
NUMBER_ANY = re.compile(r"[-+]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][-+]?\d+)?\Z")
# A value cell to the sniffer: a number or a time stamp (date and time, time of day, elapsed time).
VALUE_DOT = re.compile(rf"(?:{NUMBER_DOT.pattern})|(?:{STAMP_CELL})")
VALUE_ANY = re.compile(rf"(?:{NUMBER_ANY.pattern})|(?:{STAMP_CELL})")

# Delimiters tried, in order of preference on a tie; " " means any run of spaces and tabs.
DELIMITERS = (",", ";", "\t", " ")
DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", " ": "whitespace"}

_COMMENT = "#%!*/;"
_LINE_END = re.compile(rb"\r\n|\n|\r")
_LINE_END_BYTE = re.compile(rb"[\r\n]")
_NON_BLANK = re.compile(rb"\S")
_BRACKET = re.compile(r"^(.*?)\s*[\[(]\s*([^\[\]()]*?)\s*[\])]\s*$")
_SPICE = re.compile(r"^[vViI]\(.+\)$")
_IN_UNIT = re.compile(r"^(.*?\S)?\s*\bin\s+(\S+)$")  # "Time in s", "C1 in V", a bare "in s"
# Lower-case unit suffixes after an underscore, as lab scripts name columns (t_us, vdd_v, idd_ua).
_SUFFIX_UNITS = {"s": "s", "ms": "ms", "us": "us", "ns": "ns", "ps": "ps", "v": "V", "mv": "mV",
                 "uv": "uV", "a": "A", "ma": "mA", "ua": "uA", "na": "nA", "pa": "pA"}


# Temperature units: degrees Celsius, never the coulomb "C" with a prefix (and no prefixes at all).
_CELSIUS = re.compile(r"^(?:°\s*C|º\s*C|℃|deg\s*C|degC|degrees?\s*C(?:elsius)?|celsius)$", re.IGNORECASE)
# Unit cells that mark a sample-index column ("Sequence" under "X"), not a physical unit.
INDEX_UNIT_WORDS = frozenset({"sequence", "index", "sample", "samples", "no", "no.", "number", "#", "point",
                              "points", "pt", "pts", "count", "n"})


# A volt or ampere unit marked as a DC reading, as data loggers write them ("VDC", "mV DC", "Adc").
_DC = re.compile(r"^(.*[VA])\s*(?:DC|dc|Dc)$")


def known_unit(text: str) -> tuple[str, float] | None:
    """(SI base, factor) for a unit labtool knows, else None; degrees Celsius are ("°C", 1.0)."""
    text = text.strip()
    if _CELSIUS.match(text):
        return "°C", 1.0
    if "°" in text or "℃" in text:
        return None  # "m°C" and the like: no prefixed temperatures
    dc = _DC.match(text)
    try:
        return parse_unit(dc.group(1) if dc else text)
    except UsageError:
        return None


def is_index_unit(text: str | None) -> bool:
    return bool(text) and text.strip().lower() in INDEX_UNIT_WORDS


def split_name_unit(header: str) -> tuple[str, str | None]:
    """``"CH1 (mV)"`` → ("CH1", "mV"); ``"t/ms"`` → ("t", "ms"); ``"vdd_v"`` → ("vdd", "V")."""
    h = header.strip().strip('"').strip()
    m = _BRACKET.match(h)
    if m and not _SPICE.match(h):
        name, unit = m.group(1).strip(), m.group(2).strip()
        return (name or h), (unit or None)
    m = _IN_UNIT.match(h)
    if m and m.group(1) and known_unit(m.group(2)):
        return m.group(1).strip(), m.group(2)
    if "/" in h:
        name, _, unit = h.rpartition("/")
        if name.strip() and known_unit(unit.strip()):
            return name.strip(), unit.strip()
    if "_" in h:
        name, _, suffix = h.rpartition("_")
        if name and suffix.lower() in _SUFFIX_UNITS:
            return name, _SUFFIX_UNITS[suffix.lower()]
    return h, None


def strip_unit_brackets(cell: str) -> str:
    """A units-row cell as a bare unit: "(V)", "[mV]", "in s" → "V", "mV", "s"."""
    s = cell.strip().strip('"').strip()
    if len(s) >= 2 and s[0] in "[(" and s[-1] in "])":
        s = s[1:-1].strip()
    if s[:3].lower() == "in " and known_unit(s[3:].strip()):
        s = s[3:].strip()
    return s


# -- row classification --------------------------------------------------------------------------
def _width(row: Sequence[str]) -> int:
    n = len(row)
    while n and not row[n - 1].strip():
        n -= 1
    return n


def clean_cell(cell: str) -> str:
    """A cell without blanks and quotes around it."""
    return cell.strip().strip('"').strip()


def is_data_row(row: Sequence[str], number: re.Pattern) -> bool:
    """At least one number and otherwise only missing-value tokens."""
    seen = False
    for cell in row:
        c = clean_cell(cell)
        if number.match(c):
            seen = True
        elif c.lower() not in NA_TOKENS:
            return False
    return seen


def _is_text_row(row: Sequence[str], number: re.Pattern) -> bool:
    cells = [clean_cell(c) for c in row]
    return any(cells) and not any(number.match(c) for c in cells)


def _is_units_row(cells: Sequence[str]) -> bool:
    """Every filled cell a known unit, "-" or an index marker ("Sequence"), at least one a real unit."""
    units = [strip_unit_brackets(c) for c in cells]
    units = [u for u in units if u and u != "-"]
    return any(known_unit(u) for u in units) and all(known_unit(u) or is_index_unit(u) for u in units)


def _channel_numbers(cells: Sequence[str], number: re.Pattern) -> bool:
    """A text first cell, the others text or small whole numbers (channel numbers, not values)."""
    clean = [clean_cell(c) for c in cells]
    if not clean or not clean[0] or number.match(clean[0]):
        return False
    numbers = [c for c in clean[1:] if number.match(c)]
    return bool(numbers) and all(c.isdigit() and 0 < int(c) <= MAX_CHANNEL_NUMBER for c in numbers)


def _is_key_value_comment(row: Sequence[str]) -> bool:
    """``#size=4064`` or ``% lot: ZR24A``: a commented key/value line, never a header."""
    first = row[0].strip() if row else ""
    return bool(first) and first[0] in _COMMENT and _KEY_VALUE.match(first.lstrip(_COMMENT).strip()) is not None


@dataclass(frozen=True)
class TablePosition:
    """Where the table starts in a list of rows (indices into that list).

    ``skip`` leading columns hold no data: an empty key column whose preamble rows give one value per
    channel (``HResolution,2e-8,2e-8``), or key/value cells written beside the first data rows
    (``side_rows``). ``extras`` are header cells right of the data (``Start``, ``Increment``) with the
    value written under them in the units row.
    """

    header: int | None
    units: int | None
    data: int
    n_fields: int  # cells per data row as written (a trailing delimiter counts)
    n_columns: int  # columns that carry names or values (the skipped ones included)
    n_good: int  # sampled rows after the start that look like data
    skip: int = 0
    side_rows: tuple[int, ...] = ()
    extras: tuple[tuple[str, str], ...] = ()
    text_columns: tuple[int, ...] = ()  # columns of text in every data row (a status or note column)


def _numericish(row: Sequence[str], number: re.Pattern) -> bool:
    """Mostly numbers: a data row, or one with a few bad cells that the parser will point at."""
    cells = [clean_cell(c) for c in row]
    numbers = sum(1 for c in cells if number.match(c))
    texts = sum(1 for c in cells if not number.match(c) and c.lower() not in NA_TOKENS)
    return numbers >= 1 and numbers >= texts


def _leading_empty(sample: Sequence[Sequence[str]], n_columns: int) -> int:
    """Leading columns empty in every sampled data row (at most all but one)."""
    skip = 0
    while skip < n_columns - 1 and all(skip >= len(r) or not clean_cell(r[skip]) for r in sample):
        skip += 1
    return skip


def normal_key(text: str) -> str:
    """A preamble key or column name compared loosely: ``Horizontal Units`` → ``horizontal_units``."""
    return re.sub(r"[^0-9a-z#]+", "_", text.lower()).strip("_")


# Preamble keys that give the unit of the time axis, and of the channels (common practice, no source).
HORIZONTAL_UNIT_KEYS = frozenset({"hunit", "hunits", "h_unit", "h_units", "horizontal_unit", "horizontal_units",
                                  "x_unit", "x_units", "xunit", "xunits", "time_unit", "time_units"})
VERTICAL_UNIT_KEYS = frozenset({"vunit", "vunits", "v_unit", "v_units", "vertical_unit", "vertical_units",
                                "y_unit", "y_units", "yunit", "yunits", "unit", "units"})
# Preamble keys whose per-channel values name the channels.
CHANNEL_NAME_KEYS = frozenset({"source", "sources", "channel", "channels", "trace", "traces", "waveform", "name",
                               "names", "label", "labels", "signal", "signals"})


def locate_table(rows: Sequence[Sequence[str]], number: re.Pattern = VALUE_DOT, *,
                 text_columns: bool = False) -> TablePosition | None:
    """Where the data starts, and the header/units rows just above it.

    The field count is the most common one among all-value rows (ties: the earliest row's), so a
    bad cell or a cut-off line later in the data does not move the start. The data starts at the
    first all-value row of that count followed by a mostly-value row (or by nothing). Leading and
    trailing empty columns are judged on the last data rows of the head: key/value cells written
    beside the data fill leading columns of the first rows only (with gaps), and those rows are data
    too, as far up as their data columns hold values. With ``text_columns``, when no row holds only
    values, columns of text in every data row (a status or note column) are left out first.
    """
    nonblank = [i for i, r in enumerate(rows) if any(c.strip() for c in r)]
    numeric = [i for i in nonblank if _numericish(rows[i], number)]
    clean = [i for i in numeric if is_data_row(rows[i], number)]
    if not clean:
        text = _text_columns(rows, numeric, number) if text_columns else set()
        if not text:
            return None
        masked = [[("" if k in text else c) for k, c in enumerate(r)] for r in rows]
        where = locate_table(masked, number)
        return None if where is None else dataclasses.replace(where, text_columns=tuple(sorted(text)))
    counts = Counter(len(rows[i]) for i in clean)
    top = max(counts.values())
    n_fields = next(len(rows[i]) for i in clean if counts[len(rows[i])] == top)
    numeric_set = set(numeric)
    pos = None
    for p, i in enumerate(nonblank):
        if len(rows[i]) == n_fields and is_data_row(rows[i], number):
            following = nonblank[p + 1] if p + 1 < len(nonblank) else None
            if following is None or following in numeric_set:
                pos = p
                break
    if pos is None:
        return None
    full = [j for j in nonblank[pos:] if len(rows[j]) == n_fields and is_data_row(rows[j], number)]
    sample = [rows[j] for j in full[-SAMPLE_ROWS:]]
    n_columns = max(_width(r) for r in sample)
    skip = _leading_empty(sample, n_columns)

    def data_cells(k: int) -> list[str]:
        return list(rows[k][skip:n_columns])

    def keyed(k: int) -> bool:  # a row with cells in the leading columns the data leaves empty
        return any(clean_cell(c) for c in rows[k][:skip])

    def beside(k: int) -> bool:  # a data row, whatever stands in the leading columns
        return len(rows[k]) == n_fields and is_data_row(data_cells(k), number)

    side: tuple[int, ...] = ()
    if skip >= 2:  # key and value cells beside the data rows (one key column is a per-channel preamble)
        while pos > 0 and beside(nonblank[pos - 1]):
            pos -= 1
        side = tuple(k for k in nonblank[pos:] if keyed(k) and beside(k))
    start = nonblank[pos]
    n_good = len(full) if not skip else sum(1 for j in nonblank[pos:] if beside(j))

    def header_like(k: int, *, loose: bool) -> bool:
        """Names over the data columns; ``loose`` (a units row follows): numbers allowed ("1", "2")."""
        row = rows[k]
        if _is_key_value_comment(row) or is_data_row(row, number) or keyed(k):
            return False
        if not (len(row) == n_fields or _width(row) >= n_columns):
            return False
        cells = data_cells(k)
        if _is_units_row(cells):  # "VUnit,V,V" or "s,V,V": units, never names
            return False
        if loose:
            return any(clean_cell(c) and not number.match(clean_cell(c)) for c in cells)
        if _channel_numbers(cells, number) and len(row) == n_fields >= 3:
            return True  # "Time,1,2": channel numbers in a full-width row whose first cell is text
        return _is_text_row(cells, number)

    def units_like(k: int) -> bool:
        return not keyed(k) and _width(rows[k]) >= n_columns and _is_units_row(data_cells(k))

    above = nonblank[pos - 2:pos] if pos >= 2 else nonblank[:pos]
    header = units = None
    if len(above) == 2 and units_like(above[1]) and header_like(above[0], loose=True):
        header, units = above
    elif above and header_like(above[-1], loose=False):
        header = above[-1]
    elif above and units_like(above[-1]):  # units without names ("Second,Volt,Volt")
        units = above[-1]
    if skip == 1 and header is None:  # an empty key column: names and units are keyed rows above the data
        header, keyed_units = _keyed_name_rows(rows, nonblank[:pos], data_cells, number)
        units = units if units is not None else keyed_units
    extras: list[tuple[str, str]] = []
    if header is not None:
        head = rows[header]
        under = list(rows[units]) if units is not None else []
        under += [""] * (len(head) - len(under))
        named = n_columns
        for k in range(n_columns, len(head)):
            if not clean_cell(head[k]):
                continue
            if number.match(clean_cell(under[k])):  # "Start" over "-1e-05": a time-base value, not a column
                extras.append((clean_cell(head[k]), clean_cell(under[k])))
            elif k < n_fields and not extras:
                named = k + 1
        n_columns = named
    return TablePosition(header, units, start, n_fields, n_columns, n_good, skip, side, tuple(extras))


def _text_columns(rows: Sequence[Sequence[str]], numeric: list[int], number: re.Pattern) -> set[int]:
    """Columns holding text in every one of the last mostly-value rows of the common width (a status,
    alarm or note column beside the samples); none when that would leave no column."""
    if not numeric:
        return set()
    width = Counter(len(rows[i]) for i in numeric).most_common(1)[0][0]
    tail = [rows[i] for i in numeric if len(rows[i]) == width][-SAMPLE_ROWS:]
    if len(tail) < 2:  # one line of text and a number is a preamble line, not a table
        return set()
    found = {k for k in range(width) if all((c := clean_cell(r[k])) and not number.match(c)
                                            and c.lower() not in NA_TOKENS for r in tail)}
    return found if len(found) < width else set()


def _keyed_name_rows(rows, candidates: list[int], data_cells, number: re.Pattern) -> tuple[int | None, int | None]:
    """The rows above the data that name the channels and give their units, in a table whose first
    column is empty: names in a row with an empty first cell (``,CH1,CH2``), else in a row keyed like
    ``Source``, else in the last other keyed row of distinct texts; units in the last keyed units row
    that is not the time axis's (``VUnit,V,A``, not ``HUnit,s,s``)."""
    names: dict[int, int] = {}  # preference (lower wins) → row
    units = None
    for k in candidates:
        cells = [clean_cell(c) for c in data_cells(k)]
        key = normal_key(clean_cell(rows[k][0]))
        filled = [c for c in cells if c]
        if not filled:
            continue
        if _is_units_row(cells):
            if key and key not in HORIZONTAL_UNIT_KEYS:
                units = k
        elif _is_text_row(cells, number) and len(set(filled)) == len(filled):
            names[0 if not key else 1 if key in CHANNEL_NAME_KEYS else 2] = k
    return (names[min(names)] if names else None), units


def unique_names(names: list[str]) -> tuple[list[str], list[str]]:
    """Repeated column names made unique (the second ``Ampl`` is ``Ampl_2``, skipping names already
    taken), and one warning per repeated name."""
    taken = set(names)
    out: list[str] = []
    renamed: dict[str, list[str]] = {}
    for name in names:
        if name not in out and name not in renamed:
            out.append(name)
            continue
        group = renamed.setdefault(name, [name])
        k = len(group) + 1
        while f"{name}_{k}" in taken:
            k += 1
        group.append(f"{name}_{k}")
        taken.add(group[-1])
        out.append(group[-1])
    return out, [f"{len(group)} columns named {name!r}: read as {', '.join(map(repr, group))}"
                 for name, group in renamed.items()]


def column_names_and_units(rows: Sequence[Sequence[str]], where: TablePosition
                           ) -> tuple[list[str], list[str | None], list[str]]:
    """Names (units stripped, repeated ones made unique) and unit texts of the table's columns, and a
    warning per repeated name; unnamed columns get ``columnK``."""
    n = where.n_columns
    header = list(rows[where.header]) if where.header is not None else []
    header += [""] * (n - len(header))
    names, units = [], []
    for k in range(n):
        name, unit = split_name_unit(header[k]) if header[k].strip() else ("", None)
        names.append(name or f"column{k + 1}")
        units.append(unit)
    if where.units is not None:
        row = list(rows[where.units]) + [""] * n
        for k in range(where.skip, n):
            u = strip_unit_brackets(row[k])
            if u and u != "-":
                units[k] = u
    names[where.skip:], repeated = unique_names(names[where.skip:])
    return names, units, repeated


# -- preamble ------------------------------------------------------------------------------------
_KEY_VALUE = re.compile(r"^([^:=]+?)\s*[:=]\s*(.+)$")


def parse_preamble(lines: Sequence[str], delimiter: str) -> tuple[dict[str, str], list[str]]:
    """Key/value pairs of the lines above the header, and the lines that are not pairs (notes)."""
    pairs: dict[str, str] = {}
    notes: list[str] = []
    for line in lines:
        text = line.strip().lstrip(_COMMENT).strip()
        if not text:
            continue
        pair = None
        if delimiter != " " and delimiter in text:
            fields = [clean_cell(f) for f in text.split(delimiter)]
            rest = [f for f in fields[1:] if f]
            if fields[0] and rest:  # one value per channel, all equal ("HResolution,2e-8,2e-8"): that value
                pair = fields[0].rstrip(":=").strip(), rest[0] if len(set(rest)) == 1 else " ".join(rest)
        if pair is None:
            m = _KEY_VALUE.match(text)
            if m:
                pair = clean_cell(m.group(1)), clean_cell(m.group(2))
        if pair and pair[0]:
            pairs[pair[0]] = pair[1]
        else:
            notes.append(text)
    return pairs, notes


# -- text files ----------------------------------------------------------------------------------
@dataclass(frozen=True)
class TextLayout:
    """Everything the CSV reader needs to hand the numeric body to a columnar parser."""

    delimiter: str  # ",", ";", "\t" or " " (any run of blanks)
    decimal: str  # "." or ","
    names: tuple[str, ...]
    units: tuple[str | None, ...]
    header_line: int | None  # 1-based line numbers
    first_data_line: int
    body_offset: int  # byte offset of the first data line
    n_fields: int
    preamble: dict
    notes: tuple[str, ...]
    columns: tuple[int, ...] = ()  # field index of each named column (data columns may not start at 0)
    # Time-stamp columns (dates and times, clock or elapsed times; see ``stamps``): (field index, field
    # index of a separate time-of-day column or None), read as text and turned into seconds.
    stamps: tuple[tuple[int, int | None], ...] = ()
    padded_quotes: bool = False  # blanks between a delimiter and a quote (`1.0, "2.0"`): removed before parsing
    warnings: tuple[str, ...] = ()  # repeated column names made unique, text columns not read


def decode_line(raw: bytes) -> str:
    """UTF-8, else Windows-1252 (common for 'µ' in exports), else Latin-1 (never fails)."""
    for encoding in ("utf-8", "cp1252"):
        try:
            return raw.decode(encoding)
        except UnicodeDecodeError:
            continue
    return raw.decode("latin-1")


def _utf16_without_mark(head: bytes) -> str | None:
    """"utf-16-le" or "utf-16-be" when the head reads as Western text in UTF-16 without a byte-order
    mark: a NUL as every other byte, never on the other side (ASCII characters), else None."""
    head = head[:4096 - 4096 % 2]
    if len(head) < 8:
        return None
    even, odd = head[0::2], head[1::2]
    for encoding, zeros, chars in (("utf-16-le", odd, even), ("utf-16-be", even, odd)):
        if zeros.count(0) >= 0.9 * len(zeros) and chars.count(0) == 0:
            return encoding
    return None


def drop_padding(data: bytes) -> bytes:
    """Without the NUL bytes or the DOS end-of-file mark (Ctrl-Z) that some instruments pad a file with."""
    return data.rstrip(b"\x00\x1a") if data[-1:] in (b"\x00", b"\x1a") else data


def normalise_encoding(data: bytes, path: str) -> bytes:
    """Drop a UTF-8 byte-order mark; re-encode UTF-16 (with its mark, or plainly UTF-16 without) as UTF-8."""
    if data.startswith(b"\xef\xbb\xbf"):
        return data[3:]
    if data.startswith((b"\xff\xfe\x00\x00", b"\x00\x00\xfe\xff")):  # before UTF-16: same first two bytes
        raise InputError(path, "UTF-32 text: save the export as UTF-8 (or UTF-16 with a byte-order mark)")
    encoding = "utf-16" if data.startswith((b"\xff\xfe", b"\xfe\xff")) else _utf16_without_mark(data)
    if encoding is not None:
        try:
            return data.decode(encoding).encode("utf-8")
        except UnicodeDecodeError as exc:
            raise InputError(path, f"invalid UTF-16 text at byte {exc.start}") from None
    return data


def shorten(text: str) -> str:
    """A cell as a message quotes it: a long one cut, with its length."""
    return text if len(text) <= QUOTED_CHARS else f"{text[:QUOTED_CHARS]}… ({len(text)} characters)"


def check_line_lengths(data: bytes, path: str) -> None:
    """Refuse a line longer than MAX_LINE_BYTES. One probe per window of that size finds any window
    without a line end (so every line of twice the cap is found) at next to no cost on real files."""
    for pos in range(0, len(data) - MAX_LINE_BYTES + 1, MAX_LINE_BYTES):
        if _LINE_END_BYTE.search(data, pos, pos + MAX_LINE_BYTES) is None:
            cr_only = data.find(b"\n", 0, pos) < 0 and data.find(b"\r", 0, pos) >= 0  # old Mac line ends
            raise InputError(path, f"line longer than {MAX_LINE_BYTES // 1024} KiB (not a capture export, or a "
                                   f"line end is missing)", line=data.count(b"\r" if cr_only else b"\n", 0, pos) + 1)


def split_head(data: bytes, max_lines: int = HEAD_LINES, max_bytes: int = HEAD_BYTES) -> list[tuple[int, str]]:
    """(byte offset, decoded text) of the complete lines in the head of ``data``."""
    head = data[:max_bytes]
    lines: list[tuple[int, str]] = []
    start = 0
    for m in _LINE_END.finditer(head):
        lines.append((start, decode_line(head[start:m.start()])))
        start = m.end()
        if len(lines) >= max_lines:
            return lines
    if start < len(head) and len(data) <= max_bytes:  # the last line, when it is not cut off
        lines.append((start, decode_line(head[start:])))
    return lines


_QUOTED_OR_BARE = re.compile(r'"[^"]*"|\S+')


def split_fields(text: str, delimiter: str) -> list[str]:
    """The cells of a line; a quoted cell may hold the delimiter (``"Time, s"``), and blanks after a
    delimiter before a quote are skipped."""
    if delimiter != " ":
        if '"' not in text:
            return text.split(delimiter)
        if text.count('"') % 2:  # an unbalanced quote: not a quoted line, split as written
            return text.split(delimiter)
        return next(csv.reader([text], delimiter=delimiter, skipinitialspace=True))
    tokens: list[str] = []
    for tok in (_QUOTED_OR_BARE.findall(text) if '"' in text else text.split()):
        # "Time (s)" stays one header cell; a units row "(s) (V)" stays two
        if tokens and tok[0] in "[(" and tokens[-1][0] not in "[(" and not NUMBER_ANY.match(tok):
            tokens[-1] += " " + tok
        else:
            tokens.append(tok)
    return tokens


def sniff(data: bytes, path: str) -> TextLayout:
    """Find delimiter, decimal mark, preamble, header and units of a text export (already decoded
    from gzip and with any byte-order mark removed)."""
    if _NON_BLANK.search(data) is None:
        raise InputError(path, "empty file")
    nul = data.find(b"\x00", 0, HEAD_BYTES)
    if nul >= 0:
        line = data.count(b"\n", 0, nul) + 1
        raise InputError(path, "binary data (NUL byte), not a text export", line=line)
    lines = split_head(data)
    best = _best_table(lines)
    limit = HEAD_LINES
    while best is None and len(lines) == limit < LONG_HEAD_LINES:
        # A preamble longer than the usual head: look further, in steps, before giving up.
        limit *= 4
        lines = split_head(data, max_lines=limit, max_bytes=LONG_HEAD_BYTES)
        best = _best_table(lines)
    if best is None:
        raise _no_table(path, lines, data[:HEAD_BYTES])
    delimiter, rows, where = best
    if where.n_columns > MAX_COLUMNS:
        raise InputError(path, f"{where.n_columns} columns; at most {MAX_COLUMNS} are read (split the export)",
                         line=(where.header if where.header is not None else where.data) + 1)
    names, units, warnings = column_names_and_units(rows, where)
    body_offset = lines[where.data][0]
    pairs, notes = parse_preamble([text for k, (_, text) in enumerate(lines[:where.data])
                                   if k not in (where.header, where.units)], delimiter)
    for k in where.side_rows:  # key/value cells beside the data rows
        side_pairs, side_notes = parse_preamble([delimiter.join(rows[k][:where.skip])], delimiter)
        pairs.update(side_pairs)
        notes += side_notes
    pairs.update(where.extras)
    body = [rows[k] for k in range(where.data, len(rows)) if len(rows[k]) == where.n_fields]
    quoted = any('"' in text for _, text in lines[where.data:])
    decimal = "." if delimiter == "," and not quoted else _decimal_mark(data, body_offset, body, delimiter)
    columns = [k for k in range(where.skip, where.n_columns) if k not in where.text_columns]
    names, units = [names[k] for k in columns], [units[k] for k in columns]
    if where.text_columns:
        head = rows[where.header] if where.header is not None else []
        text = [split_name_unit(head[k])[0] if k < len(head) and clean_cell(head[k]) else f"column{k + 1}"
                for k in where.text_columns]
        warnings.append(f"column{'s' if len(text) > 1 else ''} {', '.join(map(repr, text))} "
                        f"hold{'' if len(text) > 1 else 's'} text, not samples: not read")
    stamps = _stamp_columns(body, columns, names, units)
    padded = quoted and delimiter != " " and any(_PADDED_QUOTE[delimiter].search(text)
                                                 for _, text in lines[where.data:])
    return TextLayout(
        delimiter=delimiter, decimal=decimal, names=tuple(names), units=tuple(units),
        header_line=None if where.header is None else where.header + 1,
        first_data_line=where.data + 1, body_offset=body_offset, n_fields=where.n_fields,
        preamble=pairs, notes=tuple(notes), columns=tuple(columns), stamps=stamps, padded_quotes=padded,
        warnings=tuple(warnings))


# Blanks between a delimiter and an opening quote, or a closing quote and a delimiter or the line end.
_PADDED_QUOTE = {d: re.compile(rf'{re.escape(d)} +"|" +(?:{re.escape(d)}|$)') for d in DELIMITERS if d != " "}


def _stamp_columns(body: list[list[str]], columns: list[int], names: list[str],
                   units: list[str | None]) -> tuple[tuple[int, int | None], ...]:
    """The time-stamp columns among the data columns (lists edited in place): a date column followed
    by a time-of-day column becomes one, named by both headers; every stamp column is in seconds."""
    found: list[tuple[int, int | None]] = []
    p = 0
    while p < len(columns):
        if body and NUMBER_ANY.match(clean_cell(body[0][columns[p]])):  # a number column (the usual case)
            p += 1
            continue
        kind = stamp_kind([clean_cell(r[columns[p]]) for r in body])
        if kind == "date" and p + 1 < len(columns):
            if stamp_kind([clean_cell(r[columns[p + 1]]) for r in body]) == "clock":
                found.append((columns[p], columns.pop(p + 1)))
                second = names.pop(p + 1)
                units.pop(p + 1)
                names[p] = f"{names[p]} {second}" if not re.fullmatch(r"column\d+", second) else names[p]
                units[p] = "s"
        elif kind in ("datetime", "clock"):
            found.append((columns[p], None))
            units[p] = "s"
        p += 1
    return tuple(found)


def _best_table(lines: list[tuple[int, str]]) -> tuple[str, list[list[str]], TablePosition] | None:
    """The delimiter whose reading of the head gives the best table: a header, most data rows, most
    columns (leaving text columns out only when no reading finds a table without)."""
    best = None
    split = {d: [split_fields(text, d) for _, text in lines] for d in DELIMITERS}
    for text_columns in (False, True):  # text columns are looked for only when no reading finds a table
        for rank, delimiter in enumerate(DELIMITERS):
            rows = split[delimiter]
            where = locate_table(rows, VALUE_ANY, text_columns=text_columns)  # a comma in a cell was quoted
            if where is None:
                continue
            score = (where.header is not None, where.n_good, where.n_columns, -rank)
            if best is None or score > best[0]:
                best = (score, delimiter, rows, where)
        if best is not None:
            break
    return None if best is None else best[1:]


def _decimal_mark(data: bytes, body_offset: int, sample: list[list[str]], delimiter: str) -> str:
    """The majority mark of the head's numbers (the parser then names the first cell written the other
    way); in a comma-delimited file a decimal comma can only stand in quoted cells ("0,5")."""
    cells = [c for row in sample for c in row if NUMBER_ANY.match(clean_cell(c))]
    dots, commas = sum("." in c for c in cells), sum("," in c for c in cells)
    if dots or commas or delimiter == ",":
        return "," if commas > dots else "."
    # Only integers in the head (a supply still at 0): the rest of the body decides.
    return "," if data.find(b",", body_offset) >= 0 else "."


_ODD_BYTES = bytes(b for b in range(256) if b >= 0x80 or (b < 0x20 and b not in b"\t\n\r\x0c"))


def _not_text(head: bytes) -> bool:
    """Not UTF-8, and mostly bytes that Western text rarely holds (high or control): EBCDIC, binary."""
    try:
        head.decode("utf-8")
        return False
    except UnicodeDecodeError as exc:
        if exc.start >= len(head) - 3:  # a character cut at the end of the head
            return False
    plain = head.translate(None, _ODD_BYTES)
    return len(head) - len(plain) > 0.3 * len(head)


def _no_table(path: str, lines: list[tuple[int, str]], head: bytes) -> InputError:
    """Say why no table was found: not text, nothing there, a header without data, text only, or no clean rows."""
    if _not_text(head):
        return InputError(path, "not text in a known encoding (UTF-8, UTF-16 with a byte-order mark, "
                                "Windows-1252, Latin-1)")
    numbered = [(k + 1, t) for k, (_, t) in enumerate(lines) if t.strip()]
    if not numbered:
        return InputError(path, "empty file")
    numeric = [k for k, t in numbered if any(_numericish(split_fields(t, d), NUMBER_ANY) for d in DELIMITERS)]
    if not numeric:
        if len(numbered) == 1:
            return InputError(path, "header only, no data rows", line=numbered[0][0])
        return InputError(path, "no data rows: no line holds numbers")
    return InputError(path, "no table: no line of only numbers (separated by comma, semicolon, tab or "
                            "spaces) starts the data", line=numeric[0])
