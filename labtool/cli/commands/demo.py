"""``labtool demo [--out DIR]``: the ZR-4410 scenario end to end (what ``make demo`` runs).

Ingests ``sample_runs/`` of this checkout (conditions from its manifest and the files' own
preambles) into a fresh campaign ``DIR/campaign``, measures every capture, prints the lot statistics
and the comparison with ``sample_runs/design.toml``, and writes the report to ``DIR/report``.
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

import labtool
from labtool.errors import UsageError
from labtool.execute import parse_scheduler
from labtool.cli.commands.report import print_files
from labtool.store.campaign import CATALOG_NAME

# The demo's limits: sample_runs/README.md counts the 400 µs start as slow against a 100 µs limit.
DEMO_MAX_DELAY_S = 100e-6
DEMO_MODEL_SAMPLES = 100  # Monte Carlo samples per measured set-up: a demo, not a sign-off
DEMO_SEED = 1


def register(sub) -> None:
    p = sub.add_parser("demo", help="run the invented ZR-4410 scenario end to end: ingest sample_runs/, "
                                    "measure, lot statistics, model comparison, report")
    p.add_argument("--out", metavar="DIR", default="demo_out",
                   help="folder for the demo campaign and report (default: demo_out in the current directory)")
    p.set_defaults(handler=run)


def sample_runs_dir() -> Path:
    """``sample_runs/`` beside the installed (editable) package, i.e. in the source checkout."""
    folder = Path(labtool.__file__).resolve().parent.parent / "sample_runs"
    if not (folder / "manifest.csv").is_file():
        raise UsageError(f"{folder}: the sample runs are not there (no manifest.csv); the demo needs a source "
                         "checkout of labtool installed with `pip install -e .` (as `make demo` does)")
    return folder


def fresh_campaign(path: Path) -> Path:
    """Remove a previous demo campaign at ``path``; refuse to touch anything that is not a campaign."""
    if path.exists():
        if not (path / CATALOG_NAME).is_file():
            raise UsageError(f"{path}: exists and is not a labtool campaign; choose another --out")
        shutil.rmtree(path)
    return path


def run(args) -> int:
    from labtool.ingest import IngestOptions, ingest_paths, load_manifest
    from labtool.measure import Limits
    from labtool.measure.batch import measure_campaign
    from labtool.model import load_design
    from labtool.report.build import write_report
    from labtool.cli.commands.lot import GROUP_COLUMNS, readable_setup
    from labtool.stats.compare import compare
    from labtool.stats.lot import lot_statistics
    from labtool.stats.predictions import predictions_from_model
    from labtool.stats.sources import text_table
    from labtool.stats.table import FAILED_TO_HOLD, part_labels
    from labtool.store import Campaign

    samples = sample_runs_dir()
    out = Path(args.out)
    campaign_dir = fresh_campaign(out / "campaign")
    scheduler = parse_scheduler(None)
    manifest = samples / "manifest.csv"
    print(f"1/5 ingest {samples} (conditions from {manifest.name} and the files' preambles)")
    with Campaign.open(campaign_dir, create=True) as camp:
        ingested = ingest_paths([str(samples)], camp, IngestOptions(manifest=load_manifest(manifest)), scheduler,
                                exclude=[str(manifest)])
        for _, message in ingested.failed:
            print(message, file=sys.stderr)
        print(f"    {len(ingested.added)} captures into {campaign_dir}")
        limits = Limits(max_delay_s=DEMO_MAX_DELAY_S)
        print(f"2/5 measure (slow start above {DEMO_MAX_DELAY_S * 1e6:g} µs)")
        measured = measure_campaign(camp, limits, scheduler)
        for cid, message in measured.failed:
            print(f"{cid}: {message}", file=sys.stderr)
        table = camp.measurements()
        print(f"    {measured.measured} measured: " + ", ".join(
            f"{n} {v}" for v, n in table["verdict"].value_counts().items()))
        print("3/5 lot statistics (parts and starts per lot; delays per set-up)")
        stats = lot_statistics(table, ("lot",), DEMO_MAX_DELAY_S)
        print(_indent(text_table([s.to_json_dict() for s in stats], ("lot", *GROUP_COLUMNS))))
        print(_indent(text_table([readable_setup(r) for s in stats for r in s.setup_rows()],
                                 ("lot", "ramp_s", "temperature_c", "n_captures", "delay_median_s", "delay_p05_s",
                                  "delay_p95_s", "output_valid", "vsupply_at_valid_median_v"))))
        print(f"4/5 compare with {samples / 'design.toml'} ({DEMO_MODEL_SAMPLES} Monte Carlo samples per set-up; "
              "a behavioural model, not transistor-level sign-off)")
        design = load_design(samples / "design.toml")
        predictions = predictions_from_model(design, table, n=DEMO_MODEL_SAMPLES, seed=DEMO_SEED, scheduler=scheduler,
                                             limits=limits)
        for c in compare(table, predictions, ("lot",)):
            print(f"    lot {c.group['lot']}: {c.finding_text}")
        # The scenario treats every part that once failed to hold its level as returned for triage.
        labels = part_labels(table)
        returned = sorted(set(labels[table["verdict"].isin(FAILED_TO_HOLD) & (labels != "")]))
        print(f"5/5 report (triage sheets for {', '.join(returned) or 'no part'})")
        files = write_report(camp, out / "report", by=("lot",), design=design, scheduler=scheduler,
                             predictions=predictions, model_samples=DEMO_MODEL_SAMPLES, seed=DEMO_SEED,
                             parts=returned, title="ZR-4410 startup report (demo scenario)")
    for rep in files.triage:
        print(f"    triage {rep.part}: {rep.top.name} first (posterior {rep.top.posterior:.2f}); {rep.conclusion.text}")
    status = print_files(files)
    print(f"\nOpen {files.html.resolve()} in a browser; the workbook is {files.workbook.resolve()}.")
    return max(status, 1 if ingested.failed or measured.failed else 0)


def _indent(text: str) -> str:
    return "\n".join("    " + line for line in text.splitlines())
