"""Is a frame a new acquisition of what the plan asked for? Pure checks over traces off the wire.

Many instruments hand back their last frame when nothing triggered, and a scope that triggered on
noise right after arming holds a frame of a supply that was never switched on. Neither may be
stored: a flat frame would be classified as a part stuck at zero. And a capture is labelled with the
plan's ramp and supply, so the supply trace must show them.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from typing import Iterable, Mapping

import numpy as np

from labtool.errors import NoAcquisition

# Which traces come from which instrument: a stale frame is stale as a whole.
FRAME_GROUPS = {"scope": ("supply", "output"), "supply": ("supply_current",)}
TAIL_FRACTION = 0.1  # the last 10 % of the record gives the final supply level (common practice, no source)


def frame_digest(data: Iterable[bytes]) -> str:
    h = hashlib.sha256()
    for block in data:
        h.update(len(block).to_bytes(8, "big") + block)
    return h.hexdigest()


class FrameHistory:
    """Digests of the frames already taken (this run, and stored captures of the plan)."""

    def __init__(self, known: Mapping[str, Iterable[str]] | None = None):
        self.known: dict[str, set[str]] = {g: set((known or {}).get(g, ())) for g in FRAME_GROUPS}

    def digests(self, raw: Mapping[str, bytes]) -> dict[str, str]:
        """Per instrument group present in ``raw`` (role → raw block bytes)."""
        return {g: frame_digest(raw[r] for r in roles) for g, roles in FRAME_GROUPS.items()
                if all(r in raw for r in roles)}

    def check_new(self, raw: Mapping[str, bytes], *, instrument: Mapping[str, str]) -> dict[str, str]:
        """The digests of a new frame; NoAcquisition when one group's data was seen before."""
        digests = self.digests(raw)
        for group, digest in digests.items():
            if digest in self.known[group]:
                roles = " and ".join(FRAME_GROUPS[group])
                raise NoAcquisition(f"{instrument[group]}: no new acquisition: the {roles} data are byte for byte "
                                    f"those of an earlier frame (a missed trigger hands back the last frame)",
                                    instrument=instrument[group])
        return digests

    def remember(self, digests: Mapping[str, str]) -> None:
        for group, digest in digests.items():
            self.known[group].add(digest)


@dataclass(frozen=True)
class SupplyFigures:
    """What the supply trace shows: its first and final level, its peak, and its ramp time."""

    first_v: float
    final_v: float
    peak_v: float
    ramp_s: float  # (t90 − t10)/0.8 of the final level: the 0-to-final time of a linear ramp; NaN if none


def supply_figures(t: np.ndarray, v: np.ndarray) -> SupplyFigures:
    """Levels from the first and last 10 % of the record (medians, robust to noise); the ramp from the
    first rising crossings of 10 % and 90 % of the final level, interpolated between samples."""
    n = len(v)
    k = max(1, int(n * TAIL_FRACTION))
    first, final = float(np.median(v[:k])), float(np.median(v[-k:]))
    peak = float(np.nanmax(v))
    ramp = float("nan")
    if final > 0:
        t10 = _first_rising(t, v, 0.1 * final, 0)
        if t10 is not None:
            t90 = _first_rising(t, v, 0.9 * final, int(np.searchsorted(t, t10)))
            if t90 is not None:
                ramp = (t90 - t10) / 0.8
    return SupplyFigures(first, final, peak, ramp)


def _first_rising(t: np.ndarray, v: np.ndarray, level: float, start: int) -> float | None:
    above = np.nonzero(v[start:] >= level)[0]
    if above.size == 0:
        return None
    i = start + int(above[0])
    if i == 0 or v[i - 1] >= level:
        return float(t[i])
    return float(t[i - 1] + (level - v[i - 1]) * (t[i] - t[i - 1]) / (v[i] - v[i - 1]))


def check_powered(fig: SupplyFigures, *, trigger_level_v: float, instrument: str) -> None:
    """NoAcquisition for a frame whose supply trace never rose through the trigger level (taken before
    the supply was switched on) or began above it (not this power cycle's ramp)."""
    if fig.peak_v < trigger_level_v:
        raise NoAcquisition(f"{instrument}: no new acquisition: the supply trace never reaches the trigger level "
                            f"{trigger_level_v:g} V (peak {fig.peak_v:.4g} V): the frame was taken before the "
                            f"supply was switched on", instrument=instrument)
    if fig.first_v >= trigger_level_v:
        raise NoAcquisition(f"{instrument}: no new acquisition: the supply trace already stands at "
                            f"{fig.first_v:.4g} V when the record begins, above the trigger level "
                            f"{trigger_level_v:g} V: this is not the ramp of this power cycle", instrument=instrument)


def off_plan(fig: SupplyFigures, *, voltage_v: float, ramp_s: float, ramp_tolerance: float,
             supply_tolerance: float) -> list[str]:
    """What the supply trace shows that the plan did not ask for (empty when it matches)."""
    problems = []
    if not abs(fig.final_v - voltage_v) <= supply_tolerance * voltage_v:
        problems.append(f"final supply {fig.final_v:.4g} V measured, {voltage_v:g} V planned "
                        f"(tolerance ±{supply_tolerance:.0%})")
    if not abs(fig.ramp_s - ramp_s) <= ramp_tolerance * ramp_s:
        measured = "no ramp found" if np.isnan(fig.ramp_s) else f"{fig.ramp_s:.4g} s"
        problems.append(f"ramp {measured} measured, {ramp_s:.4g} s planned (tolerance ±{ramp_tolerance:.0%})")
    return problems
