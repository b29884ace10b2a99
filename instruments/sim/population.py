"""The parts on the simulated bench: a design, per-part random variation and per-part overrides.

``sample_runs/population.toml`` is the demo: most parts start, a few are stuck, slow or ringing
because their overrides (recipes of labtool.model.scenarios) make the startup model behave so. Every trace
the simulated scope returns is a transient of that model, driven by the supply's programmed ramp.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import numpy as np

import tomllib

from instruments.schema import build
from labtool.errors import PlanError

SCHEMA = "labtool-population"
SCHEMA_VERSION = 1
# The demo's, beside the (editable) installed package in the source checkout, wherever labtool runs from.
DEFAULT_POPULATION = Path(__file__).resolve().parents[2] / "sample_runs" / "population.toml"


@dataclass(frozen=True)
class SimPart:
    slot: int
    lot: str
    part: str
    wafer: str | None = None
    die_x: int | None = None
    die_y: int | None = None
    note: str = ""
    overrides: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class Population:
    path: str
    design_path: str
    seed: int
    parts: tuple[SimPart, ...]
    model_points: int = 1500

    def by_slot(self) -> dict[int, SimPart]:
        return {p.slot: p for p in self.parts}


def load_population(path: str | Path) -> Population:
    path = Path(path)
    where = str(path)
    try:
        doc = tomllib.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise PlanError(f"{where}: cannot read population: {exc.strerror}") from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise PlanError(f"{where}: not valid TOML: {exc}") from None
    if doc.get("schema") != SCHEMA or doc.get("version") != SCHEMA_VERSION:
        raise PlanError(f"{where}: expected schema = {SCHEMA!r}, version = {SCHEMA_VERSION}")
    design = doc.get("design")
    if not isinstance(design, str):
        raise PlanError(f"{where} [design]: the path of a design file is required")
    parts = tuple(build(SimPart, p, f"{where} [[part]] #{i + 1}", PlanError) for i, p in enumerate(doc.get("part", [])))
    if not parts:
        raise PlanError(f"{where} [[part]]: no parts")
    slots = [p.slot for p in parts]
    if len(set(slots)) != len(slots):
        raise PlanError(f"{where} [[part]]: a slot is used twice")
    return Population(path=where, design_path=str((path.parent / design).resolve()), seed=int(doc.get("seed", 0)),
                      parts=parts, model_points=int(doc.get("model_points", 1500)))


class ModelSource:
    """Waveform source of the simulated bench backed by the startup model (labtool.model)."""

    def __init__(self, population: Population):
        from labtool import model

        self.model = model
        self.population = population
        base = model.load_design(population.design_path)
        varied = model.sample_population(base, len(population.parts), population.seed)
        self.designs = {p.slot: (d.replace(**dict(p.overrides)) if p.overrides else d)
                        for p, d in zip(population.parts, varied)}
        self._cache: dict[tuple, tuple[np.ndarray, dict[str, np.ndarray]]] = {}

    def __call__(self, slot, t_s, *, ramp_s, vdd_v, temperature_c):
        design = self.designs.get(slot)
        if design is None:
            return {"supply": np.clip(t_s / ramp_s, 0, 1) * vdd_v, "output": np.zeros_like(t_s)}  # empty socket
        key = (slot, round(ramp_s, 15), round(vdd_v, 6), round(temperature_c, 1), float(t_s[-1]))
        if key not in self._cache:
            t_stop = max(float(t_s[-1]), ramp_s)

            def supply_profile(t, _r=ramp_s, _v=vdd_v):
                return np.clip(np.asarray(t, float) / _r, 0.0, 1.0) * _v

            cap = self.model.simulate(design, ramp_s=ramp_s, temperature_c=temperature_c, t_stop_s=t_stop,
                                      n_samples=self.population.model_points, supply_profile=supply_profile)
            self._cache[key] = (cap.times(), {c.role: c.values for c in cap.channels})
        t_model, traces = self._cache[key]
        return {role: np.interp(t_s, t_model, values, left=values[0]) for role, values in traces.items()
                if role in ("supply", "output", "supply_current")}
