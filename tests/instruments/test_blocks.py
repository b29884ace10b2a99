"""IEEE 488.2 §8.7.9 arbitrary block response data, fed as byte strings (no socket)."""

import pytest
from hypothesis import given, settings, strategies as st

from instruments.blocks import Block, BlockParser, NeedData, make_block, parse_block
from labtool.errors import BlockError


def test_definite_block_from_the_standard_form():
    # IEEE 488.2 §8.7.9: '#', one digit n, n digits giving the length, then the data bytes.
    assert parse_block(b"#15hello\n") == b"hello"
    assert parse_block(b"#210" + bytes(range(10)) + b"\n") == bytes(range(10))


def test_data_bytes_may_contain_newlines():
    data = b"\n\n\x0a\x00\xff\n"
    assert parse_block(make_block(data)) == data


def test_make_block_uses_smallest_digit_count():
    assert make_block(b"x" * 1000) == b"#41000" + b"x" * 1000 + b"\n"


def test_incremental_feeding_reports_what_is_needed():
    p = BlockParser()
    assert p.feed(b"#") == NeedData(1)
    assert p.feed(b"3") == NeedData(3)
    assert p.feed(b"00") == NeedData(1)
    assert p.feed(b"4") == NeedData(5)  # 4 data bytes + NL terminator
    assert p.feed(b"ab") == NeedData(3)
    ev = p.feed(b"cd\n")
    assert isinstance(ev, Block) and ev.data == b"abcd" and ev.trailer == b"\n" and ev.header == b"#3004"


def test_truncated_body_is_an_error_naming_the_counts():
    with pytest.raises(BlockError, match="received 3 of 10 data bytes"):
        parse_block(b"#210abc")


def test_header_too_short_for_the_data_is_caught_at_the_trailer():
    # Header says 3 bytes but 5 follow: the byte after the announced data is not the terminator.
    with pytest.raises(BlockError, match="length header is too short"):
        parse_block(b"#13abcde\n")


def test_header_too_long_for_the_data_is_truncation():
    # The terminator is taken as data too: the header claims it, so 6 of 9 bytes arrived.
    with pytest.raises(BlockError, match="received 6 of 9 data bytes"):
        parse_block(b"#19abcde\n")


def test_header_length_disagreeing_with_scaling_is_refused_before_reading():
    p = BlockParser(expected_bytes=8)
    with pytest.raises(BlockError, match="announces 6 bytes, but the scaling reply implies 8"):
        p.feed(b"#16")


def test_cap_on_announced_length():
    with pytest.raises(BlockError, match="above the cap"):
        BlockParser(max_bytes=1000).feed(b"#9999999999")


@pytest.mark.parametrize("bad, message", [
    (b"123", "starts with '#'"),
    (b"#x12", "followed by a digit"),
    (b"#3a1b", "not 3 decimal digits"),
])
def test_malformed_headers(bad, message):
    with pytest.raises(BlockError, match=message):
        BlockParser().feed(bad)


def test_truncated_inside_header():
    p = BlockParser()
    p.feed(b"#4")
    with pytest.raises(BlockError, match="inside its header"):
        p.end_of_message()


def test_indefinite_block_refused_by_default():
    # '#0' ends only at NL^END (IEEE 488.2 §8.7.9); a raw socket has no END.
    with pytest.raises(BlockError, match="indefinite-length block"):
        parse_block(b"#0abc\n")


def test_indefinite_block_where_the_transport_marks_end():
    p = BlockParser(allow_indefinite=True)
    assert p.feed(b"#0ab\ncd") == NeedData(1)
    assert p.feed(b"\n") == NeedData(1)
    assert p.end_of_message().data == b"ab\ncd"


def test_no_trailer_when_instrument_sends_none():
    assert parse_block(b"#13abc", trailer=b"") == b"abc"
    with pytest.raises(BlockError, match="no terminator"):
        parse_block(b"#13abc")


def test_bytes_after_the_terminator():
    with pytest.raises(BlockError, match="after the block terminator"):
        parse_block(b"#13abc\nzz")


@settings(max_examples=60, deadline=None)
@given(st.binary(max_size=300), st.integers(1, 17))
def test_round_trip_any_split(data, step):
    # Property (not a reference): any chunking of a valid block gives back the same data.
    wire = make_block(data)
    p = BlockParser(expected_bytes=len(data))
    ev = None
    for i in range(0, len(wire), step):
        ev = p.feed(wire[i:i + step])
    assert isinstance(ev, Block) and ev.data == data
