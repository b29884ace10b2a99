"""Generated lots for the statistics tests: waveforms with known truth, written as CSV captures, ingested
and measured by labtool itself, so the statistics see tables the way users get them.

Invented data (an invented chip: 1.8 V supply, 1.2 V reference): every capture is a linear supply ramp
and an output whose 90 % crossing falls at a chosen delay from supply valid (90 % of the supply), or
one of the failures the engine classifies. The truth of each capture (its delay and the supply at the
output's 90 % crossing) is computed from the noiseless waveform, independent of the engine.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd

LEVEL_V = 1.2
N_SAMPLES = 2000
NOISE_V = 0.5e-3
LIMITS = {"max_delay_s": 100e-6, "expect_v": LEVEL_V, "supply_min_v": 1.5}  # the lot's measurement limits


@dataclass(frozen=True)
class Start:
    """One power cycle of one part at one set-up, and what its output does."""

    lot: str
    part: str
    ramp_s: float
    temperature_c: float
    vdd_v: float
    repeat: int
    kind: str = "start"  # start, ring, stuck, recollapse, wrong_level, no_supply
    delay_s: float = 0.0  # target delay of the 90 % crossing from supply valid

    @property
    def setup(self) -> tuple[float, float, float]:
        return (self.ramp_s, self.temperature_c, self.vdd_v)

    @property
    def name(self) -> str:
        return f"{self.lot}_{self.part}_{self.ramp_s:g}s_{self.temperature_c:g}C_{self.vdd_v:g}V_r{self.repeat}.csv"


def _timing(s: Start) -> tuple[float, float, float]:
    """(ramp start, supply valid, record length) in s."""
    t0 = 0.1 * s.ramp_s + 2e-6
    valid = t0 + 0.9 * s.ramp_s
    end = max(t0 + s.ramp_s, valid + max(s.delay_s, 0.0)) * 1.35 + 80e-6
    return t0, valid, end


def waveform(s: Start) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Noiseless (t, supply, output) of one start."""
    t0, valid, end = _timing(s)
    t = np.linspace(0.0, end, N_SAMPLES)
    top = 1.0 if s.kind == "no_supply" else s.vdd_v
    supply = top * np.clip((t - t0) / s.ramp_s, 0.0, 1.0)
    rise = max(1e-6, 0.02 * s.ramp_s)
    t90 = valid + s.delay_s
    start = t90 - 0.9 * rise
    level = 1.0 if s.kind == "wrong_level" else LEVEL_V
    out = level * np.clip((t - start) / rise, 0.0, 1.0)
    if s.kind in ("stuck", "no_supply"):
        out = np.zeros_like(t)
    elif s.kind == "recollapse":  # up, then back to zero well before the settled end of the record
        fall = t0 + s.ramp_s + 0.1 * (end - t0 - s.ramp_s)
        out = out * np.clip((fall + rise - t) / rise, 0.0, 1.0)
    elif s.kind == "ring":  # second-order step, ζ = 0.3 (Ogata §5-3: 37 % overshoot), from the start instant
        zeta, wn = 0.3, 2 * math.pi * 200e3
        wd = wn * math.sqrt(1 - zeta ** 2)
        tau = np.maximum(t - start, 0.0)
        out = level * (1 - np.exp(-zeta * wn * tau) * (np.cos(wd * tau) + zeta / math.sqrt(1 - zeta ** 2)
                                                        * np.sin(wd * tau)))
    return t, supply, out


def truth(s: Start) -> dict:
    """The generated delay and supply at the output's 90 % crossing, from the noiseless waveform."""
    t, supply, out = waveform(s)
    _, valid, _ = _timing(s)
    final = out[-1] if s.kind != "recollapse" else LEVEL_V
    above = np.flatnonzero(out >= 0.9 * final) if final > 0 else np.array([], int)
    if not above.size:
        return {"delay_s": None, "vsupply_at_valid_v": None}
    i = int(above[0])
    t90 = float(np.interp(0.9 * final, out[i - 1:i + 1], t[i - 1:i + 1]))
    return {"delay_s": t90 - valid, "vsupply_at_valid_v": float(np.interp(t90, t, supply))}


def write_capture(s: Start, folder: Path, seed: int) -> Path:
    """The start as a CSV capture with its conditions in a key/value preamble (8 digits, 0.5 mV noise);
    the supply voltage comes from a run sheet (:func:`build_campaign`), as on many benches."""
    t, supply, out = waveform(s)
    rng = np.random.default_rng(seed)
    data = np.column_stack([t, supply + rng.normal(0, NOISE_V, t.size), out + rng.normal(0, NOISE_V, t.size)])
    path = folder / s.name
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(f"lot,{s.lot}\npart,{s.part}\ntemperature_c,{s.temperature_c:g}\nramp_s,{s.ramp_s!r}\n"
                 f"repeat,{s.repeat}\ntime [s],vdd [V],vref [V]\n")
        np.savetxt(fh, data, delimiter=",", fmt="%.8g")
    return path


SETUPS = ((10e-6, -40.0, 1.8), (10e-6, 125.0, 1.8), (1e-3, -40.0, 1.8), (1e-3, 125.0, 1.8), (10e-6, 25.0, 1.62))
# Median delay per set-up (ramp, temperature): after supply valid on fast ramps, before it on slow ones.
_BASE = {(10e-6, -40.0): 20e-6, (10e-6, 125.0): 12e-6, (10e-6, 25.0): 15e-6, (1e-3, -40.0): -250e-6,
         (1e-3, 125.0): -200e-6}


def population(lots=(("LT1", 6), ("LT2", 5)), repeats: int = 3, seed: int = 13) -> list[Start]:
    """Every part started ``repeats`` times at every set-up, with a part-to-part and a start-to-start spread."""
    rng = np.random.default_rng(seed)
    out = []
    for lot, n_parts in lots:
        for p in range(1, n_parts + 1):
            part_z = rng.standard_normal(len(SETUPS))
            for (setup, z), k in itertools.product(zip(SETUPS, part_z), range(repeats)):
                base = _BASE[setup[:2]]
                jitter = rng.standard_normal()
                delay = base * math.exp(0.08 * z + 0.02 * jitter) if base > 0 else base + 15e-6 * z + 2e-6 * jitter
                out.append(Start(lot, f"p{p:02d}", *setup, repeat=k, delay_s=delay))
    return out


def _set(starts: list[Start], lot, part, setup, repeat, **change) -> None:
    i = next(i for i, s in enumerate(starts) if (s.lot, s.part, s.setup, s.repeat) == (lot, part, setup, repeat))
    starts[i] = replace(starts[i], **change)


FAST_COLD, FAST_HOT, SLOW_COLD, SLOW_HOT, LOW_SUPPLY = SETUPS


def scenario() -> tuple[list[Start], list[Start]]:
    """(first measurement, files changed afterwards): the lot the statistics tests are built on.

    LT1: p02 stuck at zero in 2 of 3 starts at the slow cold set-up (intermittent); p04 stuck in all 3
    there; p05 re-collapses once at the slow hot set-up, its plateau far before supply valid (a −0.7 ms
    "delay" that must not count); p06 starts slowly once (150 µs); p03 rings once; p01 settles at a
    wrong level once and is an outlier once (−120 µs among −200 µs).
    LT2: one capture without supply; two files change after the first measurement: a stuck start
    becomes a start, and a −900 µs start becomes an ordinary one. Only the new versions may count.
    """
    starts = population()
    _set(starts, "LT1", "p02", SLOW_COLD, 0, kind="stuck")
    _set(starts, "LT1", "p02", SLOW_COLD, 2, kind="stuck")
    for k in range(3):
        _set(starts, "LT1", "p04", SLOW_COLD, k, kind="stuck")
    _set(starts, "LT1", "p05", SLOW_HOT, 1, kind="recollapse", delay_s=-0.7e-3)
    _set(starts, "LT1", "p06", FAST_COLD, 0, delay_s=150e-6)
    _set(starts, "LT1", "p03", FAST_HOT, 2, kind="ring")
    _set(starts, "LT1", "p01", FAST_COLD, 2, kind="wrong_level")
    _set(starts, "LT1", "p01", SLOW_HOT, 0, delay_s=-120e-6)
    _set(starts, "LT2", "p01", LOW_SUPPLY, 0, kind="no_supply")
    _set(starts, "LT2", "p05", FAST_COLD, 0, kind="stuck")
    _set(starts, "LT2", "p02", SLOW_COLD, 1, delay_s=-900e-6)
    changed = list(starts)
    _set(changed, "LT2", "p05", FAST_COLD, 0, kind="start", delay_s=21e-6)
    _set(changed, "LT2", "p02", SLOW_COLD, 1, delay_s=-245e-6)
    return starts, [c for c, s in zip(changed, starts) if c != s]


EXPECTED_VERDICT = {"start": "started", "ring": "ringing", "stuck": "stuck_at_zero", "recollapse": "recollapse",
                    "wrong_level": "wrong_level", "no_supply": "no_supply"}


def expected_verdict(s: Start) -> str:
    if s.kind == "start" and s.delay_s > LIMITS["max_delay_s"]:
        return "slow_start"
    return EXPECTED_VERDICT[s.kind]


def build_campaign(root: Path, first: list[Start], changed: list[Start]) -> tuple[str, pd.DataFrame]:
    """Write, ingest and measure ``first``; then rewrite the ``changed`` files, ingest and measure again.
    Returns the campaign path and the truth table of the current starts (one row each, by file name)."""
    from labtool.ingest import IngestOptions, ingest_paths, load_manifest
    from labtool.measure import Limits
    from labtool.measure.batch import measure_campaign
    from labtool.store import Campaign

    files = root / "files"
    files.mkdir(parents=True)
    limits = Limits(**LIMITS)
    current = {s.name: s for s in first}
    with Campaign.open(root / "campaign", create=True) as camp:
        for round_no, starts in enumerate((first, changed)):
            paths = [str(write_capture(s, files, seed=1000 * round_no + i)) for i, s in enumerate(starts)]
            sheet = root / f"runs{round_no}.csv"
            sheet.write_text("file,vdd_v\n" + "".join(f"{s.name},{s.vdd_v:g}\n" for s in starts))
            report = ingest_paths(paths, camp, IngestOptions(manifest=load_manifest(str(sheet))))
            assert not report.failed and len(report.added) == len(starts), report.failed
            measured = measure_campaign(camp, limits)
            assert not measured.failed, measured.failed
            current.update({s.name: s for s in starts})
    rows = [{"file": name, "lot": s.lot, "part": s.part, "ramp_s": s.ramp_s, "temperature_c": s.temperature_c,
             "vdd_v": s.vdd_v, "repeat": s.repeat, "kind": s.kind, "verdict": expected_verdict(s),
             "sample_interval_s": _timing(s)[2] / (N_SAMPLES - 1),
             **{f"true_{k}": v for k, v in truth(s).items()}} for name, s in current.items()]
    return str(root / "campaign"), pd.DataFrame(rows)
