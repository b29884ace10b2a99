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
from pathlib import Path

import numpy as np

from labtool.errors import UsageError
from labtool.execute import add_scheduler_option
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
    from labtool._api.results import predict
    from labtool.model import load_design
    from labtool.model.design import parse_assignments

    design = load_design(args.design, parse_assignments(args.assignments))
    temp = None if args.temp is None else parse_quantity(args.temp, "C", what="--temp")
    ramp = None if args.ramp is None else parse_quantity(args.ramp, "s", what="--ramp")
    if ramp is not None and not ramp > 0:
        raise UsageError(f"--ramp {args.ramp}: must be > 0")
    if args.montecarlo is not None and args.montecarlo < (2 if args.rare else 1):
        raise UsageError(f"--montecarlo {args.montecarlo}: must be ≥ {2 if args.rare else 1}")
    samples = (args.montecarlo or RARE_SAMPLES) if args.rare else args.montecarlo
    prediction = predict(design, temperature_c=temp, ramp_s=ramp, samples=samples, rare=args.rare, seed=args.seed,
                         scheduler=args.scheduler)
    if args.waveform:
        write_waveform(prediction.capture, args.waveform)
    out = {**prediction.to_dict(), "source": str(Path(args.design))}
    if args.json:
        print(json.dumps(out))
    else:
        print(summary_text(out, args.waveform))
    return 0


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
