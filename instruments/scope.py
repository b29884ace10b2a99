"""Oscilloscope / digitiser role driver: configure, arm one acquisition, wait, read traces with scaling."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from instruments.profile import Operation, Profile, WaitOutcome
from instruments.session import Session
from instruments.waveform import Scaling, decode, sample_width


@dataclass(frozen=True)
class RawTrace:
    """One trace as it came off the wire (kept for provenance) and decoded to SI."""

    scaling_text: str
    scaling: Scaling
    data: bytes
    values: np.ndarray
    clipped: np.ndarray


@dataclass(frozen=True)
class ChannelSetup:
    span_v: float  # full-scale span
    offset_v: float  # the voltage at the centre of the span


def read_trace(session: Session, profile: Profile, scaling_op: Operation, data_op: Operation, *,
               what: str, deadline_s: float | None = None, **params) -> RawTrace:
    """Query the scaling, then read the block with its length checked against points × width."""
    text = scaling_op.render(params)
    reply = session.query(text, timeout_s=scaling_op.timeout_s)
    scaling = scaling_op.scaling(reply, params, what=f"{session.name}: {what} scaling ({text!r})")
    command = data_op.render(params)
    block = session.read_block(command, expected_bytes=scaling.points * sample_width(data_op.format),
                               max_bytes=profile.transport.block_max_bytes, deadline_s=deadline_s,
                               trailer=profile.transport.block_trailer.encode())
    session.check_errors(command)
    values, clipped = decode(block.data, data_op.format, scaling, what=f"{session.name}: {what} ({command!r})")
    return RawTrace(reply.strip(), scaling, block.data, values, clipped)


class Scope:
    def __init__(self, session: Session, profile: Profile):
        self.ops = profile.require("scope")
        self.session = session
        self.profile = profile
        self.setup: dict = {}

    def configure(self, *, channels: dict[int, ChannelSetup], record_s: float, points: int, pretrigger_s: float,
                  trigger_channel: int, trigger_level_v: float, ramp_s: float) -> None:
        """Every operation is given the whole setup, so a profile can compute what its instrument wants."""
        self.setup = dict(record_s=record_s, points=points, pretrigger_s=pretrigger_s, level_v=trigger_level_v,
                          trigger_channel=trigger_channel, ramp_s=ramp_s)
        for ch, cfg in channels.items():
            self.ops["configure_channel"].run(self.session, channel=ch, span_v=cfg.span_v, offset_v=cfg.offset_v,
                                              **self.setup)
        self.ops["configure_format"].run(self.session, **self.setup)
        self.ops["configure_timebase"].run(self.session, **self.setup)
        self.ops["configure_trigger"].run(self.session, channel=trigger_channel, **self.setup)

    def arm(self) -> None:
        self.ops["arm_single"].run(self.session, **self.setup)

    def wait_complete(self, *, timeout_s: float | None = None) -> WaitOutcome:
        return self.ops["wait_complete"].wait(self.session, timeout_s=timeout_s, **self.setup)

    def read(self, channel: int, *, deadline_s: float | None = None) -> RawTrace:
        return read_trace(self.session, self.profile, self.ops["read_scaling"], self.ops["read_data"],
                          what=f"channel {channel}", deadline_s=deadline_s, channel=channel)
