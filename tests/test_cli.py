"""CLI shell: error classes map to exit codes with one line on stderr and no traceback."""

import subprocess
import sys

import numpy as np

from labtool.cli import main
from labtool.store import Campaign
from tests.builders import make_capture


def test_store_error_exits_3_with_one_line(tmp_path, capsys):
    assert main(["verify", str(tmp_path / "missing")]) == 3
    err = capsys.readouterr().err.strip().splitlines()
    assert err == [f"labtool verify: {tmp_path / 'missing'}: not a campaign (no catalog.sqlite); ingest into it first"]


def test_verify_of_a_clean_campaign_exits_0(tmp_path, capsys):
    with Campaign.open(tmp_path / "c", create=True) as camp:
        camp.add_capture(make_capture(np.ones(10), np.ones(10), 1e-6))
    assert main(["verify", str(tmp_path / "c")]) == 0
    assert capsys.readouterr().out.strip() == f"{tmp_path / 'c'}: ok"


def test_console_script_prints_no_traceback_on_errors(tmp_path):
    proc = subprocess.run([sys.executable, "-m", "labtool.cli", "verify", str(tmp_path / "nope")],
                          capture_output=True, text=True)
    assert proc.returncode == 3
    assert "Traceback" not in proc.stderr and proc.stderr.count("\n") == 1
