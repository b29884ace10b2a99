"""What the fuzz tests feed and what they check, shared by the suite (few examples) and ``make fuzz``
(tests/fuzz_long.py, many examples).

CSV importer: any bytes, or a valid export mutated, through the sniffer and parser (``read_csv``, not
``read_path``, whose catch-all would hide a defect): only InputError may come out, and what is read
has a strictly increasing, finite time base. IEEE 488.2 block parser (instruments/blocks.py): any
byte string gives a block or BlockError, and how the bytes are split across reads never changes it.
Inputs are generated (stating properties, not references).
"""

from __future__ import annotations

import gzip

import numpy as np
from hypothesis import strategies as st

from instruments.blocks import Block, BlockParser, make_block, parse_block
from labtool.errors import BlockError, InputError
from labtool.ingest.csv_reader import read_csv
from labtool.ingest.options import IngestOptions
from tests.ingest.writers import Shape, render

# -- CSV ------------------------------------------------------------------------------------------
TOKENS = [b",", b";", b"\t", b" ", b"\n", b"\r\n", b"\r", b'"', b"nan", b"NaN", b"9.91E37", b"-9.9E37", b"1e999",
          b"-", b"+", b"e", b"E5", b".", b",5", b"0x1F", b"\xef\xbb\xbf", b"\xff\xfe", b"\xc2\xb5s", b"(mV)",
          b"[s]", b"time", b"vdd", b"vref", b"Sample Interval,", b"# lot: ", b"\x00", b"\x1f\x8b", b"=", b":"]


@st.composite
def valid_exports(draw) -> bytes:
    delimiter = draw(st.sampled_from([",", ";", "\t", " "]))
    shape = Shape(delimiter=delimiter, decimal=draw(st.sampled_from(".,")) if delimiter != "," else ".",
                  units=draw(st.sampled_from(["brackets", "parens", "row", "slash", "suffix", "none"])),
                  preamble=tuple(draw(st.lists(st.sampled_from(["Model,ZR-4410", "# lot: ZR24A",
                                                                "Sample Interval,1e-6", "Record Length,5"]),
                                               max_size=3))),
                  crlf=draw(st.booleans()), bom=draw(st.booleans()), gzip=False,
                  trailing_delimiter=delimiter != " " and draw(st.booleans()))
    n = draw(st.integers(2, 12))
    values = st.floats(-1e3, 1e3, allow_nan=False, allow_subnormal=False)
    t = np.cumsum([draw(st.floats(1e-9, 1.0)) for _ in range(n)])
    return render(shape, t, [np.array([draw(values) for _ in range(n)]) for _ in shape.columns])


@st.composite
def mutated_exports(draw) -> bytes:
    data = bytearray(draw(valid_exports()))
    for _ in range(draw(st.integers(1, 6))):
        at = draw(st.integers(0, len(data)))
        how = draw(st.sampled_from(["insert", "delete", "replace", "cut", "token"]))
        if how == "insert":
            data[at:at] = draw(st.binary(min_size=1, max_size=4))
        elif how == "delete":
            del data[at:at + draw(st.integers(1, 8))]
        elif how == "replace" and at < len(data):
            data[at] = draw(st.integers(0, 255))
        elif how == "cut":
            del data[at:]
        else:
            data[at:at] = draw(st.sampled_from(TOKENS))
    out = bytes(data)
    return gzip.compress(out, mtime=0) if draw(st.booleans()) and draw(st.booleans()) else out


csv_inputs = st.one_of(st.binary(max_size=400), mutated_exports(), valid_exports(),
                       st.lists(st.sampled_from(TOKENS), max_size=40).map(b"".join))


def check_csv(data: bytes) -> str:
    """Read ``data`` as a CSV export: "ok" or "input error"; any other exception propagates (a defect)."""
    try:
        (capture,) = read_csv("fuzz.csv", data, IngestOptions())
    except InputError as exc:
        assert str(exc).startswith("fuzz.csv") and "\n" not in str(exc), str(exc)
        return "input error"
    t = capture.time.array()
    assert capture.time.n >= 2 and np.all(np.isfinite(t)) and np.all(np.diff(t) > 0)
    return "ok"


# -- IEEE 488.2 blocks ----------------------------------------------------------------------------
@st.composite
def block_wires(draw) -> bytes:
    kind = draw(st.sampled_from(["random", "valid", "mutated", "header"]))
    if kind == "random":
        return draw(st.binary(max_size=64))
    if kind == "header":  # '#', a digit, digits or not, a little data
        digit = draw(st.sampled_from(b"0123456789x"))
        return b"#" + bytes([digit]) + draw(st.binary(max_size=12)) + draw(st.sampled_from([b"", b"\n", b"\r\n"]))
    wire = bytearray(make_block(draw(st.binary(max_size=40)), trailer=draw(st.sampled_from([b"\n", b""]))))
    if kind == "mutated":
        for _ in range(draw(st.integers(1, 3))):
            at = draw(st.integers(0, len(wire)))
            how = draw(st.sampled_from(["insert", "delete", "cut", "flip"]))
            if how == "insert":
                wire[at:at] = draw(st.binary(min_size=1, max_size=3))
            elif how == "delete":
                del wire[at:at + 1]
            elif how == "cut":
                del wire[at:]
            elif at < len(wire):
                wire[at] ^= draw(st.integers(1, 255))
    return bytes(wire)


block_options = st.fixed_dictionaries({}, optional={
    "expected_bytes": st.integers(0, 50), "max_bytes": st.integers(0, 64), "allow_indefinite": st.booleans(),
    "trailer": st.sampled_from([b"\n", b"", b"\r\n"])})


def one_shot(wire: bytes, options: dict):
    try:
        return ("block", parse_block(wire, **options))
    except BlockError as exc:
        return ("error", str(exc))


def chunked(wire: bytes, cuts: list[int], options: dict):
    """The same message read in pieces, ending as ``parse_block`` ends a message."""
    parser = BlockParser(**options)
    bounds = [0, *sorted(c % (len(wire) + 1) for c in cuts), len(wire)]
    try:
        event = None
        for a, b in zip(bounds, bounds[1:]):
            if b > a or event is None:
                event = parser.feed(wire[a:b])
        if isinstance(event, Block):
            return ("block", event.data)
        if parser.trailer and parser.announced_bytes is not None and parser.received_bytes == parser.announced_bytes:
            raise BlockError("block has no terminator after its data")
        return ("block", parser.end_of_message().data)
    except BlockError as exc:
        return ("error", str(exc))


def check_block(wire: bytes, cuts: list[int], options: dict) -> str:
    """The same outcome (the same data, or an error) whole and in pieces. An error's wording may quote
    the bytes seen so far, which depends on the split, so only its kind is compared."""
    whole = one_shot(wire, options)
    pieces = chunked(wire, cuts, options)
    assert pieces[0] == whole[0], (whole, pieces)
    if whole[0] == "block":
        assert pieces[1] == whole[1]
    if whole[0] == "block" and options.get("expected_bytes") is not None:
        assert len(whole[1]) == options["expected_bytes"]
    return whole[0]
