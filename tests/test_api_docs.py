"""docs/api.md cannot rot: its ```python blocks run in order, in one namespace, in a fresh folder that
holds a copy of sample_runs/ (the page is written to run from the top of a checkout)."""

import re
import shutil
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PAGE = ROOT / "docs" / "api.md"
BLOCK = re.compile(r"^```python\n(.*?)^```$", re.S | re.M)


def blocks() -> list[str]:
    return BLOCK.findall(PAGE.read_text(encoding="utf-8"))


def test_the_page_has_the_walk_through():
    code = "\n".join(blocks())
    for call in ("labtool.read(", "labtool.measure(", "labtool.open_campaign(", "labtool.lot(", "labtool.compare(",
                 "labtool.triage(", "labtool.plot_"):
        assert call in code, call


def test_every_block_runs_in_order(tmp_path, monkeypatch):
    shutil.copytree(ROOT / "sample_runs", tmp_path / "sample_runs")
    monkeypatch.chdir(tmp_path)
    namespace: dict = {"__name__": "api_page"}
    for i, code in enumerate(blocks(), start=1):
        try:
            exec(compile(code, f"{PAGE.name} block {i}", "exec"), namespace)
        except Exception as exc:  # name the block that broke
            pytest.fail(f"docs/api.md block {i} failed: {type(exc).__name__}: {exc}\n{code}")
    for name in ("delays", "overlay", "wafers", "triage"):
        assert (tmp_path / f"{name}.png").stat().st_size > 10_000
