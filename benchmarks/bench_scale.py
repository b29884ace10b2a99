"""Scale benchmarks of issue #8, each a ratio measured side by side in one run.

1. parse + measure of a 2-million-row capture vs a bare ``pyarrow.csv.read_csv`` of the same file
   (goal ≤ 1.3×);
2. a lot of 50 captures: labtool vs the hand-written pandas + scipy script of
   ``benchmarks/handwritten_baseline.py`` (goal ≥ 10× faster);
3. ``measure CAMPAIGN`` throughput with 1 vs 2 worker processes (goal ≥ 1.8×);
4. peak memory of ``measure CAMPAIGN`` on 1,000 vs 10,000 stored captures (goal: flat).
Lot statistics over 100,000 rows and Monte Carlo rates are in bench_lot.py and bench_montecarlo.py.
All data are invented (the ZR-4410 demo chip). Best of a few runs: the machine is shared.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import textwrap
import time
from functools import partial
from pathlib import Path

import numpy as np

from benchmarks.bench_measure import _best, _write_csv, synthetic_record
from benchmarks.handwritten_baseline import measure_file
from labtool.capture import Conditions
from labtool.measure.batch import measure_file as measure_one_file
from labtool.execute import Scheduler, run_batch
from labtool.ingest import IngestOptions, ingest_paths, read_path
from labtool.measure import Limits, measure_capture
from labtool.measure.batch import measure_campaign
from labtool.store import Campaign

OPTIONS = IngestOptions(supply="vdd", output="vref")


def parse_and_measure_vs_bare_read(tmp: Path) -> None:
    import pyarrow.csv as pacsv

    t, supply, output = synthetic_record(2_000_000)
    path = tmp / "ZR24A_p01_2M.csv"
    _write_csv(path, t, supply, output)
    bare_s, _ = _best(lambda: pacsv.read_csv(path), 5)
    total_s, _ = _best(lambda: measure_capture(read_path(str(path), OPTIONS)[0]), 5)
    print(f"2M rows ({path.stat().st_size / 1e6:.0f} MB): bare read_csv {bare_s * 1e3:.0f} ms, "
          f"labtool parse + measure {total_s * 1e3:.0f} ms → {total_s / bare_s:.2f}× (goal ≤ 1.3×)")


def lot_vs_handwritten(tmp: Path, n_files: int = 50) -> None:
    """Fifty 1-million-sample captures (a usual scope record length), each its own file."""
    folder = tmp / "lot"
    folder.mkdir()
    files = []
    for i in range(n_files):
        path = folder / f"ZR24A_p{i:02d}.csv"
        _write_csv(path, *synthetic_record(seed=i))
        files.append(str(path))
    start = time.perf_counter()
    for f in files:
        measure_file(f)
    hand_s = time.perf_counter() - start
    start = time.perf_counter()
    for f in files:
        measure_capture(read_path(f, OPTIONS)[0])
    serial_s = time.perf_counter() - start
    # What `labtool measure FILE... --scheduler local:2` runs: each worker reads and measures a file.
    start = time.perf_counter()
    outcomes = list(run_batch(partial(measure_one_file, OPTIONS, Limits()), files, Scheduler("local", 2)))
    pooled_s = time.perf_counter() - start
    assert all(o.ok for o in outcomes)
    start = time.perf_counter()
    with Campaign.open(tmp / "lot-campaign", create=True) as camp:
        ingest_paths([str(folder)], camp, OPTIONS, Scheduler("local", 2))
        measure_campaign(camp, Limits(), Scheduler("local", 2))
    stored_s = time.perf_counter() - start
    print(f"lot of {n_files} × 1M samples, hand-written pandas + curve_fit: {hand_s:.1f} s")
    print(f"  labtool read + measure, one process: {serial_s:.1f} s → {hand_s / serial_s:.1f}× faster")
    print(f"  labtool measure FILE... on 2 workers: {pooled_s:.1f} s → {hand_s / pooled_s:.1f}× faster (goal ≥ 10×)")
    print(f"  labtool ingest + measure CAMPAIGN on 2 workers (store writes and reads included): {stored_s:.1f} s"
          f" → {hand_s / stored_s:.1f}× faster")

def _fill_campaign(root: Path, n: int, n_samples: int = 20_000) -> None:
    from tests.builders import make_capture

    rng = np.random.default_rng(1)
    t = np.arange(n_samples) * 5e-9
    supply = 1.8 * np.clip(t / 10e-6, 0, 1)
    with Campaign.open(root, create=True) as camp:
        for i in range(n):
            tau = rng.uniform(2e-6, 8e-6)
            out = np.round(1.2 * (1 - np.exp(-np.clip(t - 5e-6, 0, None) / tau)) / 0.008) * 0.008
            camp.add_capture(make_capture(supply, out + rng.normal(0, 2e-3, n_samples), 5e-9,
                                          source=f"cap{i:05d}.csv", conditions=Conditions(lot=f"ZR24{'ABC'[i % 3]}")))


def workers_one_vs_two(tmp: Path, n: int = 400) -> None:
    root = tmp / "throughput"
    _fill_campaign(root, n)
    with Campaign.open(root) as camp:
        one_s, _ = _best(lambda: measure_campaign(camp, Limits(), Scheduler("local", 1)), 2)
        two_s, _ = _best(lambda: measure_campaign(camp, Limits(), Scheduler("local", 2)), 2)
    print(f"measure {n} stored captures: 1 worker {n / one_s:.0f}/s, 2 workers {n / two_s:.0f}/s "
          f"→ {one_s / two_s:.2f}× (goal ≥ 1.8×)")


_PEAK = textwrap.dedent("""
    import sys
    from labtool.execute import Scheduler
    from labtool.measure import Limits
    from labtool.measure.batch import measure_campaign
    from labtool.store import Campaign
    with Campaign.open(sys.argv[1]) as camp:
        measure_campaign(camp, Limits(), Scheduler("local", 1))
    # VmHWM: this process's peak resident set (ru_maxrss would carry the forking parent's over exec)
    print(next(line.split()[1] for line in open("/proc/self/status") if line.startswith("VmHWM")))
""")


def peak_memory_flat(tmp: Path) -> None:
    peaks = {}
    for n in (1_000, 10_000):
        root = tmp / f"mem{n}"
        _fill_campaign(root, n, n_samples=2_000)
        out = subprocess.run([sys.executable, "-c", _PEAK, str(root)], capture_output=True, text=True, check=True)
        peaks[n] = int(out.stdout.strip().splitlines()[-1]) / 1024
    print(f"peak RSS of measure CAMPAIGN: 1,000 captures {peaks[1_000]:.0f} MiB, 10,000 captures "
          f"{peaks[10_000]:.0f} MiB → {peaks[10_000] / peaks[1_000]:.2f}× for 10× the captures")


def main() -> None:
    with tempfile.TemporaryDirectory() as name:
        tmp = Path(name)
        parse_and_measure_vs_bare_read(tmp)
        lot_vs_handwritten(tmp)
        workers_one_vs_two(tmp)
        peak_memory_flat(tmp)


if __name__ == "__main__":
    main()
