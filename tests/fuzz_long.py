"""The long fuzz run behind ``make fuzz``: the suite's fuzz targets (tests/hardening/fuzz_targets.py)
with many more generated inputs, until a time budget per target is spent.

    python -m tests.fuzz_long [--seconds-per-target 120] [--seed 0]

Hypothesis runs rounds of generated inputs (a fresh random seed per round, no example database);
every input tried is counted, and a failing input is shrunk, printed and counted. The summary at the
end is what docs/reliability.md records. Exit status 1 if anything failed.
"""

from __future__ import annotations

import argparse
import random
import sys
import time
import traceback

from hypothesis import HealthCheck, Phase, given, seed, settings
from hypothesis import strategies as st

from tests.hardening.fuzz_targets import block_options, block_wires, check_block, check_csv, csv_inputs

ROUND = 2000  # inputs per hypothesis round


def _targets():
    def csv_test(counter):
        @given(csv_inputs)
        def run(data):
            outcome = check_csv(data)
            counter[outcome] = counter.get(outcome, 0) + 1
        return run

    def block_test(counter):
        @given(block_wires(), st.lists(st.integers(0, 200), max_size=6), block_options)
        def run(wire, cuts, options):
            outcome = check_block(wire, cuts, options)
            counter[outcome] = counter.get(outcome, 0) + 1
        return run

    return {"csv sniffer/parser (read_csv)": csv_test, "IEEE 488.2 block parser (any split)": block_test}


def fuzz(make, budget_s: float, rng: random.Random) -> dict:
    counter: dict[str, int] = {}
    failures: list[str] = []
    rounds = 0
    end = time.monotonic() + budget_s
    while time.monotonic() < end:
        test = make(counter)
        configured = settings(max_examples=ROUND, deadline=None, database=None, derandomize=False,
                              phases=[Phase.generate, Phase.shrink],
                              suppress_health_check=list(HealthCheck))(seed(rng.getrandbits(64))(test))
        rounds += 1
        try:
            configured()
        except Exception:  # a property failed: hypothesis has shrunk it and put the input in the traceback
            failures.append(traceback.format_exc(limit=-3))
    return {"inputs": sum(counter.values()), "outcomes": dict(sorted(counter.items())), "rounds": rounds,
            "failures": failures}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m tests.fuzz_long", description=__doc__.splitlines()[0])
    parser.add_argument("--seconds-per-target", type=float, default=120.0)
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)
    rng = random.Random(args.seed)
    failed = 0
    print(f"fuzz run: {args.seconds_per_target:g} s per target, seed {args.seed}")
    for name, make in _targets().items():
        start = time.monotonic()
        result = fuzz(make, args.seconds_per_target, rng)
        spent = time.monotonic() - start
        failed += len(result["failures"])
        outcomes = ", ".join(f"{k} {v}" for k, v in result["outcomes"].items())
        print(f"{name}: {result['inputs']} inputs in {spent:.0f} s ({result['rounds']} rounds; {outcomes}); "
              f"{len(result['failures'])} failing")
        for text in result["failures"]:
            print(text, file=sys.stderr)
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
