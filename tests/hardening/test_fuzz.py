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


def test_the_fuzz_checks_are_live(monkeypatch):
    """A defect would be caught: an exception other than InputError escapes, a split-dependent answer fails."""
    import pytest

    from instruments.blocks import make_block
    from tests.hardening import fuzz_targets
    from tests.hardening.files import GOOD

    assert check_csv(GOOD) == "ok" and check_csv(b"") == "input error"
    assert check_block(make_block(b"abc"), [2], {}) == "block"
    monkeypatch.setattr(fuzz_targets, "read_csv", lambda *args: {}["a defect"])
    with pytest.raises(KeyError):
        fuzz_targets.check_csv(GOOD)
    monkeypatch.setattr(fuzz_targets, "chunked", lambda *args: ("error", "split-dependent"))
    with pytest.raises(AssertionError):
        fuzz_targets.check_block(make_block(b"abc"), [2], {})
