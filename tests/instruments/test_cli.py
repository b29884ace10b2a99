"""The bench commands end to end: bench check, acquire --sim (model-backed bench), bench sim."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import pyvisa
import pytest

from labtool.cli import main

ROOT = Path(__file__).resolve().parents[2]


def test_bench_check_json(bench, capsys):
    code = main(["bench", "check", bench.servers["scope"].resource, "--profile", "generic-scpi",
                 "--role", "scope", "--json"])
    rows = [json.loads(line) for line in capsys.readouterr().out.splitlines()]
    assert code == 0
    assert {"role", "operation", "status", "detail"} == set(rows[0])
    assert [r["operation"] for r in rows if r["role"] == "scope"][:4] == [
        "configure_channel", "configure_format", "configure_timebase", "configure_trigger"]
    assert all(r["status"] == "ok" for r in rows if r["role"] == "scope")


def test_bench_check_unreachable_instrument_exit_1(capsys):
    code = main(["bench", "check", "TCPIP::127.0.0.1::1::SOCKET", "--profile", "generic-scpi", "--role", "scope"])
    out = capsys.readouterr().out
    assert code == 1 and "failed   common   open + *IDN?" in out


POPULATION = """
schema = "labtool-population"
version = 1
design = "{design}"
seed = 7
[[part]]
slot = 1
lot = "ZR24C"
wafer = "W11"
part = "p01"
[[part]]
slot = 2
lot = "ZR24C"
wafer = "W11"
part = "p06"
overrides = {{ i_start_a = 1e-12 }}
"""


def small_sim_plan(tmp_path: Path) -> Path:
    (tmp_path / "pop.toml").write_text(POPULATION.format(design=(ROOT / "sample_runs" / "design.toml").as_posix()))
    text = (ROOT / "sample_runs" / "sim-plan.toml").read_text()
    head, _, _ = text.partition("[[parts]]")
    head = head.replace('population = "population.toml"', 'population = "pop.toml"')
    head = head.replace('ramp_s = ["10us", "100us", "1ms"]', 'ramp_s = ["100us"]')
    parts = '[[parts]]\nlot = "ZR24C"\nwafer = "W11"\npart = "p01"\nslot = 1\n\n' \
            '[[parts]]\nlot = "ZR24C"\nwafer = "W11"\npart = "p06"\nslot = 2\n'
    path = tmp_path / "plan.toml"
    path.write_text(head + parts)
    return path


def test_acquire_sim_then_measure_prints_capture_ids(tmp_path, capsys):
    plan = small_sim_plan(tmp_path)
    camp = tmp_path / "camp"
    assert main(["acquire", str(plan), "--into", str(camp), "--sim"]) == 0
    out = capsys.readouterr()
    assert "2 capture(s) stored, 0 already present" in out.out
    assert "Simulated bench: no real outputs are driven." in out.err
    assert main(["acquire", str(plan), "--into", str(camp), "--sim"]) == 0  # resumes: nothing left to do
    assert "0 capture(s) stored, 2 already present" in capsys.readouterr().out
    from labtool.store import Campaign
    with Campaign.open(camp) as c:
        ids = set(c.captures()["capture_id"])
    assert main(["measure", str(camp), "--json", "--expect", "1.2"]) == 0
    rows = [json.loads(line) for line in capsys.readouterr().out.splitlines() if line.startswith("{")]
    assert {r["capture_id"] for r in rows} == ids
    verdicts = {r["capture_id"]: r["verdict"] for r in rows}
    assert sorted(verdicts.values()) == ["started", "stuck_at_zero"]  # p01 typical, p06 without startup current


def test_bad_plan_one_line_error(tmp_path, capsys):
    plan = tmp_path / "plan.toml"
    plan.write_text('schema = "labtool-acquisition-plan"\nversion = 1\nname = "x"\n[instruments.scope]\n'
                    'resource = "TCPIP::127.0.0.1::1::SOCKET"\nprofile = "generic-scpi"\n')
    assert main(["acquire", str(plan), "--into", str(tmp_path / "c")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err == [f"labtool acquire: {plan} [instruments.supply]: missing (a plan needs a scope and a supply)"]


def test_missing_profile_is_exit_2_without_a_resume_hint(tmp_path, capsys):
    # Running again cannot help a plan whose profile file does not exist: no "run again" advice.
    plan = small_sim_plan(tmp_path)
    plan.write_text(plan.read_text().replace('profile = "generic-scpi"', 'profile = "no-such.toml"', 1))
    assert main(["acquire", str(plan), "--into", str(tmp_path / "camp")]) == 2
    err = capsys.readouterr().err
    assert "no-such.toml: no such profile file" in err and "run the same command again" not in err


def test_bench_sim_serves_on_loopback_only(tmp_path):
    proc = subprocess.Popen([sys.executable, "-m", "labtool.cli", "bench", "sim", "--population",
                             str(ROOT / "sample_runs" / "population.toml"), "--fault", "supply:error_queue:SOUR1:VOLT"],
                            cwd=tmp_path,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        lines = [proc.stdout.readline().split() for _ in range(3)]
        resources = {role: res for role, res in lines}
        assert set(resources) == {"scope", "supply", "chamber"}
        assert all(r.startswith("TCPIP::127.0.0.1::") for r in resources.values())
        rm = pyvisa.ResourceManager("@py")
        inst = rm.open_resource(resources["supply"], read_termination="\n", write_termination="\n", timeout=2000)
        assert inst.query("*IDN?").startswith("LABTOOL-SIM,SUPPLY")
        inst.write(":SOUR1:VOLT 1.8")  # the injected fault queues -222 after this command, once
        assert inst.query(":SYST:ERR?") == '-222,"Data out of range"'
        inst.write(":SOUR1:VOLT 1.8")
        assert inst.query(":SYST:ERR?") == '+0,"No error"'
        inst.close()
    finally:
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=10)
    assert proc.returncode == 130 and "Traceback" not in err
