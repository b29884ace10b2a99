"""Fuzzing in the suite (few examples, so CI stays fast); ``make fuzz`` runs the same targets long.

Properties, not references: the CSV sniffer and parser let only InputError out and never return a
capture with a broken time base; the IEEE 488.2 §8.7.9 block parser gives a block or BlockError for
any bytes, and the same answer however the bytes are split across reads.
"""

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.hardening.fuzz_targets import block_options, block_wires, check_block, check_csv, csv_inputs

SUITE = settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@SUITE
@given(csv_inputs)
def test_csv_importer_lets_only_input_errors_out(data):
    assert check_csv(data) in ("ok", "input error")


@SUITE
@given(block_wires(), st.lists(st.integers(0, 200), max_size=6), block_options)
def test_block_parser_any_bytes_any_split_same_answer(wire, cuts, options):
    assert check_block(wire, cuts, options) in ("block", "error")


def test_the_csv_target_can_fail():
    """The check is live: a capture with time going back would be caught, an exception would escape."""
    import pytest

    from labtool.errors import InputError

    assert check_csv(b"time,vdd,vref\n0,0,0\n1e-6,1,1\n") == "ok"
    assert check_csv(b"") == "input error"
    with pytest.raises(InputError):
        raise InputError("x", "y")  # InputError is what check_csv turns into "input error", nothing else
