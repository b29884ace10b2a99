"""Measurement limits: reference levels and the thresholds that decide a verdict.

They come from defaults, a TOML limits file (``--limits FILE``) and command-line flags, in that
order of precedence (flags win). ``key()`` names a set of limits in the store so results measured
with different limits live side by side.

A limits file uses the field names below; seconds and volts may carry SI suffixes::

    supply_ref = "90%"        # or volts: "1.62" / 1.62
    supply_min_v = 1.6
    expect_v = 1.2
    level_tol_pct = 5
    band_pct = 1
    max_delay_s = "500us"
    max_overshoot_pct = 10
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import tomllib
from dataclasses import dataclass
from pathlib import Path

from labtool.errors import InputError, UsageError
from labtool.units import parse_level, parse_quantity

_UNITS = {"supply_min_v": "V", "expect_v": "V", "max_delay_s": "s", "level_tol_pct": "%", "band_pct": "%",
          "max_overshoot_pct": "%"}


@dataclass(frozen=True)
class Limits:
    """Reference levels and verdict thresholds (None: that check is not made).

    Defaults: supply valid at 90 % of its final level (issue #3); settling band ±1 % (issue #3);
    level tolerance ±5 % and overshoot limit 10 % are labtool's defaults (common practice, no source).
    """

    supply_ref: str = "90%"
    supply_min_v: float | None = None
    expect_v: float | None = None
    level_tol_pct: float = 5.0
    band_pct: float = 1.0
    max_delay_s: float | None = None
    max_overshoot_pct: float | None = 10.0

    def __post_init__(self):
        parse_level(self.supply_ref, what="supply_ref")
        for name in ("level_tol_pct", "band_pct"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0):
                raise UsageError(f"{name}: must be a positive number, not {value!r}")
        for name in ("supply_min_v", "expect_v", "max_delay_s", "max_overshoot_pct"):
            value = getattr(self, name)
            if value is not None and not math.isfinite(value):
                raise UsageError(f"{name}: must be a finite number, not {value!r}")
        if self.expect_v is not None and self.expect_v <= 0:
            raise UsageError(f"expect_v: must be positive, not {self.expect_v!r}")

    def supply_ref_level(self) -> tuple[str, float]:
        """("fraction", 0.9) or ("volts", 1.62)."""
        return parse_level(self.supply_ref, what="supply_ref")

    @staticmethod
    def from_toml(path: str | Path) -> "Limits":
        path = Path(path)
        try:
            table = tomllib.loads(path.read_text(encoding="utf-8"))
        except OSError as exc:
            raise InputError(str(path), f"cannot read limits file: {exc.strerror}") from None
        except UnicodeDecodeError:
            raise InputError(str(path), "limits file is not UTF-8 text") from None
        except tomllib.TOMLDecodeError as exc:
            raise InputError(str(path), f"not valid TOML: {exc}") from None
        values = {}
        for key, raw in table.items():
            if key not in {f.name for f in dataclasses.fields(Limits)}:
                raise InputError(str(path), f"unknown limit (expected one of "
                                            f"{', '.join(f.name for f in dataclasses.fields(Limits))})", field=key)
            try:
                values[key] = _coerce(key, raw)
            except UsageError as exc:
                raise InputError(str(path), str(exc), field=key) from None
        try:
            return Limits(**values)
        except UsageError as exc:
            raise InputError(str(path), str(exc)) from None

    def merged(self, **flags) -> "Limits":
        """These limits with every flag that is not None put in (flags given as text or numbers)."""
        updates = {k: _coerce(k, v) for k, v in flags.items() if v is not None}
        unknown = set(updates) - {f.name for f in dataclasses.fields(Limits)}
        if unknown:
            raise UsageError(f"unknown limits: {', '.join(sorted(unknown))}")
        return dataclasses.replace(self, **updates)

    def to_json(self) -> str:
        return json.dumps(dataclasses.asdict(self), sort_keys=True)

    def key(self) -> str:
        """Short stable hash of the limits (equal limits, equal key, on every machine)."""
        return hashlib.sha256(self.to_json().encode()).hexdigest()[:12]


def _coerce(name: str, raw) -> str | float:
    if name == "supply_ref":
        text = str(raw).strip()
        parse_level(text, what=name)
        return text
    unit = _UNITS.get(name)
    if unit is None:
        raise UsageError(f"unknown limit {name!r}")
    if isinstance(raw, bool):
        raise UsageError(f"{name}: expected a number, not {raw!r}")
    if unit == "%":
        text = str(raw).strip().removesuffix("%")
        try:
            return float(text)
        except ValueError:
            raise UsageError(f"{name}: cannot read {raw!r} as a percentage") from None
    return parse_quantity(raw, unit, what=name)
