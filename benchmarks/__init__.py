"""Benchmarks: `make bench` runs every benchmarks/bench_*.py module's main()."""
