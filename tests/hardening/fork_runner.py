"""Child side of :func:`tests.hardening.cli_runs.run_many` (reads a JSON job on stdin, writes results)."""

from __future__ import annotations

import json
import os
import signal
import sys
import tempfile
import time
import traceback
from pathlib import Path

from tests.hardening.cli_runs import store_snapshot


def _child(args: list[str], out_fd: int, err_fd: int) -> None:
    os.dup2(out_fd, 1)
    os.dup2(err_fd, 2)
    sys.stdout = os.fdopen(1, "w", closefd=False)
    sys.stderr = os.fdopen(2, "w", closefd=False)
    code = 70
    try:
        from labtool.cli import main

        code = main(args)
    except SystemExit as exc:  # argparse usage errors
        code = exc.code if isinstance(exc.code, int) else 2
    except BaseException:
        traceback.print_exc()
    sys.stdout.flush()
    sys.stderr.flush()
    os._exit(int(code))


def run_one(args: list[str], timeout_s: float) -> dict:
    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        start = time.monotonic()
        pid = os.fork()
        if pid == 0:
            _child(args, out.fileno(), err.fileno())
        rc, rusage = None, None
        while True:
            got, status, usage = os.wait4(pid, os.WNOHANG)
            if got:
                rc, rusage = os.waitstatus_to_exitcode(status), usage
                break
            if time.monotonic() - start > timeout_s:
                os.kill(pid, signal.SIGKILL)
                _, _, rusage = os.wait4(pid, 0)
                break
            time.sleep(0.01)
        seconds = time.monotonic() - start
        out.seek(0)
        err.seek(0)
        return {"args": args, "rc": rc, "stdout": out.read().decode("utf-8", "replace"),
                "stderr": err.read().decode("utf-8", "replace"), "seconds": seconds,
                "maxrss_kb": rusage.ru_maxrss}


def main() -> None:
    job = json.load(sys.stdin)
    from labtool.cli import build_parser

    build_parser()  # every command module imported once, before the forks

    results = []
    for args in job["commands"]:
        result = run_one(args, job["timeout_each"])
        if job.get("campaign"):  # what the store holds after this command
            result["store"] = store_snapshot(Path(job["campaign"]))
        results.append(result)
    json.dump(results, sys.stdout)


if __name__ == "__main__":
    main()
