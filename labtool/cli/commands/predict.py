"""``labtool predict DESIGN``: what the behavioural startup model predicts for a design.

DC picture (operating point, feedback polarity, offset and startup limits), the nominal transient
measured like a capture, and optionally a Monte Carlo at one (ramp, temperature) condition: plain
(``--montecarlo N``) or, with ``--rare``, the stuck-at-zero probability by importance sampling at the
ppm level with its interval (``--montecarlo N`` is then the most importance samples). With ``--json``
the last stdout line is one object with ``params``, ``dc``, ``transient`` and ``montecarlo``.
Behavioural model, not transistor-level sign-off.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

from labtool.errors import UsageError
from labtool.execute import add_scheduler_option, parse_scheduler
from labtool.units import format_si, parse_quantity


def register(sub) -> None:
    p = sub.add_parser("predict", help="behavioural startup model of a design: DC, transient, Monte Carlo",
                       usage="labtool predict DESIGN [--json] [--set NAME=VALUE ...] [--temp C] [--ramp S] "
                             "[--montecarlo N] [--rare] [--seed S] [--waveform OUT.csv] [--scheduler SPEC]",
                       description="Behavioural model, not transistor-level sign-off. Give DESIGN first: "
                                   "--set takes every NAME=VALUE that follows it.")
    p.add_argument("design", metavar="DESIGN", help="design file (TOML, schema in docs/model.md)")
    p.add_argument("--json", action="store_true", help="one JSON object as the last line of output")
    p.add_argument("--set", dest="assignments", action="extend", nargs="+", default=[], metavar="NAME=VALUE",
                   help="override a design parameter by its flat name, e.g. i_start_a=2e-6")
    p.add_argument("--temp", metavar="C", help="junction temperature in °C (default: the design's)")
    p.add_argument("--ramp", metavar="S", help="supply ramp time, 10e-6 or 10us (default: the design's)")
    p.add_argument("--montecarlo", metavar="N", type=int,
                   help="Monte Carlo with N parts at this condition (with --rare: at most N importance samples; "
                        f"default {RARE_SAMPLES})")
    p.add_argument("--rare", action="store_true",
                   help="stuck-at-zero probability at the ppm level with a 95 %% interval: the most probable stuck "
                        "point, then importance sampling around it (every sample a full transient)")
    p.add_argument("--seed", metavar="S", type=int, default=1, help="Monte Carlo seed (default 1)")
    p.add_argument("--waveform", metavar="OUT.csv", help="write the nominal transient as a CSV capture")
    add_scheduler_option(p)
    p.set_defaults(handler=run)


RARE_SAMPLES = 4000


def _plain(value):
    """JSON-safe: numpy scalars to Python, tuples to lists, non-finite floats to null."""
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    return value


def write_waveform(capture, path: str) -> None:
    """The capture as a CSV with units in the header, readable by labtool's CSV importer."""
    cols = [("time", "s", capture.times())] + [(c.name, c.unit, c.values) for c in capture.channels]
    header = ",".join(f"{name} [{unit}]" for name, unit, _ in cols)
    data = np.column_stack([v for _, _, v in cols])
    try:
        with open(path, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(header + "\n")
            np.savetxt(fh, data, delimiter=",", fmt="%.9g")
    except OSError as exc:
        raise UsageError(f"--waveform {path}: cannot write ({exc.strerror})") from None


def run(args) -> int:
    from labtool.measure import measure_capture
    from labtool.model import DISCLAIMER, dc_analysis, load_design, monte_carlo, simulate
    from labtool.model.design import parse_assignments
    from labtool.model.montecarlo import summarise
    from labtool.stats.intervals import exact_interval

    design = load_design(args.design, parse_assignments(args.assignments))
    temp = design.temperature_c if args.temp is None else parse_quantity(args.temp, "C", what="--temp")
    ramp = design.ramp_s if args.ramp is None else parse_quantity(args.ramp, "s", what="--ramp")
    if not ramp > 0:
        raise UsageError(f"--ramp {args.ramp}: must be > 0")
    if args.montecarlo is not None and args.montecarlo < (2 if args.rare else 1):
        raise UsageError(f"--montecarlo {args.montecarlo}: must be ≥ {2 if args.rare else 1}")
    params = design.resolved(temp)
    params["ramp_s"] = ramp
    dc = dc_analysis(design, temp)
    capture = simulate(design, ramp_s=ramp, temperature_c=temp)
    nominal = measure_capture(capture).to_json_dict()
    transient = {k: nominal[k] for k in ("verdict", "t_supply_s", "delay_s", "rise_s", "settle_s",
                                         "overshoot_pct", "vout_final_v")}
    if args.waveform:
        write_waveform(capture, args.waveform)
    out = {"model": DISCLAIMER, "design": design.name, "source": str(Path(args.design)),
           "params": params, "dc": dc.to_json_dict(), "transient": transient}
    scheduler = parse_scheduler(args.scheduler) if args.scheduler else None
    if args.rare:
        out["montecarlo"] = rare_json(design, ramp, temp, args.montecarlo or RARE_SAMPLES, args.seed, scheduler)
    elif args.montecarlo:
        mc = monte_carlo(design, conditions=[(ramp, temp)], n=args.montecarlo, seed=args.seed, scheduler=scheduler)
        summary = summarise(mc.samples, mc.failures)
        measured = summary["n"]
        out["montecarlo"] = {"seed": args.seed, "ramp_s": ramp, "temperature_c": temp, "method": "plain Monte Carlo",
                             **summary, "p_stuck_ci95": list(exact_interval(summary["n_stuck"], measured))
                             if measured else None, "failed": _failed(mc.failures)}
    out = _plain(out)
    if args.json:
        print(json.dumps(out))
    else:
        print(summary_text(out, args.waveform))
    return 0


def _failed(failures) -> list[dict]:
    """The first samples that could not be simulated, with their parameters and the error."""
    return failures.head(20).to_dict(orient="records")


def rare_json(design, ramp: float, temp: float, n: int, seed: int, scheduler) -> dict:
    """The ``montecarlo`` object of ``--rare``: the importance-sampling result; the plain Monte Carlo's
    delay figures do not apply to importance samples (null)."""
    from labtool.model.rare import stuck_probability

    r = stuck_probability(design, ramp_s=ramp, temperature_c=temp, n=n, seed=seed, scheduler=scheduler)
    return {**r.to_json_dict(), "cause": r.cause(), **dict.fromkeys(
        ("delay_median_s", "delay_p05_s", "delay_p95_s", "delay_mean_s", "delay_std_s", "verdicts"))}


def summary_text(out: dict, waveform: str | None) -> str:
    from labtool.model.dc import startup_offered

    p, dc, tr = out["params"], out["dc"], out["transient"]
    si = format_si
    lines = [f"{out['design']} at {p['temperature_c']:g} °C, supply {p['vdd_v']:g} V ramped in {si(p['ramp_s'], 's')}"
             f" — {out['model']}"]
    if dc["i_op_a"] is None:
        lines.append("  operating point   none: the offset or mismatch removes the wanted point")
    else:
        lines.append(f"  operating point   i_op {si(dc['i_op_a'], 'A')}, ΔVBE {si(dc['dvbe_v'], 'V')}, "
                     f"VREF {dc['vref_v']:.4f} V (ideal PTAT {si(dc['i_ptat_ideal_a'], 'A')})")
    lines.append("  feedback          " + ", ".join(
        f"{s['polarity']} {si(s['from_a'], 'A')}–{si(s['to_a'], 'A')}" for s in dc["feedback"])
        + f"; switch-over at {si(dc['i_switch_a'], 'A')}")
    lines.append(f"  offset limit      an input offset at or below {si(dc['offset_limit_v'], 'V')} removes the wanted point")
    need = dc["i_start_min_a"]
    kind = p["startup_kind"]
    offered = startup_offered(p)  # a kick: I = C·dV/dt
    margin = ""
    if need and offered:
        margin = f" (design {si(offered, 'A')}{' while it lasts' if kind.startswith('kick') else ''}, margin ×{offered / need:.3g})"
    lines.append(f"  startup           {kind}: minimum escape current "
                 f"{si(need, 'A') if need is not None else 'none escapes'}{margin}")
    lines.append(f"  nominal transient {tr['verdict']}, delay {si(tr['delay_s'], 's')}, settle {si(tr['settle_s'], 's')}, "
                 f"overshoot {format(tr['overshoot_pct'], '.3g') if tr['overshoot_pct'] is not None else '—'} %, "
                 f"final {si(tr['vout_final_v'], 'V')}")
    mc = out.get("montecarlo")
    if mc and "beta" in mc:
        lines += rare_lines(mc)
    elif mc:
        lines.append(f"  Monte Carlo       n {mc['n']} (seed {mc['seed']}): p_stuck {_num(mc['p_stuck'])}, delay median "
                     f"{si(mc['delay_median_s'], 's')}, p05 {si(mc['delay_p05_s'], 's')}, p95 {si(mc['delay_p95_s'], 's')}")
    if mc and mc["n_failed"]:
        lines.append(f"  not simulated     {mc['n_failed']} samples failed to integrate or measure (parameters "
                     f"and errors in the JSON: montecarlo.failed)")
    if waveform:
        lines.append(f"  waveform          written to {waveform}")
    return "\n".join(lines)


def _num(value) -> str:
    return "—" if value is None else f"{value:.4g}"


def rare_lines(mc: dict) -> list[str]:
    """The readable lines of a ``--rare`` estimate: the probability with its interval, then the cause."""
    low, high = mc["p_stuck_ci95"]
    lines = [f"  stuck at zero     p_stuck {_num(mc['p_stuck'])} (95 % interval {_num(low)} to {_num(high)}; "
             f"{mc['n_transients']} transients, seed {mc['seed']}, effective sample size {mc['ess']:.0f})"]
    if mc["beta"] is not None:
        lines.append(f"  reliability index β = {mc['beta']:.2f} (first-order estimate Φ(−β) = {mc['p_form']:.3g})")
        lines.append(f"  most likely cause of a stuck start: {mc['cause']}")
    lines += [f"  warning: {w}" for w in mc["warnings"]]
    lines.append(f"  method            {mc['method']}")
    return lines
