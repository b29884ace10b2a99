"""Two commands on one campaign at the same time (the real CLI, separate processes): both succeed, or
one waits for the other's write lock; the catalog is never corrupt and nothing is stored twice."""

import time

import pytest

from tests.hardening.cli_runs import popen_cli, run_cli
from tests.hardening.scenario import catalog_rows, count_rows, small_plan, write_captures


def finish(proc, timeout=300):
    out, err = proc.communicate(timeout=timeout)
    return proc.returncode, out, err


def verify_ok(cwd):
    done = run_cli(["verify", "camp"], cwd=cwd)
    assert (done.returncode, done.stdout) == (0, "camp: ok\n"), done.stdout + done.stderr


@pytest.mark.slow
def test_two_ingests_of_overlapping_files_into_a_new_campaign(tmp_path):
    names = write_captures(tmp_path / "in", 12, samples=5000)
    first, second = [f"in/{n}" for n in names[:8]], [f"in/{n}" for n in names[4:]]
    # Neither finds the campaign: both create it, then race for every shared file.
    procs = [popen_cli(["ingest", *files, "--into", "camp", "--scheduler", "local:1"], cwd=tmp_path)
             for files in (first, second)]
    results = [finish(p) for p in procs]
    assert [r[0] for r in results] == [0, 0], [r[2] for r in results]
    added = [int(r[1].split(": ")[1].split(" added")[0]) for r in results]
    skipped = [int(r[1].split(", ")[1].split(" skipped")[0]) for r in results]
    assert sum(added) == 12 and [a + s for a, s in zip(added, skipped)] == [8, 8]
    verify_ok(tmp_path)
    assert catalog_rows(tmp_path / "camp") == [(f"in/{n}", "", 1) for n in names]


@pytest.mark.slow
def test_acquire_and_measure_at_once(tmp_path):
    """A measurement of the campaign while the simulated bench is filling it: both finish; the rows
    saved are for captures that exist, and a second measure sees every capture."""
    write_captures(tmp_path / "in", 4, samples=5000)
    assert run_cli(["ingest", "in", "--into", "camp", "--scheduler", "local:1"], cwd=tmp_path).returncode == 0
    plan = small_plan(tmp_path, parts=2, ramps=("10us", "100us"))
    acquire = popen_cli(["acquire", str(plan), "--into", "camp", "--sim"], cwd=tmp_path)
    measures = []
    while acquire.poll() is None and len(measures) < 2:  # measure while captures arrive
        if count_rows(tmp_path / "camp", "captures") > 4 + len(measures):
            measures.append(popen_cli(["measure", "camp", "--scheduler", "local:1"], cwd=tmp_path))
        time.sleep(0.01)
    results = [finish(p) for p in [acquire, *measures]]
    assert measures, "the acquisition ended before any measurement started"
    assert [r[0] for r in results] == [0] * len(results), [r[2] for r in results]
    verify_ok(tmp_path)
    assert len(catalog_rows(tmp_path / "camp")) == 4 + 4
    again = run_cli(["measure", "camp", "--scheduler", "local:1", "--json"], cwd=tmp_path)
    assert again.returncode == 0 and len(again.stdout.splitlines()) == 8
    assert count_rows(tmp_path / "camp", "measurements") == 8


@pytest.mark.slow
def test_ingest_and_acquire_at_once(tmp_path):
    write_captures(tmp_path / "in", 6, samples=5000)
    plan = small_plan(tmp_path, parts=2, ramps=("10us",))
    procs = [popen_cli(["acquire", str(plan), "--into", "camp", "--sim"], cwd=tmp_path),
             popen_cli(["ingest", "in", "--into", "camp", "--scheduler", "local:1"], cwd=tmp_path)]
    results = [finish(p) for p in procs]
    assert [r[0] for r in results] == [0, 0], [r[2] for r in results]
    verify_ok(tmp_path)
    rows = catalog_rows(tmp_path / "camp")
    assert len(rows) == 6 + 2 and len({r[:2] for r in rows}) == 8
