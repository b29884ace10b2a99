"""The design file: a TOML description of a bandgap core and its startup circuit (our own schema).

Every parameter has one flat, unit-suffixed name (``r1_ohm``, ``i_start_a``) and lives in one TOML
section; overrides (``--set i_start_a=2e-6``) use the flat name. The schema is :data:`PARAMS` and is
documented in docs/model.md. Values are SI; temperature laws are applied by :func:`resolve_params`.
"""

from __future__ import annotations

import dataclasses
import difflib
import hashlib
import json
import math
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from labtool.errors import ModelError
from labtool.model import physics


@dataclass(frozen=True)
class Param:
    name: str
    section: str
    default: Any
    doc: str
    kind: str = "float"  # float | positive | nonneg | fraction | int | str | floats | one of CHOICES
    choices: tuple[str, ...] = ()


STARTUP_KINDS = ("inject", "pulldown", "kick_supply", "kick_enable", "none")

PARAMS: tuple[Param, ...] = (
    Param("name", "chip", "unnamed", "name of the design (free text)", "str"),
    # core
    Param("tnom_c", "core", 27.0, "reference temperature of the device parameters (°C)"),
    Param("is_a", "core", 1e-17, "saturation current of a unit-area diode at tnom_c (A)", "positive"),
    Param("is_xti", "core", 3.0, "saturation-current temperature exponent XTI"),
    Param("eg_ev", "core", 1.12, "band-gap energy in the IS temperature law (eV)", "positive"),
    Param("area_ratio", "core", 8.0, "area ratio N of the second diode to the first", "positive"),
    Param("r1_ohm", "core", 10.7e3, "PTAT resistor R1 at tnom_c (Ω)", "positive"),
    Param("r2_over_r1", "core", 9.4, "output resistor ratio R2/R1", "positive"),
    Param("r_tc1_per_c", "core", 0.0, "first-order temperature coefficient of R1 and R2 (1/K)"),
    # amplifier
    Param("amp_dc_gain", "amplifier", 3000.0, "DC voltage gain (V/V)", "positive"),
    Param("amp_gbw_hz", "amplifier", 2e6, "gain-bandwidth at its bias in the wanted operating point (Hz)",
          "positive"),
    Param("amp_offset_v", "amplifier", 0.0, "input offset; positive raises the Q1-side input (V)"),
    Param("amp_vcm_min_v", "amplifier", 0.25, "input common-mode voltage below which the input pair is off"
          " at tnom_c (V); −1 for none"),
    Param("amp_vcm_min_tc_v_per_c", "amplifier", -0.8e-3, "temperature coefficient of amp_vcm_min_v (V/K)"),
    Param("amp_vcm_soft_v", "amplifier", 0.02, "width of the common-mode turn-on (V)", "positive"),
    Param("amp_bias", "amplifier", "self", "bias: fixed, or self-biased from the core current", "choice",
          ("fixed", "self")),
    Param("amp_bias_a", "amplifier", 1e-6, "tail current when amp_bias = fixed (A)", "nonneg"),
    Param("amp_bias_ratio", "amplifier", 0.2, "tail current per core-branch current when self-biased",
          "nonneg"),
    Param("amp_bias_min_a", "amplifier", 20e-9, "floor of the self-biased tail current (A)", "nonneg"),
    Param("amp_vdd_min_v", "amplifier", 0.9, "supply below which the amplifier has no bias (V)", "nonneg"),
    # mirror (PMOS, EKV)
    Param("mos_vt0_v", "mirror", 0.45, "threshold voltage magnitude at tnom_c (V)", "positive"),
    Param("mos_vt0_tc_v_per_c", "mirror", -1.0e-3, "threshold temperature coefficient (V/K)"),
    Param("mos_slope_n", "mirror", 1.35, "subthreshold slope factor n", "positive"),
    Param("mos_i_spec_a", "mirror", 0.5e-6, "EKV specific current 2·n·µ·Cox·(W/L)·UT² at tnom_c (A)",
          "positive"),
    Param("mos_mobility_exp", "mirror", -1.5, "mobility temperature exponent"),
    Param("mirror_out_ratio", "mirror", 1.0, "output branch current per core-branch current", "positive"),
    # capacitance
    Param("c_q1_f", "capacitance", 1e-12, "node of diode Q1 (F)", "positive"),
    Param("c_r1_f", "capacitance", 0.3e-12, "top of R1 (F)", "positive"),
    Param("c_q2_f", "capacitance", 2e-12, "node of diode Q2 (F)", "positive"),
    Param("c_gate_f", "capacitance", 0.3e-12, "mirror gate to ground, with the amplifier output (F)",
          "positive"),
    Param("c_gs_f", "capacitance", 2e-12, "mirror gate to supply (F)", "nonneg"),
    Param("c_out_f", "capacitance", 20e-12, "reference output with its load (F)", "positive"),
    Param("c_q3_f", "capacitance", 0.5e-12, "node of the output diode Q3 (F)", "positive"),
    # leakage
    Param("leak_q1_a", "leakage", 1e-13, "leakage to ground at the Q1 node at tnom_c (A)", "nonneg"),
    Param("leak_q2_a", "leakage", 1e-13, "leakage to ground at the Q2 node at tnom_c (A)", "nonneg"),
    Param("leak_out_a", "leakage", 1e-12, "leakage to ground at the reference output at tnom_c (A)",
          "nonneg"),
    Param("leak_doubling_c", "leakage", 10.0, "temperature rise that doubles every leakage (K)", "positive"),
    # startup
    Param("startup_kind", "startup", "inject", "startup circuit", "choice", STARTUP_KINDS),
    Param("i_start_a", "startup", 3e-6, "startup current: injection into the Q1 node or gate pull-down (A)",
          "nonneg"),
    Param("startup_sense", "startup", "mirror", "what disengages the startup: the mirror gate drive or the"
          " reference output", "choice", ("mirror", "output")),
    Param("startup_v_off_v", "startup", 0.5, "sensed voltage at which the startup disengages (V)", "nonneg"),
    Param("startup_v_width_v", "startup", 0.015, "width of the disengage transition (V)", "positive"),
    Param("startup_vdd_min_v", "startup", 0.7, "supply below which the startup circuit is inactive (V)",
          "nonneg"),
    Param("c_kick_f", "startup", 1e-12, "kick capacitor into the Q1 node (kick kinds) (F)", "nonneg"),
    Param("enable_delay_s", "startup", 5e-6, "enable edge after the end of the supply ramp (s)", "nonneg"),
    Param("enable_edge_s", "startup", 10e-9, "enable edge duration (s)", "positive"),
    # load and supply
    Param("r_load_ohm", "load", math.inf, "load resistance at the reference output (Ω); inf for none",
          "positive"),
    Param("vdd_v", "supply", 1.8, "final supply voltage (V)", "positive"),
    Param("ramp_s", "supply", 10e-6, "supply ramp time 0 → vdd_v (s)", "positive"),
    # conditions
    Param("temperature_c", "conditions", 27.0, "default junction temperature (°C)"),
    Param("ramp_times_s", "conditions", (1e-6, 1e-4, 1e-2), "ramp times predicted by default (s)", "floats"),
    Param("temperatures_c", "conditions", (-40.0, 27.0, 125.0), "temperatures predicted by default (°C)",
          "floats"),
    # simulation
    Param("window_s", "simulation", 100e-6, "record length after the end of the supply ramp (s)",
          "positive"),
    Param("rtol", "simulation", 1e-3, "relative tolerance of the integrator", "positive"),
    Param("atol_v", "simulation", 2e-4, "absolute tolerance of the integrator (V)", "positive"),
    Param("mc_points", "simulation", 1200, "samples per Monte Carlo waveform", "int"),
    # Monte Carlo sigmas
    Param("sigma_offset_v", "montecarlo", 1.5e-3, "amplifier offset (V)", "nonneg"),
    Param("sigma_is_rel", "montecarlo", 0.02, "saturation-current mismatch of each diode (relative)",
          "nonneg"),
    Param("sigma_r_rel", "montecarlo", 0.05, "resistor tolerance, R1 and R2 together (relative)", "nonneg"),
    Param("sigma_c_rel", "montecarlo", 0.05, "capacitance spread, all nodes together (relative)", "nonneg"),
    Param("sigma_i_start_rel", "montecarlo", 0.10, "startup current spread (relative)", "nonneg"),
    Param("sigma_leak_ln", "montecarlo", 0.0, "leakage spread: standard deviation of ln(leakage), each node"
          " independently (log-normal)", "nonneg"),
    # per-part deviations (zero for the nominal design; set by sample_population)
    Param("is_dev_q1", "variation", 0.0, "relative deviation of Q1's saturation current", "float"),
    Param("is_dev_q2", "variation", 0.0, "relative deviation of Q2's saturation current", "float"),
    Param("is_dev_q3", "variation", 0.0, "relative deviation of Q3's saturation current", "float"),
    Param("r_dev", "variation", 0.0, "relative deviation of R1 and R2", "float"),
    Param("c_dev", "variation", 0.0, "relative deviation of every node capacitance", "float"),
)

PARAM_BY_NAME = {p.name: p for p in PARAMS}
SECTIONS = tuple(dict.fromkeys(p.section for p in PARAMS))


class _DesignMethods:
    """Behaviour of :class:`Design` (the fields come from :data:`PARAMS`)."""

    def replace(self, **params) -> "Design":
        """A copy with some parameters changed (validated like the design file)."""
        checked = {name: _check(name, value, where="Design.replace") for name, value in params.items()}
        return dataclasses.replace(self, **checked)

    def values(self) -> dict[str, Any]:
        """The design's parameters by flat name, as written (before temperature laws)."""
        return {p.name: getattr(self, p.name) for p in PARAMS}

    def resolved(self, temperature_c: float | None = None) -> dict[str, Any]:
        """Every parameter in force at ``temperature_c`` (default: the design's temperature_c)."""
        t = self.temperature_c if temperature_c is None else float(temperature_c)
        return {k: (float(v) if isinstance(v, np.floating) else v) for k, v in resolve_params(self.values(), t).items()}

    def content_hash(self) -> str:
        """Short stable hash of the parameter values (names the model's provenance)."""
        text = json.dumps(self.values(), sort_keys=True, default=str)
        return hashlib.sha256(text.encode()).hexdigest()


Design = dataclasses.make_dataclass(
    "Design",
    [(p.name, Any, dataclasses.field(default=p.default)) for p in PARAMS]
    + [("source", str, dataclasses.field(default="", compare=False))],
    bases=(_DesignMethods,), frozen=True,
)
Design.__module__ = __name__  # pickles by reference, so designs travel to worker processes
Design.__doc__ = "A bandgap core with its startup circuit; fields are the flat names of PARAMS (SI units)."


def resolve_params(values: Mapping[str, Any], temperature_c) -> dict[str, Any]:
    """Apply the temperature laws and per-part deviations. Values may be numpy arrays (Monte Carlo).

    Returns every parameter by its flat name, with temperature-dependent ones at ``temperature_c``,
    plus ``ut_v`` (kT/q) and ``r2_ohm``.
    """
    v = dict(values)
    t = temperature_c
    dt = t - v["tnom_c"]
    r_scale = (1.0 + v["r_dev"]) * (1.0 + v["r_tc1_per_c"] * dt)
    c_scale = 1.0 + v["c_dev"]
    ratio_t = (t + physics.ZERO_C_K) / (v["tnom_c"] + physics.ZERO_C_K)
    out = dict(v)
    out.update(
        temperature_c=t,
        ut_v=physics.thermal_voltage(t),
        is_a=physics.saturation_current(v["is_a"], t, v["tnom_c"], v["is_xti"], v["eg_ev"]),
        r1_ohm=v["r1_ohm"] * r_scale,
        r2_ohm=v["r1_ohm"] * v["r2_over_r1"] * r_scale,
        mos_vt0_v=v["mos_vt0_v"] + v["mos_vt0_tc_v_per_c"] * dt,
        mos_i_spec_a=v["mos_i_spec_a"] * ratio_t ** (v["mos_mobility_exp"] + 2.0),
        amp_vcm_min_v=v["amp_vcm_min_v"] + v["amp_vcm_min_tc_v_per_c"] * dt,
        **{k: physics.doubling_law(v[k], t, v["tnom_c"], v["leak_doubling_c"])
           for k in ("leak_q1_a", "leak_q2_a", "leak_out_a")},
        **{p.name: v[p.name] * c_scale for p in PARAMS if p.section == "capacitance"},
        c_kick_f=v["c_kick_f"] * c_scale,
    )
    return out


def _check(name: str, value: Any, *, where: str) -> Any:
    """Convert and validate one parameter value; ``where`` names the file/section for the message."""
    spec = PARAM_BY_NAME.get(name)
    if spec is None:
        close = difflib.get_close_matches(name, PARAM_BY_NAME, n=3)
        hint = f" (did you mean {', '.join(close)}?)" if close else ""
        raise ModelError(f"{where}: unknown parameter {name!r}{hint}")
    label = f"{where}: {name}"
    if spec.kind == "str":
        return str(value)
    if spec.kind == "choice":
        if str(value) not in spec.choices:
            raise ModelError(f"{label} = {value!r}: expected one of {', '.join(spec.choices)}")
        return str(value)
    if spec.kind == "floats":
        items = value.split(",") if isinstance(value, str) else value
        if not isinstance(items, (list, tuple)) or not items:
            raise ModelError(f"{label}: expected a non-empty list of numbers")
        return tuple(_number(x, label) for x in items)
    number = _number(value, label)
    if spec.kind == "int":
        if not float(number).is_integer() or number < 2:
            raise ModelError(f"{label} = {value!r}: expected a whole number ≥ 2")
        return int(number)
    if math.isnan(number):
        raise ModelError(f"{label}: not a number")
    if spec.kind == "positive" and not number > 0:
        raise ModelError(f"{label} = {value!r}: must be > 0")
    if spec.kind == "nonneg" and not number >= 0:
        raise ModelError(f"{label} = {value!r}: must be ≥ 0")
    if spec.kind != "positive" and math.isinf(number):
        raise ModelError(f"{label} = {value!r}: must be finite")
    return number


def _number(value: Any, label: str) -> float:
    if isinstance(value, bool):
        raise ModelError(f"{label} = {value!r}: expected a number")
    try:
        return float(value)
    except (TypeError, ValueError):
        raise ModelError(f"{label} = {value!r}: expected a number") from None


def design_from_mapping(data: Mapping[str, Any], *, where: str = "design") -> "Design":
    """Build a Design from parsed TOML (sections of flat names); unknown keys are errors."""
    values: dict[str, Any] = {}
    for section, table in data.items():
        if section not in SECTIONS:
            raise ModelError(f"{where}: unknown section [{section}] (sections: {', '.join(SECTIONS)})")
        if not isinstance(table, dict):
            raise ModelError(f"{where}: [{section}] must be a table of parameters")
        for name, value in table.items():
            spec = PARAM_BY_NAME.get(name)
            if spec is not None and spec.section != section:
                raise ModelError(f"{where}: [{section}] {name}: belongs in section [{spec.section}]")
            values[name] = _check(name, value, where=f"{where}: [{section}]")
    return Design(**values)


def load_design(path, overrides: Mapping[str, str | float] | None = None) -> "Design":
    """Read a design file; ``overrides`` by flat parameter name win over the file (``i_start_a``)."""
    path = Path(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ModelError(f"{path}: no such design file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ModelError(f"{path}: cannot read the design file ({exc})") from None
    except tomllib.TOMLDecodeError as exc:
        raise ModelError(f"{path}: not valid TOML ({exc})") from None
    design = design_from_mapping(data, where=str(path))
    checked = {name: _check(name, value, where=f"{path}: override") for name, value in (overrides or {}).items()}
    return dataclasses.replace(design, **checked, source=str(path))


def parse_assignments(items) -> dict[str, str]:
    """``["i_start_a=2e-6", ...]`` → {"i_start_a": "2e-6"}; a malformed item is a ModelError."""
    out: dict[str, str] = {}
    for item in items or ():
        name, sep, value = str(item).partition("=")
        if not sep or not name.strip():
            raise ModelError(f"--set {item!r}: expected NAME=VALUE")
        out[name.strip()] = value.strip()
    return out
