"""A real signal to a running ``labtool acquire``: SIGTERM (kill, timeout, a CI cancel), SIGHUP (a lost
terminal) and SIGINT (Ctrl-C) all switch the output off, close the journal with run_ended and exit
with 128 + the signal number. The output state is read back from the simulated supply itself."""

from __future__ import annotations

import signal
import subprocess
import sys
import pyvisa
import pytest

from instruments.journal import Journal
from tests.instruments.test_dialect_b import PLAN_B, PROFILE_B

GUARD_S = 120  # only so a broken run cannot hang the suite; nothing is timed


def read_back_output(resource: str) -> str:
    rm = pyvisa.ResourceManager("@py")
    inst = rm.open_resource(resource, read_termination="\n", write_termination="\n", timeout=5000)
    try:
        return inst.query("PSU:OUT?")
    finally:
        inst.close()


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGHUP, signal.SIGINT], ids=lambda s: s.name)
def test_signal_to_a_running_acquire_switches_the_output_off(bench_b, tmp_path, sig):
    # The scope never triggers and its wait blocks for 30 s, so the run sits in the wait with the
    # supply output on when the signal comes.
    (tmp_path / "dialect-b.toml").write_text(PROFILE_B.read_text().replace("timeout_s = 1.0", "timeout_s = 30.0"))
    (tmp_path / "plan.toml").write_text(PLAN_B.format(**{r: s.resource for r, s in bench_b.servers.items()}))
    bench_b.scope.miss_triggers = 999
    proc = subprocess.Popen([sys.executable, "-m", "labtool.cli", "acquire", "plan.toml", "--into", "camp"],
                            cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        assert bench_b.supply.powered.wait(GUARD_S), "the run never switched the supply on"
        assert bench_b.supply.output_on
        proc.send_signal(sig)
        _, err = proc.communicate(timeout=GUARD_S)
    finally:
        if proc.poll() is None:
            proc.kill()
    journal_dir = tmp_path / "camp" / "journal"
    story = "\n".join([err, *(f.read_text() for f in journal_dir.glob("*.jsonl")),
                        f"supply got {bench_b.supply.received}", f"scope got {bench_b.scope.received[-6:]}"])
    assert proc.returncode == 128 + sig, story
    assert read_back_output(bench_b.servers["supply"].resource) == "0"
    assert bench_b.supply.on_events == bench_b.supply.off_events == 1
    ended = list(Journal(tmp_path / "camp", "b-plan").events())[-1]
    assert ended["event"] == "run_ended" and ended["outputs_off"] is True
    assert ended["aborted"] == f"stopped by {sig.name}"
    assert f"labtool acquire: stopped by {sig.name}" in err
    assert "Stopped; the supply output is off." in err
    assert "run the same command again to resume" in err and "Traceback" not in err
