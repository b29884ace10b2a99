"""Store under kill -9 and concurrent writers: nothing lost, nothing duplicated, verify clean."""

import os
import signal
import subprocess
import sys
import textwrap
import time

import numpy as np

from labtool.store import Campaign

WRITER = textwrap.dedent("""
    import sys
    import numpy as np
    from labtool.capture import Conditions
    from labtool.store import Campaign
    from tests.builders import make_capture

    root, first, last = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
    with Campaign.open(root, create=True) as camp:
        for i in range(first, last):
            t = np.arange(20000) * 1e-7
            out = 1.2 * (1 - np.exp(-t / (1e-5 * (1 + i))))
            camp.add_capture(make_capture(np.full_like(t, 1.8), out, 1e-7, source=f"run{i}.csv",
                                          conditions=Conditions(lot=f"L{i % 3}")))
            print(i, flush=True)
""")


def _writer(root, first, last):
    return subprocess.Popen([sys.executable, "-c", WRITER, str(root), str(first), str(last)],
                            stdout=subprocess.PIPE, text=True, cwd=os.getcwd())


def test_kill_during_writes_then_rerun_leaves_a_verified_store_with_each_input_once(tmp_path):
    root = tmp_path / "camp"
    rng = np.random.default_rng(7)
    for _ in range(4):
        proc = _writer(root, 0, 30)
        proc.stdout.readline()  # at least one capture is under way
        time.sleep(float(rng.uniform(0.0, 0.4)))
        proc.send_signal(signal.SIGKILL)
        proc.wait()
    assert _writer(root, 0, 30).wait() == 0
    with Campaign.open(root) as camp:
        assert camp.verify() == []
        table = camp.captures(current_only=False)
    assert sorted(table["source_path"]) == sorted(f"run{i}.csv" for i in range(30))
    assert list(os.listdir(root / "tmp")) == []


def test_two_concurrent_writers_on_one_campaign_both_succeed(tmp_path):
    root = tmp_path / "camp"
    Campaign.open(root, create=True).close()
    procs = [_writer(root, 0, 20), _writer(root, 10, 30)]  # overlapping ranges: 10..19 written by both
    assert [p.wait() for p in procs] == [0, 0]
    with Campaign.open(root) as camp:
        assert camp.verify() == []
        assert len(camp.captures(current_only=False)) == 30
