"""Programmable supply (and source-measure unit) role driver.

Safety: the driver refuses a profile without current-limit and over-voltage-protection operations,
programs both before the voltage, and refuses an over-voltage limit below the set voltage.
"""

from __future__ import annotations

from instruments.profile import Profile
from instruments.scope import RawTrace, read_trace
from instruments.session import Session
from labtool.errors import InstrumentError, PlanError


class Supply:
    def __init__(self, session: Session, profile: Profile, channel: int = 1):
        self.ops = profile.require("supply")
        self.session = session
        self.profile = profile
        self.channel = channel

    def configure(self, *, voltage_v: float, current_limit_a: float, ovp_v: float, ramp_s: float) -> None:
        if not ovp_v >= voltage_v:
            raise PlanError(f"over-voltage protection {ovp_v:g} V is below the set voltage {voltage_v:g} V")
        if not current_limit_a > 0:
            raise PlanError(f"current limit {current_limit_a!r} A must be positive")
        setup = dict(channel=self.channel, voltage_v=voltage_v, current_a=current_limit_a, ovp_v=ovp_v,
                     ramp_s=ramp_s)
        for name in ("set_ovp", "set_current_limit", "set_ramp_time", "set_voltage"):  # limits before the voltage
            self.ops[name].run(self.session, **setup)

    def select_part(self, slot: int) -> None:
        op = self.profile.operation("supply", "select_part")
        if op is None:
            raise InstrumentError(f"{self.profile.path}: no [supply.select_part] operation to route slot {slot}")
        op.run(self.session, slot=slot, channel=self.channel)

    @property
    def can_select_part(self) -> bool:
        return self.profile.operation("supply", "select_part") is not None

    def on(self) -> None:
        self.ops["output_on"].run(self.session, channel=self.channel)

    def off(self) -> bool | None:
        """Switch the output off; True when the instrument confirms it is off (None if it cannot say)."""
        self.ops["output_off"].run(self.session, channel=self.channel)
        state = self.profile.operation("supply", "output_state")
        if state is None:
            return None
        return not state.run(self.session, channel=self.channel)

    @property
    def can_confirm_off(self) -> bool:
        return self.profile.operation("supply", "output_state") is not None


class SourceMeasureUnit(Supply):
    """A supply that also records its output current as a trace (role supply_current)."""

    def __init__(self, session: Session, profile: Profile, channel: int = 1):
        super().__init__(session, profile, channel)
        self.smu_ops = profile.require("smu")

    def read_current(self, *, deadline_s: float | None = None) -> RawTrace:
        return read_trace(self.session, self.profile, self.smu_ops["read_current_scaling"],
                          self.smu_ops["read_current_data"], what="current trace", deadline_s=deadline_s,
                          channel=self.channel)
