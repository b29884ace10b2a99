"""Inputs for the crash and concurrency tests: capture files, a small simulated-bench plan, and what a
campaign must hold afterwards. Invented waveforms (stating properties, not references)."""

from __future__ import annotations

import re
import sqlite3
from pathlib import Path

import numpy as np

from tests.hardening.cli_runs import ROOT

SIM_PLAN = ROOT / "sample_runs" / "sim-plan.toml"
POPULATION = ROOT / "sample_runs" / "population.toml"


def write_captures(folder: Path, n: int, *, samples: int = 20000, prefix: str = "ZR24A_p") -> list[str]:
    """``n`` distinct CSV captures (a supply ramp and a first-order reference start), file names sorted."""
    folder.mkdir(parents=True, exist_ok=True)
    t = np.arange(samples) * 1e-7
    vdd = np.clip(t / 2e-4, 0, 1) * 1.8
    names = []
    for k in range(n):
        tau = 2e-5 * (1 + k / n)
        vref = 1.2 * (1 - np.exp(-np.clip(t - 1e-4, 0, None) / tau))
        body = "\n".join(f"{a:.7g},{b:.6g},{c:.6g}" for a, b, c in zip(t, vdd, vref))
        name = f"{prefix}{k + 1:02d}_25C.csv"
        (folder / name).write_text("time [s],vdd [V],vref [V]\n" + body + "\n")
        names.append(name)
    return names


def small_plan(folder: Path, *, parts: int = 3, ramps: tuple[str, ...] = ("10us", "100us"), lot: str = "ZR24C",
               name: str = "hardening-plan") -> Path:
    """The demo simulated-bench plan cut down to ``parts`` parts × ``ramps`` at 25 °C."""
    text = SIM_PLAN.read_text()
    head, _, _ = text.partition("[[parts]]")
    head = re.sub(r'(?m)^name = ".*"$', f'name = "{name}"', head)
    head = re.sub(r'(?m)^population = ".*"$', f'population = "{POPULATION.as_posix()}"', head)
    head = re.sub(r"(?m)^ramp_s = \[.*\]", "ramp_s = [" + ", ".join(f'"{r}"' for r in ramps) + "]", head)
    head = re.sub(r'(?m)^discharge_s = ".*"', 'discharge_s = "5ms"', head)
    blocks = [f'[[parts]]\nlot = "{lot}"\nwafer = "W11"\npart = "p{k:02d}"\ndie_x = {k}\ndie_y = 3\nslot = {k}\n'
              for k in range(1, parts + 1)]
    path = folder / f"{name}.toml"
    path.write_text(head + "\n".join(blocks))
    return path


def catalog_rows(root: Path) -> list[tuple]:
    """(source_path, locator, version) of every stored capture, sorted."""
    with sqlite3.connect(root / "catalog.sqlite") as conn:
        rows = conn.execute("SELECT source_path, locator, version FROM captures ORDER BY 1, 2, 3").fetchall()
    conn.close()
    return rows


def count_rows(root: Path, table: str) -> int:
    """Rows of ``table`` now (0 while the catalog does not exist yet or is locked for creation)."""
    path = root / "catalog.sqlite"
    if not path.exists():
        return 0
    try:
        conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=0.2)
        try:
            return conn.execute(f"SELECT COUNT(*) FROM {table}").fetchone()[0]
        finally:
            conn.close()
    except sqlite3.Error:
        return 0
