"""Importing a large scope export: a 1-million-row CSV (plain, gzip, semicolon + decimal comma).

Invented data: time, a 1.8 V supply ramp and a 1.2 V reference as an 8-bit scope writes them. The
figures: ``read_path`` end to end, its stages, and a bare ``pyarrow.csv.read_csv`` of the same body
(the floor), best of several runs on the shared machine; then a batch ingest of the demo folder in
one process and in two worker processes.
"""

from __future__ import annotations

import gzip
import hashlib
import tempfile
import time
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv

from labtool.execute import Scheduler
from labtool.ingest import IngestOptions, ingest_paths, load_manifest, read_path
from labtool.ingest.csv_reader import parse_body
from labtool.ingest.sniff import sniff
from labtool.store import Campaign

N = 1_000_000


def make_csv(n: int = N, *, delimiter: str = ",", decimal: str = ".", names: tuple[str, str] = ("CH1 VDD", "CH2 VREF"),
             time_format: str = ".6e") -> bytes:
    rng = np.random.default_rng(0)
    t = np.arange(n) * 1e-9 - 1e-4
    vdd = np.round(np.clip(t / 1e-4, 0, 1) * 1.8 / 0.01 + rng.normal(0, 0.3, n)) * 0.01
    vref = np.round(1.2 * (1 - np.exp(-np.clip(t - 2e-5, 0, None) / 5e-6)) / 0.008 + rng.normal(0, 0.3, n)) * 0.008
    lines = "\n".join(f"{a:{time_format}}{delimiter}{b:.2f}{delimiter}{c:.3f}" for a, b, c in zip(t, vdd, vref))
    if decimal == ",":
        lines = lines.replace(".", ",")
    units = f"Time [s]{delimiter}{names[0]} [V]{delimiter}{names[1]} [V]"
    return (f"Record Length{delimiter}{n}\n{units}\n{lines}\n").encode()


def best(fn, runs: int = 5) -> float:
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        plain = make_csv()
        semi = make_csv(delimiter=";", decimal=",")
        files = {"plain CSV": ("a.csv", plain), "gzip CSV": ("a.csv.gz", gzip.compress(plain, 6, mtime=0)),
                 "semicolon + decimal comma": ("b.csv", semi),
                 # the slower paths a layout can take: roles from waveforms, a time base rebuilt from stamps
                 "generic names (roles by shape)": ("c.csv", make_csv(names=("CH1", "CH2"))),
                 "times printed to 1 µs (rebuilt)": ("d.csv", make_csv(time_format=".6f"))}
        for label, (name, data) in files.items():
            path = Path(tmp) / name
            path.write_bytes(data)
            seconds = best(lambda: read_path(str(path), IngestOptions()))
            print(f"read_path, {label}, {N:,} rows, {len(data) / 1e6:.1f} MB on disk: {seconds * 1e3:.0f} ms")
        layout = sniff(plain, "a.csv")
        print(f"  stages (plain): sha256 {best(lambda: hashlib.sha256(plain).hexdigest()) * 1e3:.0f} ms, "
              f"sniff {best(lambda: sniff(plain, 'a.csv')) * 1e3:.1f} ms, "
              f"parse_body {best(lambda: parse_body(plain, layout, 'a.csv')) * 1e3:.0f} ms")
        body = plain[layout.body_offset:]
        bare = best(lambda: pacsv.read_csv(
            pa.BufferReader(body), read_options=pacsv.ReadOptions(column_names=["t", "a", "b"]),
            convert_options=pacsv.ConvertOptions(column_types={k: pa.float64() for k in "tab"})))
        print(f"  bare pyarrow.csv.read_csv of the same body: {bare * 1e3:.0f} ms")
        demo_batch(Path(tmp))


def demo_batch(tmp: Path) -> None:
    """``ingest_paths`` of the demo folder (31 files, 36 captures) into a fresh campaign."""
    samples = Path(__file__).resolve().parents[1] / "sample_runs"
    manifest = load_manifest(str(samples / "manifest.csv"))
    for scheduler in (Scheduler("local", 1), Scheduler("local", 2)):
        runs = []
        for k in range(3):
            with Campaign.open(tmp / f"camp-{scheduler.workers}-{k}", create=True) as camp:
                t0 = time.perf_counter()
                report = ingest_paths([str(samples)], camp, IngestOptions(manifest=manifest), scheduler,
                                      exclude=[str(samples / "manifest.csv")])
                runs.append(time.perf_counter() - t0)
        print(f"ingest_paths of sample_runs ({report.files} files, {len(report.added)} captures), "
              f"{scheduler}: {min(runs):.2f} s")


if __name__ == "__main__":
    main()
