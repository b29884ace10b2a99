"""Roles from waveforms, one file per channel joined, output-only captures measured, re-ingest conditions.

Waveforms are invented (stating properties); the delay checks use the first-order step response
v(t) = V·(1 − exp(−(t − td)/τ)), whose 90 % instant is td + τ·ln 10 (Ogata, Modern Control
Engineering, §5-2 first-order systems; from memory).
"""

import math

import numpy as np
import pytest

from labtool.cli import main
from labtool.errors import InputError
from labtool.ingest import IngestOptions, ingest_paths, read_path
from labtool.measure import Limits, measure_capture
from labtool.store import Campaign

N, DT = 2000, 1e-8
TD, TAU = 4e-6, 1e-6  # output delay and time constant


def waves():
    """Invented: a 3.3 V supply ramp from t = 0 over 2 µs, a 1.8 V enable edge at 1 µs, a 1.2 V output."""
    t = -2e-6 + DT * np.arange(N)
    rng = np.random.default_rng(3)
    supply = np.clip(t / 2e-6, 0, 1) * 3.3 + rng.normal(0, 1e-3, N)
    enable = np.clip((t - 1e-6) / 2e-8 + 0.5, 0, 1) * 1.8
    output = 1.2 * (1 - np.exp(-np.clip(t - TD, 0, None) / TAU))
    return t, supply, enable, output


def csv(path, header: list[str], columns) -> str:
    lines = [",".join(header)] + [",".join(repr(float(c[k])) for c in columns) for k in range(len(columns[0]))]
    path.write_text("\n".join(lines) + "\n")
    return str(path)


def roles(capture) -> dict:
    return {c.name: (c.role, c.role_source) for c in capture.channels}


@pytest.mark.parametrize("order", [(0, 1, 2), (2, 0, 1), (1, 2, 0)])
def test_supply_enable_and_output_by_shape_in_any_column_order(tmp_path, order):
    t, supply, enable, output = waves()
    signals = [("supply", supply), ("enable", enable), ("output", output)]
    chosen = [signals[k] for k in order]
    path = csv(tmp_path / "three.csv", ["Time", "CH1", "CH2", "CH3"], [t, *[v for _, v in chosen]])
    (cap,) = read_path(path)
    assert roles(cap) == {f"CH{k + 1}": (role, "shape") for k, (role, _) in enumerate(chosen)}


def test_a_flat_output_is_still_the_output_and_flags_override_shapes(tmp_path):
    t, supply, _, _ = waves()
    flat = np.zeros(N)
    path = csv(tmp_path / "stuck.csv", ["Time", "Channel A", "Channel B"], [t, supply, flat])
    (cap,) = read_path(path)
    assert roles(cap) == {"Channel A": ("supply", "shape"), "Channel B": ("output", "shape")}
    (flagged,) = read_path(path, IngestOptions(supply="Channel B"))
    assert roles(flagged) == {"Channel B": ("supply", "flag"), "Channel A": ("output", "shape")}


def test_named_channels_keep_name_roles(tmp_path):
    t, supply, _, output = waves()
    (cap,) = read_path(csv(tmp_path / "named.csv", ["time", "VDD", "2"], [t, supply, output]))
    assert roles(cap) == {"VDD": ("supply", "name"), "2": ("output", "shape")}


def _pair(tmp_path, names: tuple[str, str], shift: float = 0.0):
    t, supply, _, output = waves()
    a = csv(tmp_path / names[0], ["Time", "Ampl"], [t, supply])
    b = csv(tmp_path / names[1], ["Time", "Ampl"], [t + shift, output])
    return a, b


@pytest.mark.parametrize("names,tokens", [(("C1_run7.csv", "C2_run7.csv"), ("C1", "C2")),
                                          (("F0000CH1.CSV", "F0000CH2.CSV"), ("CH1", "CH2"))])
def test_one_file_per_channel_is_joined_into_one_capture(tmp_path, names, tokens):
    _pair(tmp_path, names)
    t, supply, _, output = waves()
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        report = ingest_paths([str(tmp_path)], camp)
        assert report.failed == [] and len(report.added) == 1 and report.files == 2
        cap = camp.load_capture(report.added[0])
    assert roles(cap) == {tokens[0]: ("supply", "shape"), tokens[1]: ("output", "shape")}
    np.testing.assert_array_equal(cap.channel("supply").values, supply)
    np.testing.assert_array_equal(cap.channel("output").values, output)
    assert cap.time.n == N and cap.time.dt_s == pytest.approx(DT, rel=1e-9)
    assert cap.provenance.metadata["channel_files"].endswith(names[1])


def test_channel_files_with_other_time_bases_store_nothing(tmp_path):
    a, b = _pair(tmp_path, ("C1_x.csv", "C2_x.csv"), shift=5 * DT)
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        report = ingest_paths([a, b], camp)
        assert report.added == [] and len(camp.captures()) == 0
    ((path, message),) = report.failed
    assert path == a
    assert message == (f"{b}: time base differs from its channel partner (start {-2e-6 + 5 * DT:.9g} s, "
                       f"{-2e-6:.9g} s in C1_x.csv); --pair-channels off reads them apart")


def test_pairing_can_be_switched_off(tmp_path):
    a, b = _pair(tmp_path, ("C1_x.csv", "C2_x.csv"))
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        report = ingest_paths([a, b], camp, IngestOptions(pair_channels="off"))
    assert len(report.added) == 2  # each file alone: its one channel is the output


def test_names_that_only_look_like_channels_are_not_paired(tmp_path):
    t, supply, _, output = waves()
    for k, name in enumerate(("ZR24A_p01_m40C_1ms.csv", "ZR24A_p01_m40C_2ms.csv")):
        csv(tmp_path / name, ["time", "vdd", "vref"], [t, supply, output * (1 - 0.01 * k)])
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        assert len(ingest_paths([str(tmp_path)], camp).added) == 2


def _output_only(tmp_path, with_enable=False):
    t, _, enable, output = waves()
    columns = [t, enable, output] if with_enable else [t, output]
    header = ["Time", "EN", "CH1"] if with_enable else ["Time", "CH1"]
    return csv(tmp_path / "out.csv", header, columns)


def test_output_only_delay_from_the_trigger_instant(tmp_path):
    (cap,) = read_path(_output_only(tmp_path))
    result = measure_capture(cap, Limits(supply_min_v=1.6))
    assert result.delay_ref == "trigger" and result.verdict == "started"  # never no_supply without a supply
    # 90 % of a first-order rise: td + τ·ln 10 (Ogata §5-2; from memory)
    assert result.delay_s == pytest.approx(TD + TAU * math.log(10), rel=1e-3)
    assert result.vsupply_final_v is None and result.supply_at_start_v is None


def test_output_only_delay_from_a_given_instant_and_from_the_enable_edge(tmp_path):
    (given,) = read_path(_output_only(tmp_path), IngestOptions(supply_valid_at_s=1.5e-6))
    r = measure_capture(given)
    assert r.delay_ref == "given" and r.t_supply_s == 1.5e-6
    assert r.delay_s == pytest.approx(TD + TAU * math.log(10) - 1.5e-6, rel=1e-3)
    (enabled,) = read_path(_output_only(tmp_path, with_enable=True))
    r = measure_capture(enabled)
    assert r.delay_ref == "enable" and r.t_supply_s == pytest.approx(1e-6, abs=DT / 10)
    assert r.to_json_dict()["delay_ref"] == "enable"


def test_a_new_run_sheet_value_is_a_new_version_or_an_update(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    t, supply, _, output = waves()
    csv(tmp_path / "run1.csv", ["time", "vdd", "vref"], [t, supply, output])
    for lot in ("LA", "LB"):
        (tmp_path / f"sheet_{lot}.csv").write_text(f"file,lot\nrun1.csv,{lot}\n")
    assert main(["ingest", "run1.csv", "--into", "camp", "--manifest", "sheet_LA.csv"]) == 0
    assert main(["ingest", "run1.csv", "--into", "camp", "--manifest", "sheet_LA.csv"]) == 0  # same: skipped
    assert main(["ingest", "run1.csv", "--into", "camp", "--manifest", "sheet_LB.csv"]) == 0
    out, err = capsys.readouterr()
    assert out.splitlines()[-1] == "camp: 1 added, 0 skipped, 0 failed (1 file read)"
    assert "stored before under other conditions; the new ones are version 2" in err
    with Campaign.open("camp") as camp:
        current = camp.captures()
        assert list(current["lot"]) == ["LB"] and camp.summary()["versions"] == 2
        assert camp.load_capture(current["capture_id"][0]).capture_id == current["capture_id"][0]
    (tmp_path / "sheet_LC.csv").write_text("file,lot\nrun1.csv,LC\n")
    assert main(["ingest", "run1.csv", "--into", "camp", "--manifest", "sheet_LC.csv", "--update-conditions"]) == 0
    assert capsys.readouterr().out.splitlines()[-1] == "camp: 0 added, 1 updated, 0 skipped, 0 failed (1 file read)"
    with Campaign.open("camp") as camp:
        assert list(camp.captures()["lot"]) == ["LC"] and camp.summary()["versions"] == 2


def test_a_single_channel_that_is_not_recognised_is_still_refused_with_company(tmp_path):
    t, supply, _, _ = waves()
    with pytest.raises(InputError) as info:
        read_path(csv(tmp_path / "odd.csv", ["time", "vdd", "node7"], [t, supply, supply]))
    assert "no reference output column recognised" in str(info.value)


def test_another_channel_token_by_expression(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    _pair(tmp_path, ("run7_trace1.csv", "run7_trace2.csv"))
    assert main(["ingest", ".", "--into", "apart"]) == 0  # "trace1" is no channel token by default
    assert capsys.readouterr().out.splitlines()[0] == "apart: 2 added, 0 skipped, 0 failed (2 files read)"
    assert main(["ingest", ".", "--into", "joined", "--pair-channels", r"trace\d"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out == ["joined: 1 added, 0 skipped, 0 failed (2 files read)",
                   "  roles supply=trace1 (shape), output=trace2 (shape): 1 capture"]
    assert main(["ingest", ".", "--into", "bad", "--pair-channels", "trace("]) == 2
    assert "--pair-channels 'trace(': not a regular expression" in capsys.readouterr().err
