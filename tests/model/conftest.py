"""Shared designs for the model tests (invented values, for stating properties only)."""

from pathlib import Path

import pytest

from labtool.model import Design, load_design

DEMO = Path(__file__).resolve().parents[2] / "sample_runs" / "design.toml"


@pytest.fixture(scope="session")
def demo() -> Design:
    return load_design(DEMO)


@pytest.fixture(scope="session")
def ideal() -> Design:
    """The demo core with no leakage, no offset and an amplifier of (practically) infinite gain, so
    the textbook equations hold exactly."""
    return load_design(DEMO).replace(leak_q1_a=0.0, leak_q2_a=0.0, leak_out_a=0.0, amp_offset_v=0.0,
                                     amp_dc_gain=1e15)
