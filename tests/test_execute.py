"""Batch executor: same outcomes, in order, whichever executor runs them; single failures reported."""

import dataclasses

import pytest

from labtool.errors import InputError, UsageError
from labtool.execute import Scheduler, parse_scheduler, run_batch


def square_or_fail(x):
    if x == 3:
        raise InputError(f"item{x}.csv", "no numeric data", line=2)
    return x * x


def test_parse_scheduler_forms():
    assert parse_scheduler("local:3") == Scheduler("local", 3)
    assert parse_scheduler("tcp://10.0.0.5:8786") == Scheduler("dask", address="tcp://10.0.0.5:8786")
    assert parse_scheduler(None).kind == "local" and parse_scheduler(None).workers >= 1
    for bad in ("local:0", "local:x", "ssh://a", "2"):
        with pytest.raises(UsageError, match="--scheduler"):
            parse_scheduler(bad)


@pytest.mark.parametrize("spec", ["local:1", "local:2"])
def test_local_executors_keep_order_and_report_single_failures(spec):
    outcomes = list(run_batch(square_or_fail, range(8), parse_scheduler(spec)))
    assert [o.item for o in outcomes] == list(range(8))
    assert [o.value for o in outcomes if o.ok] == [0, 1, 4, 16, 25, 36, 49]
    (failed,) = [o for o in outcomes if not o.ok]
    assert failed.item == 3 and failed.error == "item3.csv:2: no numeric data"


def test_dask_scheduler_gives_the_same_outcomes():
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False, protocol="tcp",
                                  dashboard_address=None) as cluster:
        outcomes = list(run_batch(square_or_fail, range(8), parse_scheduler(cluster.scheduler_address)))
    local = list(run_batch(square_or_fail, range(8), Scheduler("local", 1)))
    assert outcomes == local


def test_unreachable_dask_scheduler_is_a_clear_error():
    with pytest.raises(UsageError, match="cannot reach the Dask scheduler"):
        unreachable = dataclasses.replace(parse_scheduler("tcp://127.0.0.1:1"), connect_timeout_s=0.5)
        list(run_batch(square_or_fail, [1], unreachable))


def test_pool_workers_do_not_outlive_a_killed_parent(tmp_path):
    # A parent killed with SIGKILL cannot shut its pool down; the workers must go with it, or they
    # hold the terminal's pipes open and linger for ever.
    import os
    import signal
    import subprocess
    import sys
    import textwrap
    import time

    script = textwrap.dedent("""
        import os, sys, time
        from labtool.execute import Scheduler, run_batch
        from tests.test_execute import sleep_and_report_pid
        for _ in run_batch(sleep_and_report_pid, [sys.argv[1]] * 4, Scheduler("local", 2)):
            pass
    """)
    proc = subprocess.Popen([sys.executable, "-c", script, str(tmp_path)], cwd=os.getcwd(),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 60
    while len(list(tmp_path.glob("*.pid"))) < 2 and time.monotonic() < deadline:
        time.sleep(0.05)
    workers = [int(p.stem) for p in tmp_path.glob("*.pid")]
    assert len(workers) >= 2
    proc.send_signal(signal.SIGKILL)
    proc.communicate(timeout=30)  # returns only once no worker holds the pipes
    time.sleep(0.2)
    alive = [pid for pid in workers if _alive(pid)]
    assert alive == []


def sleep_and_report_pid(folder):
    import os
    import time
    from pathlib import Path

    Path(folder, f"{os.getpid()}.pid").touch()
    time.sleep(30)


def _alive(pid):
    import os

    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    with open(f"/proc/{pid}/stat") as fh:  # a zombie waiting for its reaper is dead
        return fh.read().split()[2] != "Z"
