"""Scope and logger export layouts: each imports with no flags to the exact time base and values.

Every fixture is written here from invented values (stating a property: what a layout holds, the
importer reads back), one per layout the README promises. Values are printed with repr() or with a
fixed number of decimals that the written floats already have, so they are read back bit for bit;
a time column printed as text is read back to the same float, so the interval is compared to 1e-9
relative (the mean step of the printed stamps).
"""

import numpy as np
import pytest

from labtool.errors import InputError
from labtool.ingest import read_path

from tests.ingest.exports import DT, N, T0, assert_time_base, assert_values, roles, rows, startup, write


def test_numbered_channels_over_a_units_row(tmp_path):
    t, s, o = startup()
    path = write(tmp_path, "numbered.csv", "x-axis,1,2\nsecond,Volt,Volt\n" + rows(t, s, o))
    (cap,) = read_path(path)
    assert_time_base(cap)
    assert_values(cap, s, o)
    assert roles(cap) == {"1": ("supply", "shape"), "2": ("output", "shape")}


def test_sample_index_with_start_and_increment_cells(tmp_path):
    t, s, o = startup()
    body = "".join(f"{k},{s[k].item()!r},{o[k].item()!r},\n" for k in range(N))
    path = write(tmp_path, "seq.csv", "X,CH1,CH2,Start,Increment\nSequence,Volt,Volt,-1.0E-05,2.0E-07\n" + body)
    (cap,) = read_path(path)
    assert cap.time.dt_s == 2e-7 and cap.time.t0_s == -1e-5 and cap.time.n == N  # exactly as written
    assert_values(cap, s, o)
    assert [c.name for c in cap.channels] == ["CH1", "CH2"]  # the index is not a channel


@pytest.mark.parametrize("header,scale", [
    ("Time in s,C1 in V,C2 in V", (1.0, 1.0)),
    ("Time (s),Channel 1 (V),Channel 2 (V)", (1.0, 1.0)),
    ("t/ms,CH1[mV],CH2[mV]", (1e3, 1e3)),
    ("Time [us];Channel A [V];Channel B [V]", (1e6, 1.0)),
])
def test_units_written_inside_the_column_names(tmp_path, header, scale):
    t, s, o = startup()
    delimiter = ";" if ";" in header else ","
    # times and volts written in the header's units; SI factors from the BIPM SI Brochure 9th ed., table 7
    text = header + "\n" + rows(np.round(t * scale[0], 6), np.round(s * scale[1], 4), np.round(o * scale[1], 4),
                                delimiter=delimiter)
    (cap,) = read_path(write(tmp_path, "units.csv", text))
    assert_time_base(cap)
    np.testing.assert_allclose(cap.channel("supply").values, s, rtol=1e-12)
    np.testing.assert_allclose(cap.channel("output").values, o, rtol=1e-12)
    assert {c.unit for c in cap.channels} == {"V"}


@pytest.mark.parametrize("style", ["=", ": "])
def test_hash_key_value_preamble_with_units_in_parentheses_and_no_header(tmp_path, style):
    t, s, o = startup()
    preamble = [f"#model{style}logger-7", f"#interval{style}200000(ps)", f"#start{style}-10(us)",
                f"#size{style}{N}"]
    (cap,) = read_path(write(tmp_path, "hash.txt", "\n".join(preamble) + "\n" + rows(s, o)))
    assert cap.time.n == N
    assert cap.time.dt_s == pytest.approx(DT, rel=1e-15) and cap.time.t0_s == pytest.approx(T0, rel=1e-15)
    assert_values(cap, s, o)
    assert cap.provenance.metadata["model"] == "logger-7" and not cap.provenance.truncated


def test_per_channel_preamble_columns_with_an_empty_leading_column(tmp_path):
    t, s, o = startup()
    current = np.round(np.clip((t + 6e-6) / 6e-6, 0, 1) * 4e-5, 9)
    preamble = ["Source,CH1,CH2,CH3", f"Memory Length,{N},{N},{N}", "HResolution,2.0E-07,2.0E-07,2.0E-07",
                "HOffset,-1.0E-05,-1.0E-05,-1.0E-05", "Vertical Scale,0.5,0.00001,0.5", "VUnit,V,A,V"]
    (cap,) = read_path(write(tmp_path, "perchannel.csv", "\n".join(preamble) + "\n" + rows(s, current, o, lead=",")))
    assert cap.time.dt_s == 2e-7 and cap.time.t0_s == -1e-5 and cap.time.n == N
    assert_values(cap, s, o)
    np.testing.assert_array_equal(cap.channel("supply_current").values, current)
    assert roles(cap) == {"CH1": ("supply", "shape"), "CH2": ("supply_current", "shape"),
                          "CH3": ("output", "shape")}
    assert [c.unit for c in cap.channels] == ["V", "A", "V"]


def test_preamble_beside_the_data(tmp_path):
    t, s, o = startup()
    side = [f"Record Length,{N},Points", "Sample Interval,2e-07,s", "Trigger Point,50,Samples", "Trigger Time,0,s"]
    lines = rows(t, s, o).splitlines()
    text = "".join((side[k] if k < len(side) else ",,") + "," + line + "\n" for k, line in enumerate(lines))
    (cap,) = read_path(write(tmp_path, "side.csv", text))
    assert_time_base(cap)
    assert_values(cap, s, o)  # the first rows, beside the preamble, are data too
    assert cap.provenance.metadata["Sample Interval"] == "2e-07 s"


@pytest.mark.parametrize("time_unit,scale", [("s", 1.0), ("ms", 1e3)])
def test_preamble_beside_the_data_with_gaps_and_a_trailing_comma(tmp_path, time_unit, scale):
    # Keys in the first three columns of the first rows, with blank key rows between them; the time
    # axis's unit only in the preamble (a ms time column is rescaled, BIPM SI Brochure 9th ed. table 7).
    t, _, o = startup()
    side = [f"Record Length,{N},Points", "Sample Interval,2e-07,s", "Trigger Point,50,Samples", ",,", ",,",
            "Source,CH2,", "Vertical Units,V,", f"Horizontal Units,{time_unit},"]
    lines = rows(np.round(t * scale, 9), o).splitlines()
    text = "".join((side[k] if k < len(side) else ",,") + "," + line + ",\n" for k, line in enumerate(lines))
    (cap,) = read_path(write(tmp_path, "beside.csv", text))
    assert_time_base(cap)
    np.testing.assert_array_equal(cap.channel("output").values, o)  # the rows beside the keys are data too
    assert [(c.name, c.unit, c.role) for c in cap.channels] == [("CH2", "V", "output")]  # named by "Source"
    meta = cap.provenance.metadata
    assert (meta["Record Length"], meta["Vertical Units"], meta["Horizontal Units"]) == (f"{N} Points", "V", time_unit)


@pytest.mark.parametrize("unit,scale", [("s", 1.0), ("us", 1e6)])
def test_per_channel_preamble_under_a_header_with_an_empty_first_cell(tmp_path, unit, scale):
    # The units rows are keyed (VUnit for the channels, HUnit for the time axis) and must not be taken
    # for a header; bare horizontal values are in the preamble's horizontal unit.
    _, s, o = startup()
    dt, t0 = repr(round(DT * scale, 12)), repr(round(T0 * scale, 12))
    preamble = [",CH1,CH2", f"HResolution,{dt},{dt}", f"HOffset,{t0},{t0}", "VUnit,V,V", f"HUnit,{unit},{unit}", ""]
    (cap,) = read_path(write(tmp_path, "perch.csv", "\n".join(preamble) + "\n" + rows(s, o, lead=",")))
    assert cap.time.n == N
    assert cap.time.dt_s == pytest.approx(DT, rel=1e-15) and cap.time.t0_s == pytest.approx(T0, rel=1e-15)
    assert_values(cap, s, o)
    assert [(c.name, c.unit) for c in cap.channels] == [("CH1", "V"), ("CH2", "V")]
    assert cap.provenance.metadata["HUnit"] == unit


def test_repeated_generic_names_are_made_unique_with_rounded_stamps(tmp_path):
    t, s, o = startup()
    # times printed in µs with no decimals (1 µs resolution, 0.2 µs steps): rebuilt from the stamps
    body = "".join(f"{t[k] * 1e6:.0f}e-6,{s[k].item()!r},{o[k].item()!r}\n" for k in range(N))
    (cap,) = read_path(write(tmp_path, "round.csv", "Time,Ampl,Ampl\n" + body))
    assert cap.time.dt_s == pytest.approx(DT, rel=1e-12) and cap.time.t0_s == pytest.approx(T0, rel=1e-12)
    assert cap.time.n == N
    assert_values(cap, s, o)
    assert roles(cap) == {"Ampl": ("supply", "shape"), "Ampl_2": ("output", "shape")}
    assert cap.provenance.warnings[0] == "2 columns named 'Ampl': read as 'Ampl', 'Ampl_2'"
    assert "time_base_rebuilt" in cap.provenance.metadata


def test_a_bad_cell_in_a_renamed_column_is_named_by_its_new_name(tmp_path):
    with pytest.raises(InputError) as info:
        read_path(write(tmp_path, "dup.csv", "Time,Ampl,Ampl\n0,0.1,0.2\n1e-6,0.1,x\n2e-6,0.1,0.2\n"))
    assert str(info.value).endswith("dup.csv:3 [Ampl_2]: 'x' is not a number")


def test_one_channel_file_is_the_output(tmp_path):
    t, _, o = startup()
    (cap,) = read_path(write(tmp_path, "C2_only.csv", "Time,Ampl\n" + rows(t, o)))
    assert_time_base(cap)
    assert roles(cap) == {"Ampl": ("output", "shape")}
    assert not cap.has_role("supply")


def test_rounded_time_stamps_with_the_interval_in_the_preamble(tmp_path):
    t, s, o = startup()
    body = "".join(f"{t[k]:.6f},{s[k].item()!r},{o[k].item()!r}\n" for k in range(N))  # 1 µs resolution, 0.2 µs steps
    (cap,) = read_path(write(tmp_path, "rounded.csv", "Sample Interval,2e-7\nTime,CH1,CH2\n" + body))
    assert cap.time.dt_s == 2e-7 and cap.time.t0_s == -1e-5 and cap.time.n == N
    assert "rebuilt from the preamble's sample interval" in cap.provenance.metadata["time_base_rebuilt"]
    assert any("1e-06 s resolution" in w for w in cap.provenance.warnings)


def test_rounded_time_stamps_without_an_interval_use_the_roundest_grid(tmp_path):
    t, s, o = startup()
    body = "".join(f"{t[k]:.6f},{s[k].item()!r},{o[k].item()!r}\n" for k in range(N))
    (cap,) = read_path(write(tmp_path, "rounded.csv", "Time,CH1,CH2\n" + body))
    assert cap.time.dt_s == 2e-7 and cap.time.t0_s == -1e-5 and cap.time.n == N
    assert "from the time stamps" in cap.provenance.metadata["time_base_rebuilt"]


def test_stamps_that_fit_no_uniform_grid_are_still_refused(tmp_path):
    t = np.concatenate([np.arange(10) * 1e-6, [8e-6], 9e-6 + np.arange(10) * 1e-6])
    body = "".join(f"{x:.6f},0.5,0.5\n" for x in t)
    with pytest.raises(InputError) as info:
        read_path(write(tmp_path, "back.csv", "time,vdd,vref\n" + body))
    assert str(info.value).endswith("back.csv:12 [time]: time does not increase (8e-06 s after 9e-06 s)")


def test_peak_detect_min_max_pairs_become_two_channels(tmp_path):
    t, s, o = startup()
    lo_s, hi_s, lo_o, hi_o = s - 0.01, s + 0.01, o - 0.005, o + 0.005
    body = "".join(f"{t[k].item()!r},{lo_s[k].item()!r},{hi_o[k].item()!r}\n{t[k].item()!r},{hi_s[k].item()!r},{lo_o[k].item()!r}\n" for k in range(N))
    (cap,) = read_path(write(tmp_path, "peak.csv", "Time,VDD,VREF\n" + body))
    assert_time_base(cap)
    by_name = {c.name: c for c in cap.channels}
    np.testing.assert_array_equal(by_name["VDD_min"].values, lo_s)
    np.testing.assert_array_equal(by_name["VDD_max"].values, hi_s)
    np.testing.assert_array_equal(by_name["VREF_min"].values, lo_o)
    assert (cap.channel("supply").name, cap.channel("output").name) == ("VDD_max", "VREF_max")
    assert "min/max pairs" in cap.provenance.metadata["peak_detect"]


@pytest.mark.parametrize("newline", ["\r", "\r\n"])
def test_bare_cr_and_trailing_empty_columns(tmp_path, newline):
    t, s, o = startup()
    text = "Time,VDD,VREF,,,\n" + rows(t, s, o, tail=",,,")
    (cap,) = read_path(write(tmp_path, "cr.csv", text, newline))
    assert_time_base(cap)
    assert_values(cap, s, o)
    assert [c.name for c in cap.channels] == ["VDD", "VREF"]


def test_a_preamble_longer_than_256_lines(tmp_path):
    t, s, o = startup()
    preamble = "".join(f"Setting {k},{'on' if k % 2 else 'off'}\n" for k in range(600))
    (cap,) = read_path(write(tmp_path, "long.csv", preamble + "Time,VDD,VREF\n" + rows(t, s, o)))
    assert_time_base(cap)
    assert_values(cap, s, o)
    assert cap.provenance.metadata["Setting 599"] == "on"


@pytest.mark.parametrize("name", ["x", "Time"])
def test_an_index_column_named_like_time_uses_the_preamble_interval(tmp_path, name):
    _, s, o = startup()
    body = "".join(f"{k},{s[k].item()!r},{o[k].item()!r}\n" for k in range(N))
    (cap,) = read_path(write(tmp_path, "idx.csv", f"Sample Interval,2e-7\n{name},VDD,VREF\n" + body))
    assert cap.time.dt_s == 2e-7 and cap.time.t0_s == 0.0 and cap.time.n == N  # not dt = 1 s


def test_a_length_claim_the_rows_contradict_imports_as_truncated(tmp_path, capsys):
    t, s, o = startup()
    (cap,) = read_path(write(tmp_path, "cut.csv", "#Samples: 8192\nTime,VDD,VREF\n" + rows(t, s, o)))
    assert cap.time.n == N and cap.provenance.truncated
    assert cap.provenance.metadata["truncated"] == f"{N} of 8192 samples"
    assert cap.provenance.warnings == [f"Samples is 8192 but the file holds {N} samples: imported as truncated"]


def test_a_cut_that_removes_the_whole_startup_is_refused(tmp_path):
    t = T0 + DT * np.arange(40)
    flat = np.zeros(40)
    with pytest.raises(InputError) as info:
        read_path(write(tmp_path, "early.csv", "#Samples: 8192\nTime,VDD,VREF\n" + rows(t, flat, flat)))
    assert str(info.value).endswith("early.csv:1: Samples is 8192 but the file holds 40 samples and none of them "
                                    "moves: the cut removed the whole startup")


def test_degrees_celsius_are_not_coulomb(tmp_path):
    t, s, o = startup()
    temp = np.full(N, 25.5)
    (cap,) = read_path(write(tmp_path, "log.csv", "Time (s),Vdd (V),Vref (V),Temp (°C)\n" + rows(t, s, o, temp)))
    assert {c.name: c.unit for c in cap.channels}["Temp"] == "°C"


def mixed_folder(folder) -> int:
    """One file of each layout above (and a channel pair) in one folder; returns the captures it holds."""
    t, s, o = startup()
    idx = "".join(f"{k},{s[k].item()!r},{o[k].item()!r},\n" for k in range(N))
    rounded = "".join(f"{t[k]:.6f},{s[k].item()!r},{o[k].item()!r}\n" for k in range(N))
    side = [f"Record Length,{N},Points", "Sample Interval,2e-07,s"]
    beside = "".join((side[k] if k < len(side) else ",,") + "," + line + "\n"
                     for k, line in enumerate(rows(t, s, o).splitlines()))
    gapped = [f"Record Length,{N},Points", "Sample Interval,2e-07,s", ",,", "Source,CH2,", "Vertical Units,V,"]
    files = {
        "numbered.csv": "x-axis,1,2\nsecond,Volt,Volt\n" + rows(t, s, o),
        "seq.csv": "X,CH1,CH2,Start,Increment\nSequence,Volt,Volt,-1.0E-05,2.0E-07\n" + idx,
        "names.csv": "Time in s,C1 in V,C2 in V\n" + rows(t, s, o * 0.99),
        "hash.txt": f"#interval=200000(ps)\n#start=-10(us)\n#size={N}\n" + rows(s, o),
        "perchannel.csv": "HResolution,2.0E-07,2.0E-07\nHOffset,-1.0E-05,-1.0E-05\nVUnit,V,V\n"
                          + rows(s, o * 0.98, lead=","),
        "side.csv": beside,
        "rounded.csv": "Time,CH1,CH2\n" + rounded,
        "cr.csv": ("Time,VDD,VREF,,,\n" + rows(t, s * 0.99, o, tail=",,,")).replace("\n", "\r"),
        "cut.csv": "#Samples: 8192\nTime,VDD,VREF\n" + rows(t, s * 0.98, o),
        "log.csv": "Time (s),Vdd (V),Vref (V),Temp (°C)\n" + rows(t, s, o, np.full(N, 25.5)),
        "C1_pair.csv": "Time,Ampl\n" + rows(t, s * 0.97),
        "C2_pair.csv": "Time,Ampl\n" + rows(t, o * 0.97),
        # the real-export forms of the second pass: keys beside the data with gaps, a header row over a
        # per-channel preamble, repeated names over rounded stamps, quoted cells, UTF-16, a footer
        "gaps.csv": "".join((gapped[k] if k < len(gapped) else ",,") + "," + line + ",\n"
                            for k, line in enumerate(rows(t, o * 0.96).splitlines())),
        "perch_header.csv": ",CH1,CH2\nHResolution,2.0E-07,2.0E-07\nHOffset,-1.0E-05,-1.0E-05\nVUnit,V,V\n"
                            "HUnit,s,s\n\n" + rows(s, o * 0.95, lead=","),
        "repeat.csv": "Time,Ampl,Ampl\n" + "".join(f"{t[k] * 1e6:.0f}e-6,{s[k].item()!r},{o[k].item() * 0.5!r}\n"
                                                   for k in range(N)),
        "quoted.csv": '"Time", "CH1", "CH2"\n' + "".join(f'"{t[k].item()!r}", "{s[k].item()!r}", "{o[k].item() * 0.94!r}"\n'
                                                       for k in range(N)),
        "utf16.csv": b"\xff\xfe" + ("Time (\u00b5s),VDD,VREF\r\n" + rows(t * 1e6, s, o * 0.93)).encode("utf-16-le"),
        "footer.csv": "Time,VDD,VREF\n" + rows(t, s, o * 0.92) + "End of data\nMax,1.81,1.2\n",
    }
    for name, content in files.items():
        (folder / name).write_bytes(content if isinstance(content, bytes) else content.encode("utf-8"))
    return len(files) - 1  # the pair is one capture


def test_a_mixed_folder_ingests_in_one_command(tmp_path, monkeypatch, capsys):
    from labtool.cli import main
    from labtool.store import Campaign

    monkeypatch.chdir(tmp_path)
    (tmp_path / "exports").mkdir()
    expected = mixed_folder(tmp_path / "exports")
    assert main(["ingest", "exports", "--into", "camp"]) == 0
    out, err = capsys.readouterr()
    assert out.splitlines()[0] == f"camp: {expected} added, 0 skipped, 0 failed ({expected + 1} files read)"
    assert "  roles supply=1 (shape), output=2 (shape): 1 capture" in out.splitlines()
    assert "exports/cut.csv: Samples is 8192 but the file holds 120 samples: imported as truncated" in err
    assert "exports/repeat.csv: 2 columns named 'Ampl': read as 'Ampl', 'Ampl_2'" in err
    assert f"exports/footer.csv: 2 lines after the data (from line {N + 2}: 'End of data') read as a footer" in err
    with Campaign.open("camp") as camp:
        table = camp.captures()
        assert len(table) == expected and set(table["n_samples"]) == {N}
        assert all(dt == pytest.approx(DT, rel=1e-9) for dt in table["dt_s"])
        assert all(t0 == pytest.approx(T0, rel=1e-9) for t0 in table["t0_s"])
