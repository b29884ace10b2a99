"""kill -9 at random moments during ``labtool ingest``, ``labtool measure CAMPAIGN`` and ``labtool acquire
PLAN --sim``, then the same command again: ``labtool verify`` passes (catalog consistent, every
waveform's hash matches, no orphan files) and every input is in the store exactly once.

A kill moment is drawn at random (seeded) among: while the interpreter starts, and right after the
k-th capture reached the catalog (k random), plus a random few milliseconds. Timeouts are hang
guards, not speed assertions.
"""

import random
import signal
import time

import pytest

from tests.hardening.cli_runs import popen_cli, run_cli
from tests.hardening.scenario import catalog_rows, count_rows, small_plan, write_captures

KILLS = 3


def kill_at_random(args, *, cwd, root, table, total, rng, mid_run=False, guard_s=120.0) -> str:
    """Start ``labtool ARGS`` and SIGKILL it at a random moment: (rows of ``table`` then, had it finished).

    ``mid_run``: the moment is right after a random row that is not the last, so the run is surely cut
    part-done whatever the machine's speed; otherwise it may also fall in the start-up.
    """
    present = count_rows(root, table)
    proc = popen_cli(args, cwd=cwd)
    remaining = total - present
    if mid_run and remaining >= 2:
        target = present + rng.randrange(1, remaining)
    else:  # rows to wait for: some of those still to come (none: kill during start-up or the first write)
        target = present + rng.randrange(0, max(1, remaining))
    start = time.monotonic()
    while count_rows(root, table) < target and proc.poll() is None and time.monotonic() - start < guard_s:
        time.sleep(0.002)
    time.sleep(rng.uniform(0.0, 0.3 if target == present else 0.005))
    finished = proc.poll() is not None
    proc.send_signal(signal.SIGKILL)
    proc.communicate(timeout=guard_s)
    return (count_rows(root, table), finished)


def cut_mid_run(moments, total) -> bool:
    """At least one kill left a run part-done (so the re-run really had something to resume)."""
    return any(0 < rows < total and not finished for rows, finished in moments)


def kills_then_rerun(args, cwd, total, rng):
    """KILLS random kills of ``labtool ARGS`` (one must cut a run part-done), then a full run and verify."""
    moments = [kill_at_random(args, cwd=cwd, root=cwd / "camp", table="captures", total=total, rng=rng,
                              mid_run=k == 0) for k in range(KILLS)]
    assert cut_mid_run(moments, total), moments
    print(f"{args[0]}: kills left (captures stored, run had finished) = {moments}")  # for docs/reliability.md
    done = run_cli(args, cwd=cwd)
    assert done.returncode == 0, (moments, done.stderr)
    verify_cli("camp", cwd)
    return moments


def verify_cli(root, cwd):
    done = run_cli(["verify", str(root)], cwd=cwd)
    assert (done.returncode, done.stdout) == (0, f"{root}: ok\n"), done.stdout + done.stderr
    assert list((cwd / root / "tmp").iterdir()) == []


@pytest.mark.slow
def test_ingest_killed_at_random_then_rerun_stores_each_file_once(tmp_path):
    rng = random.Random(9)
    names = write_captures(tmp_path / "in", 10, samples=10000)
    moments = kills_then_rerun(["ingest", "in", "--into", "camp", "--scheduler", "local:1"], tmp_path, len(names), rng)
    assert catalog_rows(tmp_path / "camp") == [(f"in/{n}", "", 1) for n in names], moments


@pytest.mark.slow
def test_measure_killed_at_random_then_rerun_saves_one_row_per_capture(tmp_path):
    rng = random.Random(11)
    write_captures(tmp_path / "in", 10, samples=5000)
    assert run_cli(["ingest", "in", "--into", "camp", "--scheduler", "local:1"], cwd=tmp_path).returncode == 0
    before = catalog_rows(tmp_path / "camp")
    args = ["measure", "camp", "--scheduler", "local:2", "--json"]
    for _ in range(KILLS):
        proc = popen_cli(args, cwd=tmp_path)
        pause = rng.uniform(0.3, 4.0)
        time.sleep(pause)  # start-up, workers measuring, or the one saving transaction
        proc.send_signal(signal.SIGKILL)
        proc.communicate(timeout=60)
        saved = count_rows(tmp_path / "camp", "measurements")
        print(f"measure: kill after {pause:.2f} s left {saved} measurement rows")  # for docs/reliability.md
        assert saved in (0, len(before))  # all or nothing
    done = run_cli(args, cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert len(done.stdout.splitlines()) == len(before)
    verify_cli("camp", tmp_path)
    assert catalog_rows(tmp_path / "camp") == before
    assert count_rows(tmp_path / "camp", "measurements") == len(before)


@pytest.mark.slow
def test_acquire_killed_at_random_then_rerun_has_every_planned_capture_once(tmp_path):
    from instruments.plan import load_plan

    rng = random.Random(13)
    plan_path = small_plan(tmp_path, parts=2, ramps=("10us", "100us"))
    keys = sorted(step.key for step in load_plan(plan_path).steps())
    moments = kills_then_rerun(["acquire", str(plan_path), "--into", "camp", "--sim"], tmp_path, len(keys), rng)
    rows = catalog_rows(tmp_path / "camp")
    assert [r[1] for r in rows] == keys, moments  # every planned step, once
    assert {r[0] for r in rows} == {"plan:hardening-plan"} and {r[2] for r in rows} == {1}
