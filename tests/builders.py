"""Small builders of captures for tests (invented data, not a reference)."""

from __future__ import annotations

import numpy as np

from labtool.capture import Capture, Channel, Conditions, Provenance, TimeBase, sha256_bytes


def make_capture(supply: np.ndarray, output: np.ndarray, dt_s: float, *, t0_s: float = 0.0,
                 conditions: Conditions | None = None, source: str = "synthetic.csv", locator: str = "",
                 extra: dict[str, np.ndarray] | None = None) -> Capture:
    """A capture whose identity is the hash of its own samples (so equal data gives an equal id)."""
    supply = np.asarray(supply, dtype=np.float64)
    output = np.asarray(output, dtype=np.float64)
    channels = [Channel("vdd", "V", "supply", supply), Channel("vref", "V", "output", output)]
    for name, values in (extra or {}).items():
        channels.append(Channel(name, "A" if name.startswith("i") else "V",
                                "supply_current" if name.startswith("i") else "other", np.asarray(values, float)))
    digest = sha256_bytes(supply.tobytes() + output.tobytes() + repr((dt_s, t0_s)).encode())
    return Capture(time=TimeBase(n=supply.size, t0_s=t0_s, dt_s=dt_s), channels=tuple(channels),
                   conditions=conditions or Conditions(),
                   provenance=Provenance(source_path=source, sha256=digest, importer="test",
                                         imported_at="2026-01-01T00:00:00Z", locator=locator))
