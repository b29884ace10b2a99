"""One 1-million-sample capture end to end: measurement alone (parse excluded) and parse + measure.

The capture is invented: a ZR-4410-like start (1.8 V supply ramp over 100 µs, 1.2 V reference that
rings with ζ = 0.3 at ~290 kHz), 1 GS/s for 1 ms, 8-bit codes with 2 mV noise, as a scope writes it.
Goal (issue #3): the measurement itself in tens of milliseconds. Best of several runs (the machine
is shared); a bare ``pyarrow.csv.read_csv`` of the same file is timed side by side for scale.
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np

from labtool.capture import Capture, Channel, Conditions, Provenance, TimeBase
from labtool.measure import Limits, measure_arrays, measure_capture
from labtool.measure.fit import fit_step
from labtool.measure.startup import measure_startup

N = 1_000_000
DT = 1e-9
REPEATS = 7


def _codes(v: np.ndarray, full_scale_v: float, rng) -> np.ndarray:
    q = full_scale_v / 256
    return np.round((v + rng.normal(0.0, 2e-3, v.size)) / q) * q


def synthetic_record(n: int = N, seed: int = 0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    t = np.arange(n) * DT
    supply = 1.8 * np.clip((t - 50e-6) / 100e-6, 0.0, 1.0)
    zeta, wn = 0.3, 2 * np.pi * 300e3
    s = np.clip(t - 300e-6, 0.0, None)
    wd = wn * np.sqrt(1 - zeta ** 2)
    output = 1.2 * (1 - np.exp(-zeta * wn * s) * (np.cos(wd * s) + zeta / np.sqrt(1 - zeta ** 2) * np.sin(wd * s)))
    return t, _codes(supply, 4.0, rng), _codes(output, 2.0, rng)


def _best(fn, repeats: int = REPEATS) -> tuple[float, object]:
    best, value = float("inf"), None
    for _ in range(repeats):
        t0 = time.perf_counter()
        value = fn()
        best = min(best, time.perf_counter() - t0)
    return best, value


def _write_csv(path: Path, t, supply, output) -> None:
    import pyarrow as pa
    import pyarrow.csv as pacsv

    table = pa.table({"time [s]": t, "vdd [V]": supply, "vref [V]": output})
    pacsv.write_csv(table, path)


def main() -> None:
    t, supply, output = synthetic_record()
    capture = Capture(time=TimeBase(n=N, t0_s=0.0, dt_s=DT),
                      channels=(Channel("vdd", "V", "supply", supply), Channel("vref", "V", "output", output)),
                      conditions=Conditions(lot="ZR24A", part="p01"),
                      provenance=Provenance("bench.csv", "0" * 64, "bench", "2026-01-01T00:00:00Z"))
    measure_arrays(t, supply, output)  # warm-up (imports, caches)
    arrays_s, result = _best(lambda: measure_arrays(t, supply, output))
    capture_s, _ = _best(lambda: measure_capture(capture))
    metrics_s, m = _best(lambda: measure_startup(t, supply, output, Limits()))
    fit_s, _ = _best(lambda: fit_step(t, output, m.window, t10_s=m.t10_at_s, rise_s=m.rise_s,
                                      base_v=m.output.initial_v, final_v=m.output.final_v,
                                      overshoot_pct=m.overshoot_pct))
    print(f"1M samples: levels + crossings + metrics {metrics_s * 1e3:.1f} ms, both step fits {fit_s * 1e3:.1f} ms")
    print(f"1M samples: measure_arrays {arrays_s * 1e3:.1f} ms, measure_capture {capture_s * 1e3:.1f} ms "
          f"(verdict {result.verdict}, delay {result.delay_s * 1e6:.2f} us, overshoot {result.overshoot_pct:.2f} %, "
          f"ring {result.ring_hz / 1e3:.1f} kHz, damping {result.damping:.3f})")
    try:
        from labtool.ingest import IngestOptions, read_path
    except ImportError:
        print("parse + measure: skipped (labtool.ingest not installed)")
        return
    import pyarrow.csv as pacsv

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "ZR24A_p01.csv"
        _write_csv(path, t, supply, output)
        size_mb = path.stat().st_size / 1e6
        options = IngestOptions(supply="vdd", output="vref")
        bare_s, _ = _best(lambda: pacsv.read_csv(path), 5)
        parse_s, _ = _best(lambda: read_path(str(path), options), 5)
        total_s, _ = _best(lambda: measure_capture(read_path(str(path), options)[0]), 5)
    print(f"CSV {size_mb:.0f} MB: pyarrow.csv.read_csv {bare_s * 1e3:.0f} ms, read_path {parse_s * 1e3:.0f} ms, "
          f"read_path + measure {total_s * 1e3:.0f} ms ({total_s / bare_s:.2f}x bare read)")


if __name__ == "__main__":
    main()
