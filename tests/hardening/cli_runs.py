"""Run labtool commands as a user does, with a hang guard, and look at what they left in a campaign.

``run_cli`` starts the real console entry point in a fresh interpreter. ``run_many`` starts one
interpreter that forks a child per command (the CLI's imports are paid once), so a catalogue of
dozens of bad files costs one interpreter start; each child reports its exit status, output, wall
time and peak resident memory, and a child that runs past the timeout is killed and reported as a
hang. Timeouts here are a safety net against hangs, not a speed assertion.
"""

from __future__ import annotations

import json
import os
import sqlite3
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
LABTOOL = [sys.executable, "-m", "labtool.cli"]
HANG_GUARD_S = 180.0


def run_cli(args: list[str], *, cwd=None, timeout: float = HANG_GUARD_S) -> subprocess.CompletedProcess:
    """``labtool ARGS`` in a new process (PYTHONPATH = the checkout)."""
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.run([*LABTOOL, *args], cwd=cwd, env=env, capture_output=True, text=True, timeout=timeout)


def popen_cli(args: list[str], *, cwd=None, **kw) -> subprocess.Popen:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.Popen([*LABTOOL, *args], cwd=cwd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, **kw)


def run_many(commands: list[list[str]], *, cwd, timeout_each: float = 60.0, campaign=None) -> list[dict]:
    """Run each argument list through ``labtool.cli.main`` in a forked child of one interpreter.

    Returns per command: rc (None when killed by the hang guard), stdout, stderr, seconds, maxrss_kb,
    and with ``campaign`` the :func:`store_snapshot` taken after it.
    A non-labtool exception escaping ``main`` is printed as a traceback and gives rc 70.
    """
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    job = json.dumps({"commands": commands, "timeout_each": timeout_each,
                      "campaign": str(campaign) if campaign else None})
    done = subprocess.run([sys.executable, "-m", "tests.hardening.fork_runner"], input=job, cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=timeout_each * len(commands) + 120)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout)


# -- what a campaign holds ------------------------------------------------------------------------
def store_snapshot(root: Path) -> dict:
    """Catalog rows and files of a campaign (SQLite's own -wal/-shm files left out)."""
    files = sorted(p.relative_to(root).as_posix() for p in root.rglob("*")
                   if p.is_file() and not p.name.startswith("catalog.sqlite"))
    with sqlite3.connect(root / "catalog.sqlite") as conn:
        captures = conn.execute("SELECT capture_id, source_path, locator, version, waveform_sha256 FROM captures "
                                "ORDER BY capture_id").fetchall()
        measurements = conn.execute("SELECT capture_id, limits_key FROM measurements ORDER BY 1, 2").fetchall()
    conn.close()
    return {"files": files, "captures": captures, "measurements": measurements}


def verify_problems(root: Path) -> list[str]:
    from labtool.store import Campaign

    with Campaign.open(root) as camp:
        return camp.verify()
