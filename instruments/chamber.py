"""Temperature chamber role driver: set point, read-back, wait until stable for a soak time.

Never drive a chamber without its own over-temperature limit switch; labtool's tolerance and timeout
are for the measurement, not a safety device.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

from instruments.profile import Profile
from instruments.session import Session
from labtool.errors import InstrumentTimeout


@dataclass(frozen=True)
class SoakResult:
    temperature_c: float
    waited_s: float


class Chamber:
    def __init__(self, session: Session, profile: Profile):
        self.ops = profile.require("chamber")
        self.session = session

    def set_point(self, temperature_c: float) -> None:
        self.ops["set_point"].run(self.session, temperature_c=temperature_c)

    def temperature(self) -> float:
        return self.ops["read_temperature"].run(self.session)

    def settle(self, temperature_c: float, *, tolerance_c: float, soak_s: float, timeout_s: float,
               poll_s: float = 0.05) -> SoakResult:
        """Set the point, then wait until every reading stays within ±tolerance for ``soak_s``."""
        self.set_point(temperature_c)
        start = time.monotonic()
        inside_since = None
        reading = math.nan
        while True:
            reading = self.temperature()
            now = time.monotonic()
            if abs(reading - temperature_c) <= tolerance_c:
                inside_since = inside_since if inside_since is not None else now
                if now - inside_since >= soak_s:
                    return SoakResult(reading, now - start)
            else:
                inside_since = None
            if now - start > timeout_s:
                raise InstrumentTimeout(
                    f"{self.session.name}: chamber did not hold {temperature_c:g} ±{tolerance_c:g} °C for "
                    f"{soak_s:g} s within {timeout_s:g} s (last reading {reading:.2f} °C)")
            time.sleep(poll_s)
