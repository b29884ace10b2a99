"""Write the demo scenario: invented ZR-4410 captures from lots ZR24A and ZR24B in six file shapes.

Run ``python sample_runs/make_samples.py [OUT_DIR]``; the output is byte-for-byte reproducible (fixed
seeds, fixed zip and gzip timestamps). Every waveform comes from :func:`trace`: a transient of the
startup model (labtool.model) of the demo design, per-part variation from sample_population, and the
failure recipes of labtool.model.scenarios for the four failing captures. All data here is invented
for the demo.
"""

from __future__ import annotations

import csv
import gzip
import io
import re
import sys
import zipfile
from dataclasses import dataclass
from datetime import datetime
from functools import lru_cache
from pathlib import Path

import numpy as np

SEED = 4410
N_SAMPLES = 1000
VDD_V = 1.8
LOTS = {"ZR24A": ("W03", ("p01", "p02")), "ZR24B": ("W07", ("p03", "p04"))}
DIES = {"p01": (3, 5), "p02": (6, 2), "p03": (4, 4), "p04": (7, 6)}  # (die_x, die_y) on its wafer
TEMPERATURES_C = (-40.0, 25.0, 125.0)
RAMPS_S = (10e-6, 1e-3, 0.1)
# Sample interval and pre-trigger time per ramp: the record shows the whole ramp and the settling.
TIMING = {10e-6: (0.2e-6, -20e-6), 1e-3: (2.5e-6, -0.25e-3), 0.1: (250e-6, -25e-3)}
RAMP_LABELS = {10e-6: "10us", 1e-3: "1ms", 0.1: "100ms"}
# The failing captures of the scenario (everything else starts normally).
FAILURES = {
    ("ZR24B", "p04", -40.0, 0.1): "stuck_at_zero",
    ("ZR24A", "p02", -40.0, 1e-3): "slow_start",
    ("ZR24B", "p03", 125.0, 10e-6): "ringing",
    ("ZR24A", "p01", 125.0, 0.1): "recollapse",
}
# The recipe (labtool.model.scenarios) each failing capture is simulated with.
RECIPES = {"stuck_at_zero": "startup_open", "slow_start": "starved_amplifier", "ringing": "late_strong_pulldown",
           "recollapse": "hot_leaky_q1"}
PART_ORDER = ("p01", "p02", "p03", "p04")  # index into the seeded population of per-part variation
DESIGN = Path(__file__).resolve().parent / "design.toml"
MODEL_POINTS = 3000  # samples of each model transient, resampled onto the scope's record
FIXED_TIME = datetime(2026, 1, 15, 9, 0, 0)


@dataclass(frozen=True)
class Spec:
    index: int
    lot: str
    wafer: str
    part: str
    temperature_c: float
    ramp_s: float
    behaviour: str  # "started" or one of the failure kinds

    @property
    def die(self) -> tuple[int, int]:
        return DIES[self.part]

    @property
    def temp_label(self) -> str:
        return f"m{-self.temperature_c:g}" if self.temperature_c < 0 else f"{self.temperature_c:g}"


@dataclass(frozen=True)
class Trace:
    t0_s: float
    dt_s: float
    vdd_v: np.ndarray
    vref_v: np.ndarray
    idd_a: np.ndarray

    def times(self) -> np.ndarray:
        return self.t0_s + self.dt_s * np.arange(self.vdd_v.size)


def specs() -> list[Spec]:
    out = []
    for lot, (wafer, parts) in LOTS.items():
        for part in parts:
            for temp in TEMPERATURES_C:
                for ramp in RAMPS_S:
                    kind = FAILURES.get((lot, part, temp, ramp), "started")
                    out.append(Spec(len(out), lot, wafer, part, temp, ramp, kind))
    return out


def _quantise(v: np.ndarray, lsb: float) -> np.ndarray:
    """An 8-bit scope channel: codes 0..255 of ``lsb`` volts (or amperes) each, zero at code 0."""
    return np.clip(np.round(v / lsb), 0, 255) * lsb + 0.0  # + 0.0: no "-0.00" in the files


@lru_cache(maxsize=1)
def _parts() -> dict:
    """The demo design with per-part variation (labtool.model.sample_population, seeded)."""
    from labtool.model import load_design, sample_population

    return dict(zip(PART_ORDER, sample_population(load_design(DESIGN), len(PART_ORDER), SEED)))


def trace(spec: Spec) -> Trace:
    """Supply ramp, reference output and supply current of one power-up, from the startup model.

    The part's design (its seeded variation, plus the failure recipe for the four failing captures)
    is simulated from an unpowered state by labtool.model.simulate and resampled onto the scope's
    record (0 V before the ramp starts); then noise and 8-bit quantisation as a scope records them.
    """
    from labtool.model import simulate
    from labtool.model.scenarios import SCENARIOS

    rng = np.random.default_rng([SEED, spec.index])
    dt, t0 = TIMING[spec.ramp_s]
    t = t0 + dt * np.arange(N_SAMPLES)
    design = _parts()[spec.part]
    if spec.behaviour != "started":
        design = SCENARIOS[RECIPES[spec.behaviour]].apply(design)
    cap = simulate(design, ramp_s=spec.ramp_s, temperature_c=spec.temperature_c, t_stop_s=float(t[-1]),
                   n_samples=MODEL_POINTS)
    t_model = cap.times()
    vdd, vref, idd = (np.interp(t, t_model, cap.channel(role).values, left=0.0)
                      for role in ("supply", "output", "supply_current"))
    # Both voltage channels have their zero two codes up the screen, so noise around 0 V is kept.
    vdd = _quantise(vdd + rng.normal(0, 0.003, t.size) + 0.020, 0.010) - 0.020
    vref = _quantise(vref + rng.normal(0, 0.0015, t.size) + 0.016, 0.008) - 0.016
    idd = _quantise(idd + rng.normal(0, 0.1e-6, t.size), 0.25e-6)
    return Trace(t0_s=t0, dt_s=dt, vdd_v=vdd, vref_v=vref, idd_a=idd)


# -- file shapes -----------------------------------------------------------------------------------
def _num(values: np.ndarray, fmt: str, decimal: str = ".") -> list[str]:
    out = [format(v, fmt) for v in values]
    return [s.replace(".", ",") for s in out] if decimal == "," else out


def write_plain_csv(path: Path, spec: Spec, tr: Trace) -> None:
    """Comma-delimited, units in brackets, times in seconds."""
    cols = zip(_num(tr.times(), ".6g"), _num(tr.vdd_v, ".2f"), _num(tr.vref_v, ".3f"))
    text = "time [s],vdd [V],vref [V]\n" + "".join(f"{a},{b},{c}\n" for a, b, c in cols)
    path.write_text(text, encoding="utf-8")


def write_semicolon_csv(path: Path, spec: Spec, tr: Trace) -> None:
    """Semicolon + decimal comma, key/value preamble, times in ms, CRLF, UTF-8 byte-order mark."""
    lines = ["Instrument;bench scope (8-bit)", f"Lot;{spec.lot}", f"Wafer;{spec.wafer}", f"Part;{spec.part}",
             f"Die X;{spec.die[0]}", f"Die Y;{spec.die[1]}", f"Temperature [°C];{spec.temperature_c:g}", f"Ramp;{RAMP_LABELS[spec.ramp_s]}", "",
             "Time [ms];CH1 VDD [V];CH2 VREF [V]"]
    cols = zip(_num(tr.times() * 1e3, ".6g", ","), _num(tr.vdd_v, ".2f", ","), _num(tr.vref_v, ".3f", ","))
    lines += [f"{a};{b};{c}" for a, b, c in cols]
    path.write_bytes(b"\xef\xbb\xbf" + ("\r\n".join(lines) + "\r\n").encode("utf-8"))


def write_gzip_csv(path: Path, spec: Spec, tr: Trace) -> None:
    """Gzip-compressed CSV, units in parentheses, times in µs, output in mV, supply current in µA."""
    cols = zip(_num(tr.times() * 1e6, ".6g"), _num(tr.vdd_v, ".2f"), _num(tr.vref_v * 1e3, ".0f"),
               _num(tr.idd_a * 1e6, ".2f"))
    text = "Time (us),VDD (V),VREF (mV),IDD (uA)\n" + "".join(f"{a},{b},{c},{d}\n" for a, b, c, d in cols)
    path.write_bytes(gzip.compress(text.encode("utf-8"), mtime=0))


def write_whitespace(path: Path, spec: Spec, tr: Trace) -> None:
    """Whitespace-aligned columns with a units row under the header, a comment line on top."""
    rows = [["time", "vdd", "vref", "idd"], ["us", "V", "V", "uA"]]
    rows += [list(r) for r in zip(_num(tr.times() * 1e6, ".6g"), _num(tr.vdd_v, ".2f"), _num(tr.vref_v, ".3f"),
                                  _num(tr.idd_a * 1e6, ".2f"))]
    text = "# ZR-4410 power-up capture, bench script export\n"
    text += "".join("".join(cell.rjust(12) for cell in row) + "\n" for row in rows)
    path.write_text(text, encoding="utf-8")


def write_index_only(path: Path, spec: Spec, tr: Trace) -> None:
    """A sample index instead of times; the interval and start time are in the preamble."""
    lines = [f"Sample Interval,{tr.dt_s:.6g}", f"Start Time,{tr.t0_s:.6g}", f"Record Length,{tr.vdd_v.size}",
             "Vertical Resolution,8 bit", "Sample,VDD,VREF"]
    lines += [f"{i},{a},{b}" for i, (a, b) in enumerate(zip(_num(tr.vdd_v, ".2f"), _num(tr.vref_v, ".3f")))]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def write_workbook(path: Path, items: list[tuple[Spec, Trace]]) -> None:
    """One sheet per capture (part and ramp in cells above the header), a conditions sheet for the rest."""
    import openpyxl

    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "conditions"
    first = items[0][0]
    for row in (("lot", first.lot), ("wafer", first.wafer), ("temperature [°C]", first.temperature_c),
                ("fixture", "socket board B2")):
        ws.append(row)
    for spec, tr in items:
        sheet = wb.create_sheet(f"{spec.part}_{RAMP_LABELS[spec.ramp_s]}")
        sheet.append(("part", spec.part))
        sheet.append(("die_x", spec.die[0]))
        sheet.append(("die_y", spec.die[1]))
        sheet.append(("ramp", RAMP_LABELS[spec.ramp_s]))
        sheet.append(())
        sheet.append(("Time (us)", "VDD (V)", "VREF (V)", "IDD (uA)"))
        for row in zip(np.round(tr.times() * 1e6, 6), tr.vdd_v.round(2), tr.vref_v.round(3),
                       (tr.idd_a * 1e6).round(2)):
            sheet.append(tuple(float(v) for v in row))
    wb.properties.created = wb.properties.modified = FIXED_TIME
    buf = io.BytesIO()
    wb.save(buf)
    path.write_bytes(_fixed_zip_times(buf.getvalue()))


def _fixed_zip_times(data: bytes) -> bytes:
    """Rewrite a zip with fixed member timestamps (and the save time openpyxl stamps into the core
    properties) so the workbook's bytes, and so its hash, are reproducible."""
    out = io.BytesIO()
    stamp = FIXED_TIME.strftime("%Y-%m-%dT%H:%M:%SZ").encode()
    with zipfile.ZipFile(io.BytesIO(data)) as src, zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            body = src.read(info.filename)
            if info.filename == "docProps/core.xml":
                body = re.sub(rb"(<dcterms:modified[^>]*>)[^<]*", rb"\g<1>" + stamp, body)
            member = zipfile.ZipInfo(info.filename, date_time=FIXED_TIME.timetuple()[:6])
            member.compress_type = zipfile.ZIP_DEFLATED
            dst.writestr(member, body)
    return out.getvalue()


# -- the scenario --------------------------------------------------------------------------------------
SHAPES = {  # (lot, temperature) → folder and how conditions are given
    ("ZR24A", 25.0): "bench_csv", ("ZR24A", -40.0): "scope_semicolon", ("ZR24A", 125.0): "gz",
    ("ZR24B", 25.0): "whitespace", ("ZR24B", -40.0): "index_only", ("ZR24B", 125.0): "workbooks",
}


def file_name(spec: Spec, serial: int) -> str:
    folder = SHAPES[(spec.lot, spec.temperature_c)]
    ramp = RAMP_LABELS[spec.ramp_s]
    return {
        "bench_csv": f"bench_csv/{spec.lot}_{spec.part}_{spec.temp_label}C_{ramp}.csv",
        "scope_semicolon": f"scope_semicolon/{spec.lot}_{spec.part}_{spec.temp_label}C_{ramp}.csv",
        "gz": f"gz/hot_run{serial:02d}.csv.gz",
        "whitespace": f"whitespace/run_{serial:04d}.dat",
        "index_only": f"index_only/cold_{serial:02d}.csv",
    }[folder]


WRITERS = {"bench_csv": write_plain_csv, "scope_semicolon": write_semicolon_csv, "gz": write_gzip_csv,
           "whitespace": write_whitespace, "index_only": write_index_only}
# Shapes whose files carry no conditions of their own: the manifest gives them.
IN_MANIFEST = ("bench_csv", "gz", "whitespace", "index_only")


def main(out_dir: Path) -> list[Path]:
    written: list[Path] = []
    manifest_rows = []
    workbook_items: list[tuple[Spec, Trace]] = []
    serial: dict[str, int] = {}
    for spec in specs():
        folder = SHAPES[(spec.lot, spec.temperature_c)]
        tr = trace(spec)
        if folder == "workbooks":
            workbook_items.append((spec, tr))
            continue
        serial[folder] = serial.get(folder, 0) + 1
        name = file_name(spec, serial[folder])
        path = out_dir / name
        path.parent.mkdir(parents=True, exist_ok=True)
        WRITERS[folder](path, spec, tr)
        written.append(path)
        if folder in IN_MANIFEST:
            manifest_rows.append([name, spec.lot, spec.wafer, spec.part, *spec.die, f"{spec.temperature_c:g}",
                                  RAMP_LABELS[spec.ramp_s], "B1" if spec.lot == "ZR24A" else "B2"])
    book = out_dir / "workbooks" / "ZR24B_W07_125C.xlsx"
    book.parent.mkdir(parents=True, exist_ok=True)
    write_workbook(book, workbook_items)
    written.append(book)
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(["file", "lot", "wafer", "part", "die_x", "die_y", "temperature_c", "ramp", "board"])
    writer.writerows(manifest_rows)
    (out_dir / "manifest.csv").write_text(buf.getvalue(), encoding="utf-8")
    written.append(out_dir / "manifest.csv")
    return written


if __name__ == "__main__":
    target = Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).resolve().parent
    files = main(target)
    print(f"wrote {len(files)} files to {target}")
