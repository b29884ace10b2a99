"""Acquisition plans (TOML, our own versioned schema): instruments, parts, the condition matrix.

The plan is expanded into an ordered list of :class:`Step` (temperature outermost, because the
chamber is the slowest thing on the bench; then part, ramp time, repeat). Each step has a stable
``key`` that is also the capture's locator in the store, so a re-run knows what is already done.
"""

from __future__ import annotations

import dataclasses
import hashlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import tomllib

from instruments.schema import build
from labtool.errors import PlanError, UsageError
from labtool.units import parse_quantity

SCHEMA = "labtool-acquisition-plan"
SCHEMA_VERSION = 1
ROLES = ("scope", "supply", "chamber")


@dataclass(frozen=True)
class InstrumentSpec:
    role: str
    resource: str
    profile: str
    backend: str = "@py"
    kind: str = ""  # supply: "supply" or "smu"
    channel: int = 1


@dataclass(frozen=True)
class Part:
    lot: str
    part: str
    wafer: str | None = None
    die_x: int | None = None
    die_y: int | None = None
    slot: int | None = None


@dataclass(frozen=True)
class ScopeSetup:
    """``span_v`` is a channel's full-scale span and ``offset_v`` the voltage at its centre (the
    channel shows offset_v ± span_v/2); ``supply_*`` / ``output_*`` set one channel, else both share them."""

    supply_channel: int = 1
    output_channel: int = 2
    span_v: float = 4.0
    offset_v: float = 0.0
    supply_span_v: float | None = None
    supply_offset_v: float | None = None
    output_span_v: float | None = None
    output_offset_v: float | None = None
    points: int = 4000
    record_ramp_multiple: float = 3.0
    record_extra_s: float = 200e-6
    pretrigger_ramp_multiple: float = 0.2
    pretrigger_extra_s: float = 10e-6
    trigger_level_v: float = 0.18
    read_deadline_s: float = 60.0

    def channel_range(self, role: str) -> tuple[float, float]:
        """(span_v, offset_v) of the ``supply`` or ``output`` channel."""
        span, offset = getattr(self, f"{role}_span_v"), getattr(self, f"{role}_offset_v")
        return (self.span_v if span is None else span), (self.offset_v if offset is None else offset)

    def record_s(self, ramp_s: float) -> float:
        return self.record_ramp_multiple * ramp_s + self.record_extra_s

    def pretrigger_s(self, ramp_s: float) -> float:
        return self.pretrigger_ramp_multiple * ramp_s + self.pretrigger_extra_s


@dataclass(frozen=True)
class SupplySetup:
    voltage_v: float
    current_limit_a: float
    ovp_v: float


@dataclass(frozen=True)
class ChamberSetup:
    tolerance_c: float = 1.0
    soak_s: float = 60.0
    timeout_s: float = 1800.0


@dataclass(frozen=True)
class SafetyLimits:
    """Bounds the plan is checked against before anything is driven (the lab's rules come first)."""

    max_voltage_v: float = 5.5
    max_current_a: float = 0.1
    min_temperature_c: float = -55.0
    max_temperature_c: float = 150.0


@dataclass(frozen=True)
class RunSetup:
    """How the run behaves: retries per step, and how far a capture may stray from the plan.

    The supply trace's measured ramp (10 % to 90 % of its final level, over 0.8, for a linear ramp)
    must be within ``ramp_tolerance`` (relative) of the step's ramp time, and its final level within
    ``supply_tolerance`` of ``voltage_v``; otherwise the capture is refused (``off_plan = "refuse"``)
    or stored with the tag ``off_plan`` (``"flag"``)."""

    retries: int = 2
    measure_limits: str | None = None
    ramp_tolerance: float = 0.25
    supply_tolerance: float = 0.05
    off_plan: str = "refuse"


@dataclass(frozen=True)
class Step:
    index: int
    part: Part
    temperature_c: float
    ramp_s: float
    repeat: int

    @property
    def key(self) -> str:
        p = self.part
        return (f"{p.lot}/{p.wafer or '-'}/{p.part}/T{self.temperature_c:g}C/ramp{self.ramp_s:.6g}s/"
                f"r{self.repeat}")


@dataclass(frozen=True)
class Plan:
    name: str
    path: str
    sha256: str
    instruments: Mapping[str, InstrumentSpec]
    parts: tuple[Part, ...]
    temperatures_c: tuple[float, ...]
    ramps_s: tuple[float, ...]
    repeats: int
    discharge_s: float
    scope: ScopeSetup
    supply: SupplySetup
    chamber: ChamberSetup
    limits: SafetyLimits
    run: RunSetup = field(default_factory=RunSetup)
    simulated: bool = False
    sim_population: str | None = None  # population file for --sim (resolved against the plan's folder)
    tags: Mapping[str, str] = field(default_factory=dict)

    @property
    def source_path(self) -> str:
        """What the store records as the source of every capture of this plan."""
        return f"plan:{self.name}"

    def steps(self) -> list[Step]:
        out = []
        for t in self.temperatures_c:
            for part in self.parts:
                for ramp in self.ramps_s:
                    for rep in range(self.repeats):
                        out.append(Step(len(out), part, t, ramp, rep))
        return out

    def with_resources(self, resources: Mapping[str, str], *, profile: str | None = None) -> "Plan":
        """The same plan pointed at other instruments (the simulated bench)."""
        specs = {role: dataclasses.replace(spec, resource=resources[role], profile=profile or spec.profile,
                                           backend="@py")
                 for role, spec in self.instruments.items() if role in resources}
        return dataclasses.replace(self, instruments=specs, simulated=True)


def load_plan(path: str | Path) -> Plan:
    path = Path(path)
    where = str(path)
    try:
        raw = path.read_bytes()
        doc = tomllib.loads(raw.decode("utf-8"))
    except OSError as exc:
        raise PlanError(f"{where}: cannot read plan: {exc.strerror}") from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise PlanError(f"{where}: not valid TOML: {exc}") from None
    if doc.get("schema") != SCHEMA:
        raise PlanError(f"{where} [schema]: expected {SCHEMA!r}, got {doc.get('schema')!r}")
    if doc.get("version") != SCHEMA_VERSION:
        raise PlanError(f"{where} [version]: this labtool reads plan version {SCHEMA_VERSION}, got {doc.get('version')!r}")
    name = _text(doc, "name", where)
    instruments = {}
    for role, spec in _table(doc, "instruments", where).items():
        if role not in ROLES:
            raise PlanError(f"{where} [instruments.{role}]: unknown role (known: {', '.join(ROLES)})")
        instruments[role] = _build(InstrumentSpec, {"role": role, **_mapping(spec, f"{where} [instruments.{role}]")},
                                   f"{where} [instruments.{role}]")
    for role in ("scope", "supply"):
        if role not in instruments:
            raise PlanError(f"{where} [instruments.{role}]: missing (a plan needs a scope and a supply)")
    if instruments["supply"].kind not in ("", "supply", "smu"):
        raise PlanError(f"{where} [instruments.supply] kind: {instruments['supply'].kind!r} is not supply or smu")
    parts = tuple(_build(Part, _mapping(p, f"{where} [[parts]] #{i + 1}"), f"{where} [[parts]] #{i + 1}")
                  for i, p in enumerate(doc.get("parts", [])))
    if not parts:
        raise PlanError(f"{where} [[parts]]: the plan lists no parts")
    keys = [(p.lot, p.wafer, p.part) for p in parts]
    if len(set(keys)) != len(keys):
        raise PlanError(f"{where} [[parts]]: a part is listed twice")
    matrix = _table(doc, "matrix", where)
    mwhere = f"{where} [matrix]"
    temps = tuple(float(_quantity(t, "C", f"{mwhere} temperatures_c")) for t in matrix.get("temperatures_c", [25.0]))
    # Rounded to 12 significant digits: "50us" parses to 4.9999999999999996e-05.
    ramps = tuple(float(f"{_quantity(r, 's', f'{mwhere} ramp_s'):.12g}") for r in matrix.get("ramp_s", []))
    if not ramps or any(r <= 0 for r in ramps):
        raise PlanError(f"{mwhere} ramp_s: give one or more positive ramp times")
    repeats = matrix.get("repeats", 1)
    if not isinstance(repeats, int) or repeats < 1:
        raise PlanError(f"{mwhere} repeats: {repeats!r} is not a whole number ≥ 1")
    discharge_s = _quantity(matrix.get("discharge_s", "100ms"), "s", f"{mwhere} discharge_s")
    scope = _build(ScopeSetup, _quantities(doc.get("scope", {}), f"{where} [scope]"), f"{where} [scope]")
    supply_doc = doc.get("supply")
    if not isinstance(supply_doc, dict) or not {"voltage_v", "current_limit_a", "ovp_v"} <= set(supply_doc):
        raise PlanError(f"{where} [supply]: voltage_v, current_limit_a and ovp_v are required "
                        f"(a supply is never driven without a current limit and over-voltage protection)")
    supply = _build(SupplySetup, _quantities(supply_doc, f"{where} [supply]"), f"{where} [supply]")
    chamber = _build(ChamberSetup, _quantities(doc.get("chamber", {}), f"{where} [chamber]"), f"{where} [chamber]")
    limits = _build(SafetyLimits, _quantities(doc.get("limits", {}), f"{where} [limits]"), f"{where} [limits]")
    run = _build(RunSetup, _table(doc, "run", where, required=False), f"{where} [run]")
    sim = _table(doc, "sim", where, required=False)
    population = sim.get("population")
    if population is not None and not isinstance(population, str):
        raise PlanError(f"{where} [sim] population: a file path is required")
    plan = Plan(name=name, path=where, sha256=hashlib.sha256(raw).hexdigest(), instruments=instruments,
                parts=parts, temperatures_c=temps, ramps_s=ramps, repeats=repeats, discharge_s=discharge_s,
                scope=scope, supply=supply, chamber=chamber, limits=limits, run=run,
                sim_population=str(path.parent / population) if population else None,
                tags={str(k): str(v) for k, v in _table(doc, "tags", where, required=False).items()})
    check_plan(plan)
    return plan


def check_plan(plan: Plan) -> None:
    """Refuse a plan that would drive outputs beyond its own safety limits or that cannot run unattended."""
    w, lim, s = plan.path, plan.limits, plan.supply
    if s.voltage_v > lim.max_voltage_v or s.ovp_v > lim.max_voltage_v:
        raise PlanError(f"{w} [supply]: {max(s.voltage_v, s.ovp_v):g} V exceeds [limits] max_voltage_v = {lim.max_voltage_v:g}")
    if s.ovp_v < s.voltage_v:
        raise PlanError(f"{w} [supply] ovp_v: {s.ovp_v:g} V is below voltage_v = {s.voltage_v:g} V")
    if not 0 < s.current_limit_a <= lim.max_current_a:
        raise PlanError(f"{w} [supply] current_limit_a: {s.current_limit_a:g} A must be > 0 and ≤ [limits] "
                        f"max_current_a = {lim.max_current_a:g}")
    for t in plan.temperatures_c:
        if not lim.min_temperature_c <= t <= lim.max_temperature_c:
            raise PlanError(f"{w} [matrix] temperatures_c: {t:g} °C is outside [limits] "
                            f"{lim.min_temperature_c:g} … {lim.max_temperature_c:g} °C")
    if len(plan.temperatures_c) > 1 and "chamber" not in plan.instruments:
        raise PlanError(f"{w} [matrix] temperatures_c: several temperatures need [instruments.chamber]")
    r = plan.run
    if r.retries < 0 or r.off_plan not in ("refuse", "flag") or not 0 < r.ramp_tolerance < 1 \
            or not 0 < r.supply_tolerance < 1:
        raise PlanError(f"{w} [run]: retries ≥ 0, off_plan \"refuse\" or \"flag\", ramp_tolerance and "
                        f"supply_tolerance between 0 and 1 (relative) are required")
    span, offset = plan.scope.channel_range("supply")
    if offset - span / 2 > 0 or offset + span / 2 < s.voltage_v or span <= 0:
        raise PlanError(f"{w} [scope]: the supply channel shows {offset - span / 2:g} … {offset + span / 2:g} V "
                        f"(offset_v ± span_v/2), which does not hold 0 … {s.voltage_v:g} V: the ramp would clip")
    if not plan.scope.channel_range("output")[0] > 0:
        raise PlanError(f"{w} [scope]: the output channel's span_v must be positive")
    if len(plan.parts) > 1 and any(p.slot is None for p in plan.parts):
        raise PlanError(f"{w} [[parts]]: with several parts each needs a slot (routed by the supply's "
                        f"select_part operation), or the run could not go on unattended")


def _table(doc: Mapping, key: str, where: str, *, required: bool = True) -> Mapping[str, Any]:
    value = doc.get(key)
    if value is None:
        if required:
            raise PlanError(f"{where} [{key}]: missing")
        return {}
    return _mapping(value, f"{where} [{key}]")


def _mapping(value: Any, where: str) -> Mapping[str, Any]:
    if not isinstance(value, dict):
        raise PlanError(f"{where}: must be a table")
    return value


def _text(doc: Mapping, key: str, where: str) -> str:
    value = doc.get(key)
    if not isinstance(value, str) or not value.strip():
        raise PlanError(f"{where} [{key}]: a non-empty text is required")
    return value.strip()


_UNIT_BY_SUFFIX = {"_s": "s", "_v": "V", "_a": "A", "_c": "C"}


def _quantity(value: Any, unit: str, where: str) -> float:
    if unit == "C":
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            return float(value)
        raise PlanError(f"{where}: {value!r} is not a temperature in °C")
    try:
        return parse_quantity(value, unit, what=where)
    except UsageError as exc:
        raise PlanError(str(exc)) from None


def _quantities(values: Mapping[str, Any], where: str) -> dict[str, Any]:
    """Fields ending in _s/_v/_a accept "500us", "1.8V", "10mA"."""
    out = {}
    for k, v in _mapping(values, where).items():
        unit = next((u for suffix, u in _UNIT_BY_SUFFIX.items() if k.endswith(suffix)), None)
        out[k] = _quantity(v, unit, f"{where} {k}") if unit and not isinstance(v, bool) else v
    return out


def _build(cls, values: Mapping[str, Any], where: str):
    return build(cls, values, where, PlanError)
