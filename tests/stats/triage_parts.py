"""Returned parts with a known cause, as bench files: closed-form startup waveforms and the startup
model's failure recipes, written as CSV with a run sheet, then ingested and measured by labtool.

Invented data for stating a property (the cause built in is the one triage names), not a reference.
The usual bench matrix: −40, 25, 125 °C × 10 µs, 1 ms, 100 ms ramps × 2 power cycles.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from labtool.ingest import IngestOptions, ingest_paths, load_manifest
from labtool.measure import Limits
from labtool.measure.batch import measure_campaign
from labtool.store import Campaign

TEMPS = (-40.0, 25.0, 125.0)
RAMPS = (10e-6, 1e-3, 0.1)
REPEATS = 2
N_SAMPLES = 250
WINDOW_S = 150e-6  # record past the end of a fast ramp (half the ramp on slow ones): the tail is settled
VDD_V = 1.8
LIMITS = Limits(max_delay_s=100e-6, expect_v=1.2)
LOT = "TL01"
# Start delay after the supply reaches the core's start voltage, by temperature (slower cold).
TEMP_FACTOR = {-40.0: 1.5, 25.0: 1.0, 125.0: 0.6}


def span(ramp_s: float) -> float:
    return ramp_s + max(WINDOW_S, 0.5 * ramp_s)


def record_times(ramp_s: float, n: int = N_SAMPLES) -> np.ndarray:
    """From 10 % of the span before the ramp starts to the end of the ramp and its window."""
    return -0.1 * span(ramp_s) + 1.1 * span(ramp_s) * np.arange(n) / n


def scope(rng, t, vdd, vref) -> tuple[np.ndarray, np.ndarray]:
    """Noise and 8-bit codes as a bench scope records them (zero two codes up the screen)."""
    q_v, q_s = 0.008, 0.010
    vref = np.clip(np.round((vref + rng.normal(0, 0.0015, t.size) + 2 * q_v) / q_v), 0, 255) * q_v - 2 * q_v
    vdd = np.clip(np.round((vdd + rng.normal(0, 0.003, t.size) + 2 * q_s) / q_s), 0, 255) * q_s - 2 * q_s
    return vdd + 0.0, vref + 0.0


@dataclass
class ClosedFormPart:
    """A part with its own variation; ``behaviour(temp, ramp, repeat)`` says what each start does."""

    rng: np.random.Generator
    level_v: float = field(init=False)
    d0_s: float = field(init=False)
    tau_s: float = field(init=False)
    v_on_v: float = field(init=False)

    def __post_init__(self):
        self.level_v = 1.2 + self.rng.normal(0, 0.004)
        self.d0_s = 6e-6 * float(np.exp(self.rng.normal(0, 0.15)))
        self.tau_s = 3e-6 * float(np.exp(self.rng.normal(0, 0.1)))
        self.v_on_v = 1.25 + self.rng.normal(0, 0.02)

    def trace(self, temp: float, ramp: float, kind: str = "start", *, vdd_final: float = VDD_V,
              level_scale: float = 1.0, slow: float = 1.0, zeta: float | None = None):
        """Supply 0 → vdd_final over ramp; the core starts ``d0`` after the supply reaches v_on and rises
        to its level, never above the supply less 0.3 V of headroom. ``kind``: start, stuck or fall."""
        t = record_times(ramp)
        vdd = vdd_final * np.clip(t / ramp, 0.0, 1.0)
        out = np.zeros_like(t)
        if kind != "stuck" and vdd_final > self.v_on_v:
            t_s = ramp * self.v_on_v / vdd_final + self.d0_s * TEMP_FACTOR[temp] * slow
            x = np.maximum(t - t_s, 0.0)
            tau = self.tau_s * slow
            if zeta is None:
                step = 1.0 - np.exp(-x / tau)
            else:  # second order (Ogata §5-3), natural frequency for a similar rise
                wn = 1.8 / tau
                wd = wn * np.sqrt(1 - zeta ** 2)
                step = 1.0 - np.exp(-zeta * wn * x) * (np.cos(wd * x) + zeta / np.sqrt(1 - zeta ** 2) * np.sin(wd * x))
            out = np.minimum(self.level_v * level_scale * step, np.maximum(vdd - 0.3, 0.0))
            if kind == "fall":  # holds briefly, then the core falls back to zero well before the tail
                t_fall = t_s + 5 * tau + 0.05 * span(ramp)
                out = out * np.exp(-np.maximum(t - t_fall, 0.0) / (0.01 * span(ramp)))
        return t, vdd, out


# -- closed-form patterns: one builder per cause --------------------------------------------------
def _region(rng) -> tuple:
    return [("all",), ("hot", 125.0), ("slow", 0.1)][int(rng.integers(3))]


def _in(region, temp, ramp) -> bool:
    return region[0] == "all" or (region[0] == "hot" and temp >= region[1]) or (region[0] == "slow" and ramp >= region[1])


def pattern(kind: str, rng: np.random.Generator):
    """(temp, ramp, repeat) → trace keyword arguments for a part of this kind (parameters drawn per part)."""
    if kind == "healthy":
        return lambda T, r, k: {}
    if kind == "dead_everywhere":
        return lambda T, r, k: {"kind": "stuck"}
    if kind == "slow_ramp_miss":
        edge = RAMPS[int(rng.integers(1, 3))]
        return lambda T, r, k: {"kind": "stuck"} if r >= edge else {}
    if kind == "cold_only_stuck":
        edge = TEMPS[int(rng.integers(0, 2))]
        return lambda T, r, k: {"kind": "stuck"} if T <= edge else {}
    if kind == "hot_only_stuck":
        edge = TEMPS[int(rng.integers(1, 3))]
        return lambda T, r, k: {"kind": "stuck"} if T >= edge else {}
    if kind == "bistable_intermittent":
        p = rng.uniform(0.3, 0.6)
        return lambda T, r, k: {"kind": "stuck"} if rng.random() < p else {}
    if kind == "falls_back":
        region = _region(rng)
        return lambda T, r, k: {"kind": "fall"} if _in(region, T, r) else {}
    if kind == "weak_startup_slow":
        slow = rng.uniform(4.0, 8.0)
        return lambda T, r, k: {"slow": slow}
    if kind == "excess_ringing":
        zeta = rng.uniform(0.2, 0.35)
        return lambda T, r, k: {"zeta": zeta}
    if kind == "level_fault":
        scale = 1.0 + rng.choice([-1, 1]) * rng.uniform(0.03, 0.10)
        return lambda T, r, k: {"level_scale": scale}
    if kind == "fixture_supply_invalid":
        vdd = rng.uniform(0.9, 1.1)  # a bad contact: the pin never sees the set supply
        return lambda T, r, k: {"vdd_final": vdd}
    raise AssertionError(kind)


@dataclass(frozen=True)
class Written:
    """A part written to the store: its name and the cause built in."""

    lot: str
    part: str
    kind: str

    @property
    def label(self) -> str:
        return f"{self.lot}/{self.part}"


@dataclass(frozen=True)
class Start:
    """One power-up of one part at one set-up, as a scope recorded it."""

    part: str
    temperature_c: float
    ramp_s: float
    repeat: int
    t_s: np.ndarray
    vdd_v: np.ndarray
    vref_v: np.ndarray
    idd_a: np.ndarray | None = None


def supply_current(rng, vref: np.ndarray, leakage_a: float = 2e-9) -> np.ndarray:
    """About 10 µA once the core runs (in proportion to its output), junction leakage before."""
    return leakage_a + 10e-6 * np.clip(vref / 1.2, 0, None) + rng.normal(0, 0.05e-6, vref.size)


def closed_form_starts(part: str, kind: str, seed: int, repeats: int = REPEATS, *, current: bool = False,
                       temps=TEMPS, ramps=RAMPS) -> list[Start]:
    """Every start of a closed-form part of this kind over the matrix (with ``current``: a supply-current channel)."""
    rng = np.random.default_rng([seed, 17])
    chip = ClosedFormPart(rng)
    does = pattern(kind, rng)
    out = []
    for T in temps:
        for r in ramps:
            for k in range(repeats):
                t, vdd, vref = chip.trace(T, r, **does(T, r, k))
                idd = supply_current(rng, vref) if current else None
                vdd, vref = scope(rng, t, vdd, vref)
                out.append(Start(part, T, r, k + 1, t, vdd, vref, idd))
    return out


def model_starts(design, part_names: list[str], seed: int, repeats: int, points: int = 800) -> list[Start]:
    """Starts of a population of parts of ``design`` (labtool.model: per-part variation drawn as the
    Monte Carlo draws it, with ``seed``), integrated together per set-up, resampled onto the scope's
    record with noise and 8-bit codes; each repeat is the same transient with fresh noise."""
    from labtool.model.circuit import OUT, linear_ramp, make_circuit
    from labtool.model.design import resolve_params
    from labtool.model.integrator import integrate
    from labtool.model.montecarlo import draws, sampled_values

    n = len(part_names)
    values = sampled_values(design, draws(n, seed))
    rng = np.random.default_rng([seed, 29])
    out = []
    for T in TEMPS:
        for r in RAMPS:
            t = record_times(r)
            p = resolve_params({**design.values(), **values}, T)
            p["ramp_s"] = r
            circ = make_circuit(p, n, linear_ramp(design.vdd_v, r), (r,))
            rec = integrate(circ, float(t[-1]), points, (OUT,), rtol=design.rtol, atol=design.atol_v)
            vdd = np.interp(t, rec.t_s, circ.supply(rec.t_s), left=0.0)
            for i, name in enumerate(part_names):
                vref = np.interp(t, rec.t_s, rec.values[i, :, 0], left=0.0)
                for k in range(repeats):
                    out.append(Start(name, T, r, k + 1, t, *scope(rng, t, vdd, vref)))
    return out


def write_files(folder: Path, starts: list[Start], returned=frozenset()) -> None:
    """A bench export: one CSV per start (time [s], vdd [V], vref [V]) and a run sheet whose
    ``returned`` column marks the ``returned`` parts."""
    folder.mkdir(parents=True, exist_ok=True)
    rows = []
    for st in starts:
        name = f"{st.part}_{st.temperature_c:g}C_{st.ramp_s:g}s_{st.repeat}.csv"
        body = "\n".join(f"{a:.6g},{b:.3f},{c:.4f}" for a, b, c in zip(st.t_s, st.vdd_v, st.vref_v))
        (folder / name).write_text("time [s],vdd [V],vref [V]\n" + body + "\n", encoding="utf-8")
        rows.append([name, LOT, st.part, f"{st.temperature_c:g}", f"{st.ramp_s:g}", str(st.repeat),
                     "yes" if st.part in returned else ""])
    with open(folder / "manifest.csv", "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["file", "lot", "part", "temperature_c", "ramp_s", "repeat", "returned"])
        w.writerows(rows)


def _capture(st: Start, lot: str):
    from labtool.capture import Conditions
    from tests.builders import make_capture

    cond = Conditions(lot=lot, part=st.part, temperature_c=st.temperature_c, ramp_s=st.ramp_s, vdd_v=VDD_V,
                      repeat=st.repeat)
    return make_capture(st.vdd_v, st.vref_v, float(st.t_s[1] - st.t_s[0]), t0_s=float(st.t_s[0]), conditions=cond,
                        source=f"bench/{lot}_{st.part}_{st.temperature_c:g}C_{st.ramp_s:g}s_{st.repeat}.csv",
                        extra=None if st.idd_a is None else {"idd": st.idd_a})


def store_and_measure(campaign: Path, starts: list[Start], *, files: Path | None = None, limits: Limits = LIMITS,
                      returned=frozenset(), lots: dict[str, str] | None = None):
    """The starts into a campaign (as CSV files and a run sheet through ``labtool ingest`` when ``files``
    is given, else straight into the store; ``lots``: part → lot other than LOT), measured by the
    engine; (measurement table, catalog records)."""
    from labtool.execute import parse_scheduler

    scheduler = parse_scheduler("local:2")
    with Campaign.open(campaign, create=True) as camp:
        if files is not None:
            write_files(files, starts, returned)
            manifest = files / "manifest.csv"
            ingested = ingest_paths([str(files)], camp, IngestOptions(manifest=load_manifest(str(manifest))),
                                    scheduler, exclude=[str(manifest)])
            assert not ingested.failed, ingested.failed[:3]
        else:
            for st in starts:
                camp.add_capture(_capture(st, (lots or {}).get(st.part, LOT)))
        measured = measure_campaign(camp, limits, scheduler)
        assert not measured.failed, measured.failed[:3]
        return camp.measurements(), camp.records()
