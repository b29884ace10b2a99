"""What a user tells the importers beyond the file itself."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

from labtool.capture import Conditions


@dataclass(frozen=True)
class IngestOptions:
    """Shared options of every importer.

    ``manifest`` maps a file (relative path or base name, as a run sheet writes it) to its conditions,
    as loaded by :func:`labtool.ingest.conditions.load_manifest`. ``supply``, ``output``, ``enable`` and
    ``supply_current`` name columns explicitly; unset ones are recognised by name or waveform. Conditions are
    layered, later wins: the file's own (preamble, conditions sheet), the name pattern, the manifest,
    ``extra_conditions``.
    """

    name_pattern: str | None = None
    manifest: Mapping[str, dict] | None = None
    supply: str | None = None
    output: str | None = None
    enable: str | None = None
    supply_current: str | None = None
    extra_conditions: Conditions | None = None
    pair_channels: str | None = "auto"  # "auto", "off" or a channel-token expression (labtool.ingest.pairing)
    supply_valid_at_s: float | None = None  # output-only captures: when the supply became valid
    update_conditions: bool = False  # a stored file under new conditions: update them, not a new version

    def picks(self) -> dict[str, str]:
        """Explicit column picks by role."""
        chosen = {"supply": self.supply, "output": self.output, "enable": self.enable,
                  "supply_current": self.supply_current}
        return {role: name for role, name in chosen.items() if name}
