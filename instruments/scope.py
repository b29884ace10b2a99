"""Oscilloscope / digitiser role driver: configure, arm one acquisition, read traces with preambles."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from instruments.profile import Operation, Profile
from instruments.session import Session
from instruments.waveform import Preamble, decode, sample_width


@dataclass(frozen=True)
class RawTrace:
    """One trace as it came off the wire (kept for provenance) and decoded to SI."""

    preamble_text: str
    preamble: Preamble
    data: bytes
    values: np.ndarray
    clipped: np.ndarray


def read_trace(session: Session, profile: Profile, preamble_op: Operation, data_op: Operation, *,
               what: str, deadline_s: float | None = None, **params) -> RawTrace:
    """Query the preamble, then read the block with its length checked against points × width."""
    text = preamble_op.render(params)
    reply = session.query(text)
    preamble = Preamble.from_fields(preamble_op.parse(reply), what=f"{session.name} {what} preamble")
    block = session.read_block(data_op.render(params),
                               expected_bytes=preamble.points * sample_width(data_op.format),
                               max_bytes=profile.transport.block_max_bytes, deadline_s=deadline_s,
                               trailer=profile.transport.block_trailer.encode())
    session.check_errors(data_op.render(params))
    values, clipped = decode(block.data, data_op.format, preamble, what=f"{session.name} {what}")
    return RawTrace(reply.strip(), preamble, block.data, values, clipped)


class Scope:
    def __init__(self, session: Session, profile: Profile):
        self.ops = profile.require("scope")
        self.session = session
        self.profile = profile

    def configure(self, *, channels: dict[int, tuple[float, float]], record_s: float, points: int,
                  pretrigger_s: float, trigger_channel: int, trigger_level_v: float) -> None:
        """``channels``: channel → (span_v, offset_v)."""
        for ch, (span_v, offset_v) in channels.items():
            self.ops["configure_channel"].run(self.session, channel=ch, span_v=span_v, offset_v=offset_v)
        self.ops["configure_format"].run(self.session)
        self.ops["configure_timebase"].run(self.session, record_s=record_s, points=points, pretrigger_s=pretrigger_s)
        self.ops["configure_trigger"].run(self.session, channel=trigger_channel, level_v=trigger_level_v)

    def arm(self) -> None:
        self.ops["arm_single"].run(self.session)

    def wait_complete(self) -> None:
        self.ops["wait_complete"].run(self.session)

    def read(self, channel: int, *, deadline_s: float | None = None) -> RawTrace:
        return read_trace(self.session, self.profile, self.ops["read_preamble"], self.ops["read_data"],
                          what=f"channel {channel}", deadline_s=deadline_s, channel=channel)
