"""``labtool calibrate CAMPAIGN --model DESIGN [--fit NAMES] [--out FILE]``: fit model parameters to the lot,
write the calibrated design, predict stuck-at-zero ppm where nobody measured. The simulated parts are
measured with the limits the campaign was measured with."""

from __future__ import annotations

import json
from pathlib import Path

from labtool.errors import UsageError
from labtool.execute import parse_scheduler
from labtool.stats.calibrate import CAPACITANCE_SCALE, calibrate, write_design
from labtool.stats.sources import add_monte_carlo_options, load_measured, text_table
from labtool.stats.table import parse_keys
from labtool.units import parse_quantity


def register(sub) -> None:
    p = sub.add_parser("calibrate", help="fit startup-model parameters to a measured lot and predict field stuck ppm")
    p.add_argument("campaign")
    p.add_argument("--model", required=True, metavar="DESIGN", help="design file to calibrate")
    p.add_argument("--fit", metavar="NAMES", default=CAPACITANCE_SCALE,
                   help=f"comma-separated design parameters to fit, e.g. i_start_a,sigma_offset_v; "
                        f"{CAPACITANCE_SCALE} scales every capacitance (default: {CAPACITANCE_SCALE})")
    p.add_argument("--out", metavar="FILE", default=None,
                   help="calibrated design file to write (default: DESIGN-calibrated.toml in this folder)")
    p.add_argument("--at", metavar="RAMP@TEMP", action="append", default=None,
                   help="set-up to predict stuck ppm at, e.g. 10ms@-40 (repeatable; default: unmeasured "
                        "corners of the design's ramp_times_s × temperatures_c)")
    add_monte_carlo_options(p, samples=60, samples_help="Monte Carlo parts per measured set-up and likelihood "
                                                         "evaluation")
    p.add_argument("--predict-samples", type=int, default=1000, metavar="N",
                   help="most importance samples (transients) per predicted set-up and parameter point, for the "
                        "stuck ppm (default 1000)")
    p.add_argument("--json", action="store_true", help="the result as one JSON object")
    p.set_defaults(handler=run)


def parse_setup(text: str) -> tuple[float, float]:
    ramp, sep, temp = text.partition("@")
    if not sep:
        raise UsageError(f"--at {text!r}: expected RAMP@TEMP, e.g. 10ms@-40")
    try:
        return parse_quantity(ramp, "s", what="--at ramp"), float(temp.strip().removesuffix("C").removesuffix("°"))
    except ValueError:
        raise UsageError(f"--at {text!r}: temperature {temp!r} is not a number of °C") from None


def run(args) -> int:
    from labtool.model import load_design

    if args.samples < 5 or args.predict_samples < 2:
        raise UsageError("--samples needs at least 5 parts and --predict-samples at least 2")
    design = load_design(args.model)
    at = [parse_setup(a) for a in args.at] if args.at else None
    table, limits = load_measured(args.campaign)
    result = calibrate(table, design, fit=parse_keys(args.fit, default=()), n=args.samples, seed=args.seed,
                       predict_at=at, n_predict=args.predict_samples, scheduler=parse_scheduler(args.scheduler),
                       limits=limits)
    out = Path(args.out) if args.out else Path(f"{Path(args.model).stem}-calibrated.toml")
    fitted = "; ".join(f"{p.name} = {p.estimate:.6g} (95 % CI {_num(p.ci95_low)} to {_num(p.ci95_high)}, {p.interval})"
                       for p in result.parameters)
    write_design(result.design, out, header=f"Calibrated by labtool calibrate from {args.campaign} and {args.model}.\n"
                                             f"{fitted}\nBehavioural model, not transistor-level sign-off.")
    if args.json:
        print(json.dumps({**result.to_json_dict(), "out": str(out)}, allow_nan=False))
        return 0
    print(f"calibrated {', '.join(p.name for p in result.parameters)} on {result.n_captures} captures at "
          f"{len(result.setups)} set-ups ({result.n_evaluations} Monte Carlo runs of {result.samples_per_setup} "
          f"parts per set-up; {result.method})")
    print(f"log-likelihood {result.log_likelihood_initial:.6g} → {result.log_likelihood:.6g}")
    print(text_table([vars(p) for p in result.parameters],
                     ("name", "initial", "estimate", "ci95_low", "ci95_high", "interval")))
    if result.predictions:
        print("\npredicted field stuck at zero per corner (calibrated model, importance sampling; the range covers "
              "sampling and parameter uncertainty):")
        print(text_table([vars(p) for p in result.predictions],
                         ("ramp_s", "temperature_c", "stuck_ppm", "stuck_ppm_low", "stuck_ppm_high", "beta",
                          "n_transients")))
    print(f"\nwrote {out}")
    return 0


def _num(value) -> str:
    return "-" if value is None else f"{value:.6g}"
