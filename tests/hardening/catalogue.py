"""The catalogue of broken files, for every importer (CSV, gzip CSV, XLSX), each with its one message.

Invented fixtures, each broken in one way (stating a property: every class gets one clear line). A
case is (file name, bytes, the message after the file name). tests/ingest/test_bad_input.py holds
the importer's own exact-message cases; this catalogue adds the hostile and oversized classes and
runs every class through ``labtool ingest`` for each importer.
"""

from __future__ import annotations

import gzip
import io
import zipfile
from dataclasses import dataclass

import numpy as np

from labtool.ingest.sniff import MAX_COLUMNS, MAX_DECOMPRESSED_BYTES, MAX_LINE_BYTES
from tests.hardening.files import GOOD, HEADER, ROWS, SHEET, replace_member, sheet_xml, workbook



@dataclass(frozen=True)
class Case:
    kind: str  # the class of breakage
    name: str  # file name
    data: bytes
    tail: str  # the message after the file name: ":3 [vdd]: 'abc' is not a number"

    @property
    def message(self) -> str:
        return self.name + self.tail


def _junk(n: int, seed: int) -> bytes:
    """Random bytes without NUL and without line ends (so it is junk, not a NUL-byte or a line case)."""
    raw = np.random.default_rng(seed).integers(0, 256, n, dtype=np.uint8).tobytes()
    return raw.translate(bytes.maketrans(b"\x00\n\r", b"\x01\x02\x03"))


def _wide(n_columns: int) -> bytes:
    header = "time,vdd,vref," + ",".join(f"ch{k}" for k in range(n_columns - 3))
    rows = [",".join(["0"] * n_columns), ",".join(["1e-6"] * n_columns)]
    return ("\n".join([header, *rows]) + "\n").encode()


# -- delimited text (plain and gzip) -------------------------------------------------------------
TEXT = [
    Case("empty", "empty.csv", b"", ": empty file"),
    Case("header only", "header.csv", b"time [s],vdd [V],vref [V]\r\n", ":1: header only, no data rows"),
    Case("truncated mid-line", "cut.csv", GOOD[:-9],
         ":5: 1 field, expected 3 (line cut short or extra delimiter)"),
    Case("binary junk", "junk.csv", _junk(4096, 1),
         ": not text in a known encoding (UTF-8, UTF-16 with a byte-order mark, Windows-1252, Latin-1)"),
    Case("NUL bytes", "nul.csv", GOOD[:20] + b"\x00\x00" + GOOD[20:],
         ":3: binary data (NUL byte), not a text export"),
    Case("text in numeric column", "text.csv", b"time,vdd,vref\n0,0,0\n1e-6,=1+1,0.1\n2e-6,1.8,1.2\n",
         ":3 [vdd]: '=1+1' is not a number"),
    Case("one column", "one_column.csv", b"time\n0\n1e-6\n2e-6\n",
         ":1: no supply column recognised (columns: time); name it with --supply NAME"),
    Case("all NaN", "all_nan.csv", b"time,vdd,vref\n0,0,NaN\n1e-6,0.9,nan\n2e-6,1.8,\n",
         ":1 [vref]: column 'vref' (output) holds no valid values"),
    Case("time not increasing", "backwards.csv", b"time,vdd,vref\n0,0,0\n2e-6,0.9,0\n1e-6,1.8,1.2\n",
         ":4 [time]: time does not increase (1e-06 s after 2e-06 s)"),
    Case("absurd magnitude", "absurd.csv", b"time,vdd,vref\n0,0,0\n1e-6,0.9,3e12\n2e-6,1.8,1.2\n",
         ":3 [vref]: 3e+12 V is beyond the plausible ±1e+06 V (a wrong unit or a corrupt file)"),
    Case("absurd time", "absurd_time.csv", b"time,vdd,vref\n0,0,0\n1e-6,0.9,0.1\n1e20,1.8,1.2\n",
         ":4 [time]: 1e+20 s is beyond the plausible ±1e+10 s (a wrong unit or a corrupt file)"),
    Case("unknown encoding (UTF-32)", "utf32.csv", GOOD.decode().encode("utf-32"),
         ": UTF-32 text: save the export as UTF-8 (or UTF-16 with a byte-order mark)"),
    Case("unknown encoding (EBCDIC)", "ebcdic.csv", GOOD.decode().encode("cp500"),
         ": not text in a known encoding (UTF-8, UTF-16 with a byte-order mark, Windows-1252, Latin-1)"),
    Case("thousands of columns", "wide.csv", _wide(MAX_COLUMNS + 1),
         f":1: {MAX_COLUMNS + 1} columns; at most {MAX_COLUMNS} are read (split the export)"),
    Case("multi-megabyte line (head)", "long_head.csv", b"time,vdd,vref\n0,0," + b"7" * (3 << 20) + b"\n1e-6,1,1\n",
         f":2: line longer than {MAX_LINE_BYTES // 1024} KiB (not a capture export, or a line end is missing)"),
    Case("multi-megabyte line (body)", "long_body.csv",
         GOOD + b"".join(b"%d,1.8,1.2\n" % k for k in range(4, 3000)) + b"1,1.8," + b"7" * (3 << 20) + b"\n",
         f":3002: line longer than {MAX_LINE_BYTES // 1024} KiB (not a capture export, or a line end is missing)"),
    Case("multi-megabyte cell text", "long_cell.csv", b"time,vdd,vref\n0,0,0\n1e-6,0.9," + b"x" * (200 << 10) + b"\n",
         ":3 [vref]: 'xxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxx… (204800 characters)' is not a number"),
]


def gzip_cases() -> list[Case]:
    """The text cases compressed, and what only gzip can break (line numbers are of the decompressed text)."""
    cases = [Case(c.kind, c.name + ".gz", gzip.compress(c.data, mtime=0), c.tail) for c in TEXT if c.kind != "empty"]
    whole = gzip.compress(GOOD * 400, mtime=0)
    one_mib = gzip.compress(b"\0" * (1 << 20), compresslevel=9, mtime=0)
    members = MAX_DECOMPRESSED_BYTES // (1 << 20) + 1
    flipped = bytearray(whole)
    flipped[len(flipped) // 2] ^= 0xFF
    cases += [
        Case("empty (zero bytes)", "empty.csv.gz", b"", ": empty file"),
        Case("empty (compressed nothing)", "nothing.csv.gz", gzip.compress(b"", mtime=0), ": empty file"),
        Case("corrupt gzip (truncated)", "half.csv.gz", whole[:len(whole) // 2],
             ": corrupt gzip data: Compressed file ended before the end-of-stream marker was reached"),
        Case("corrupt gzip (flipped byte)", "flipped.csv.gz", bytes(flipped), ": corrupt gzip data: "),
        Case("corrupt gzip (bad header)", "badheader.csv.gz", b"\x1f\x8b\x09" + whole[3:], ": corrupt gzip data: "),
        Case("gzip bomb", "bomb.csv.gz", one_mib * members,
             f": decompresses to more than {MAX_DECOMPRESSED_BYTES >> 20} MiB (split the export)"),
    ]
    return cases


# -- workbooks ------------------------------------------------------------------------------------
def _spaces(fh, total: int) -> None:
    fh.write(sheet_xml("")[:-len(b"</sheetData></worksheet>")])
    chunk = b" " * (1 << 20)
    for _ in range(total // len(chunk) + 1):
        fh.write(chunk)
    fh.write(b"</sheetData></worksheet>")


def xlsx_cases() -> list[Case]:
    good = workbook([HEADER, *ROWS])
    laughs = ('<?xml version="1.0"?><!DOCTYPE lolz [<!ENTITY lol "lol">'
              + "".join(f'<!ENTITY lol{k} "{("&lol%s;" % (k - 1 if k > 1 else "")) * 10}">' for k in range(1, 10))
              + "]>")
    no_cap = MAX_DECOMPRESSED_BYTES >> 20
    return [
        Case("empty", "empty.xlsx", b"", ": empty file"),
        Case("empty sheet", "blank.xlsx", workbook([]),
             ": no sheet holds a capture table (a header row above columns of numbers)"),
        Case("header only", "header.xlsx", workbook([HEADER]),
             ": no sheet holds a capture table (a header row above columns of numbers)"),
        Case("truncated file", "cut.xlsx", good[:len(good) // 2],
             ": not a readable XLSX workbook (BadZipFile: File is not a zip file)"),
        Case("binary junk", "junk.xlsx", _junk(4096, 2), ": named like an XLSX workbook but is not one (no zip signature)"),
        Case("not a zip (CSV renamed)", "renamed.xlsx", GOOD,
             ": named like an XLSX workbook but is not one (no zip signature)"),
        Case("zip without a workbook", "other.xlsx", _zip({"readme.txt": b"hello"}),
             ": not a readable XLSX workbook (KeyError: \"There is no item named '[Content_Types].xml' in the archive\")"),
        Case("NUL bytes in the sheet XML", "nul.xlsx",
             replace_member(good, SHEET, sheet_xml('<row r="1"><c r="A1"><v>0\x00</v></c></row>')),
             ": not a readable XLSX workbook (ParseError: not well-formed (invalid token): line 1, column 137)"),
        Case("text in numeric column", "text.xlsx", workbook([HEADER, ROWS[0], (1e-6, "1,5 V", 0.1), *ROWS[2:]]),
             " [run!B3]: '1,5 V' is not a number"),
        Case("one column", "one_column.xlsx", workbook([("time",), (0.0,), (1e-6,), (2e-6,)]),
             " [run!A1]: no supply column recognised (columns: time); name it with --supply NAME"),
        Case("all NaN", "all_nan.xlsx", workbook([HEADER, *[(t, v, None) for t, v, _ in ROWS]]),
             " [run!C1]: column 'vref' (output) holds no valid values"),
        Case("time not increasing", "backwards.xlsx", workbook([HEADER, ROWS[0], ROWS[2], ROWS[1], ROWS[3]]),
             " [run!A4]: time does not increase (1e-06 s after 2e-06 s)"),
        Case("absurd magnitude", "absurd.xlsx", workbook([HEADER, ROWS[0], (1e-6, 0.9, 3e12), *ROWS[2:]]),
             " [run!C3]: 3e+12 V is beyond the plausible ±1e+06 V (a wrong unit or a corrupt file)"),
        Case("unknown encoding", "encoding.xlsx",
             replace_member(good, SHEET, sheet_xml("", prolog='<?xml version="1.0" encoding="x-unknown-9"?>')),
             ": not a readable XLSX workbook (LookupError: unknown encoding: x-unknown-9)"),
        Case("entity expansion (billion laughs)", "laughs.xlsx",
             replace_member(good, SHEET, sheet_xml('<row r="1"><c r="A1" t="inlineStr"><is><t>&lol9;</t></is></c></row>',
                                                   prolog=laughs)),
             ": not a readable XLSX workbook (XML entity declarations are refused: a possible entity-expansion attack)"),
        Case("zip bomb", "bomb.xlsx", replace_member(good, SHEET, writer=lambda fh: _spaces(fh, MAX_DECOMPRESSED_BYTES)),
             f": workbook decompresses to more than {no_cap} MiB (refused unread)"),
        Case("huge sheet (declared)", "huge.xlsx",
             replace_member(good, SHEET, sheet_xml('<row r="1048576"><c r="XFD1048576"><v>1</v></c></row>',
                                                   dimension="A1:XFD1048576")),
             " [run]: sheet is 16384 columns wide; at most 1024 are read (split the export)"),
        Case("thousands of columns", "wide.xlsx",
             workbook([("time", "vdd", "vref", *[f"ch{k}" for k in range(MAX_COLUMNS - 2)]),
                       tuple([0.0] * (MAX_COLUMNS + 1)), tuple([1e-6] * (MAX_COLUMNS + 1))]),
             f" [run]: sheet is {MAX_COLUMNS + 1} columns wide; at most {MAX_COLUMNS} are read (split the export)"),
        Case("multi-megabyte cell text", "long_cell.xlsx", workbook([HEADER, ROWS[0], (1e-6, 0.9, "x" * 32000), *ROWS[2:]]),
             " [run!C3]: 'xxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxx… (32000 characters)' is not a number"),
    ]


def _zip(members: dict[str, bytes]) -> bytes:
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as z:
        for name, data in members.items():
            z.writestr(name, data)
    return out.getvalue()


# Odd file names: each holds a bad table, so the message must name the file exactly as given.
ODD_NAMES = ["with space.csv", "µ-Ωhm 25°C ZR24A.csv", "-leading-dash.csv", "--into.csv",
             "x" * 200 + ".csv", "semi;colon,comma.csv", "quote'and\"double.csv", "tab\tname.csv",
             "new\nline.csv"]
ODD_TAIL = ":3 [vdd]: 'abc' is not a number"
ODD_DATA = b"time,vdd,vref\n0,0,0\n1e-6,abc,0\n2e-6,1.8,1.2\n"

