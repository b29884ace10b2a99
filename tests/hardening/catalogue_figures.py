"""Wall time and peak memory of every bad-input case through ``labtool ingest``, for docs/reliability.md.

    python -m tests.hardening.catalogue_figures

Each case runs in a forked child of one interpreter (tests/hardening/cli_runs.run_many); peak memory
is the child's maximum resident set, which includes the interpreter and the libraries it has loaded
(the first row, a good file, shows that floor). Figures only: the suite asserts messages, not these.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

from tests.hardening.catalogue import GOOD, TEXT, gzip_cases, xlsx_cases
from tests.hardening.cli_runs import run_many


def main() -> None:
    print("| importer | case | exit | wall s | peak RSS MiB | message |")
    print("|---|---|---|---|---|---|")
    for importer, cases in (("csv", TEXT), ("csv.gz", gzip_cases()), ("xlsx", xlsx_cases())):
        with tempfile.TemporaryDirectory() as tmp:
            folder = Path(tmp)
            (folder / "good.csv").write_bytes(GOOD)
            for case in cases:
                (folder / case.name).write_bytes(case.data)
            names = ["good.csv", *[c.name for c in cases]]
            results = run_many([["ingest", "--into", "camp", "--scheduler", "local:1", "--", n] for n in names],
                               cwd=folder)
            kinds = ["(a good file)", *[c.kind for c in cases]]
            for kind, result in zip(kinds, results):
                message = (result["stderr"].strip() or result["stdout"].strip())[:90].replace("|", "\\|")
                print(f"| {importer} | {kind} | {result['rc']} | {result['seconds']:.2f} | "
                      f"{result['maxrss_kb'] / 1024:.0f} | {message} |")


if __name__ == "__main__":
    main()
