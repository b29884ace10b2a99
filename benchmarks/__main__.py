"""Run the benchmarks: ``python -m benchmarks [NAME ...]`` (default all ``bench_*.py``)."""

import importlib
import pkgutil
import sys

import benchmarks

names = sys.argv[1:] or sorted(m.name for m in pkgutil.iter_modules(benchmarks.__path__) if m.name.startswith("bench_"))
for name in names:
    print(f"== {name}", flush=True)
    importlib.import_module(f"benchmarks.{name.removeprefix('benchmarks.')}").main()
