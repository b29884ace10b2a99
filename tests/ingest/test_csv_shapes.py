"""Every delimited-text shape the importer promises, from small fixtures written here."""

import gzip

import numpy as np
import pandas as pd
import pytest

from labtool.ingest import IngestOptions, read_path
from labtool.store import Campaign
from tests.ingest.writers import Shape, render, startup_arrays


def _write(tmp_path, name, data: bytes):
    path = tmp_path / name
    path.write_bytes(data)
    return str(path)


def _frame(capture) -> pd.DataFrame:
    return pd.DataFrame({"time": capture.times(), **{c.name: c.values for c in capture.channels}})


def test_plain_csv_round_trips_through_the_store_exactly(tmp_path):
    t, vdd, vref = startup_arrays()
    path = _write(tmp_path, "plain.csv", render(Shape(), t, [vdd, vref]))
    (capture,) = read_path(path)
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        stored = camp.load_capture(camp.add_capture(capture).capture_id)
    written = pd.DataFrame({"time": t, "vdd": vdd, "vref": vref})
    # repr() of a float is read back as the same float (Python's shortest round-trip repr), so the
    # whole chain file → store → DataFrame must give the written arrays bit for bit.
    pd.testing.assert_frame_equal(_frame(stored), written, check_exact=True)
    assert [(c.name, c.unit, c.role) for c in stored.channels] == [("vdd", "V", "supply"), ("vref", "V", "output")]
    assert stored.provenance.importer == "csv" and stored.provenance.locator == ""


SHAPES = {
    "comma": Shape(),
    "semicolon-decimal-comma": Shape(delimiter=";", decimal=","),
    "tab": Shape(delimiter="\t"),
    "tab-decimal-comma": Shape(delimiter="\t", decimal=","),
    "whitespace": Shape(delimiter=" "),
    "whitespace-decimal-comma-units-row": Shape(delimiter=" ", decimal=",", units="row"),
    "parentheses": Shape(units="parens"),
    "units-row": Shape(units="row"),
    "slash-units": Shape(units="slash"),
    "suffix-units": Shape(units="suffix"),
    "no-units": Shape(units="none"),
    "crlf-bom": Shape(crlf=True, bom=True),
    "gzip": Shape(gzip=True),
    "trailing-delimiter": Shape(trailing_delimiter=True),
    "preamble": Shape(preamble=("Model,ZR-4410 bench", "Record Length,50", "# lot: ZR24A")),
    "semicolon-preamble-crlf": Shape(delimiter=";", decimal=",", crlf=True,
                                     preamble=("Lot;ZR24B", "Temperature [°C];-40", "")),
}


@pytest.mark.parametrize("name", sorted(SHAPES))
def test_every_text_shape_reads_back_what_was_written(tmp_path, name):
    shape = SHAPES[name]
    t, vdd, vref = startup_arrays(seed=len(name))
    path = _write(tmp_path, f"{name}.csv.gz" if shape.gzip else f"{name}.csv", render(shape, t, [vdd, vref]))
    (capture,) = read_path(path)
    np.testing.assert_array_equal(capture.channel("supply").values, vdd)
    np.testing.assert_array_equal(capture.channel("output").values, vref)
    np.testing.assert_array_equal(capture.times(), t)
    assert capture.provenance.importer == ("csv+gzip" if shape.gzip else "csv")


@pytest.mark.parametrize("unit,factor", [("ms", 1e-3), ("us", 1e-6), ("µs", 1e-6), ("ns", 1e-9)])
def test_time_in_any_unit_becomes_seconds(tmp_path, unit, factor):
    t = np.arange(40) * 2e-6
    vdd, vref = np.linspace(0, 1.8, 40), np.linspace(0, 1.2, 40)
    path = _write(tmp_path, "t.csv", render(Shape(time_unit=(unit, factor)), t / factor, [vdd, vref]))
    (capture,) = read_path(path)
    np.testing.assert_allclose(capture.times(), t, rtol=1e-12, atol=1e-18)
    assert capture.time.uniform and capture.time.dt_s == pytest.approx(2e-6, rel=1e-12)


def test_prefixed_channel_units_are_converted_to_si(tmp_path):
    t = np.arange(30) * 1e-6
    vdd, vref_mv, idd_ua = np.full(30, 1.8), np.full(30, 1200.5), np.full(30, 24.25)
    shape = Shape(columns=(("VDD", "V"), ("VREF", "mV"), ("IDD", "uA")))
    (capture,) = read_path(_write(tmp_path, "u.csv", render(shape, t, [vdd, vref_mv, idd_ua])))
    out, current = capture.channel("output"), capture.channel("supply_current")
    # BIPM SI Brochure 9th ed. table 7: milli = 1e-3, micro = 1e-6.
    assert (out.unit, current.unit) == ("V", "A")
    np.testing.assert_allclose(out.values, 1.2005, rtol=1e-15)
    np.testing.assert_allclose(current.values, 24.25e-6, rtol=1e-15)


def test_preamble_is_kept_and_known_keys_become_conditions(tmp_path):
    text = ("# lot: ZR24A\n# part: p07\nTemperature [°C],125\nRamp [ms],1\nOperator note,first power-up\n"
            "Record Length: 3\ntime,vdd,vref\n0,0,0\n1e-6,1.8,0.6\n2e-6,1.8,1.2\n")
    (capture,) = read_path(_write(tmp_path, "p.csv", text.encode()))
    c = capture.conditions
    assert (c.lot, c.part, c.temperature_c, c.ramp_s) == ("ZR24A", "p07", 125.0, 1e-3)
    meta = capture.provenance.metadata
    assert meta["Operator note"] == "first power-up" and meta["Record Length"] == "3"
    assert c.tags == {}  # preamble keys that are not conditions stay metadata


def test_sample_index_only_takes_the_interval_from_the_preamble(tmp_path):
    rows = "".join(f"{i},{min(1.8, 0.1 * i):.2f},{0.0 if i < 10 else 1.2}\n" for i in range(30))
    text = "Sample Interval,2e-9\nStart Time,-1e-8\nRecord Length,30\nSample,VDD,VREF\n" + rows
    (capture,) = read_path(_write(tmp_path, "idx.csv", text.encode()))
    assert capture.time.uniform and capture.time.dt_s == 2e-9 and capture.time.t0_s == -1e-8
    assert capture.time.n == 30
    assert [c.name for c in capture.channels] == ["VDD", "VREF"]  # the index is not a channel


def test_spaced_interval_and_start_keys_of_other_tools_are_read(tmp_path):
    # Another tool's key spelling, as written in its exports: read for interoperability.
    rows = "".join(f"{i},{min(1.8, 0.1 * i):.2f},{0.0 if i < 10 else 1.2}\n" for i in range(20))
    text = "X Increment,5e-9\nX Origin,-2e-8\nSample,VDD,VREF\n" + rows
    (capture,) = read_path(_write(tmp_path, "spaced.csv", text.encode()))
    assert capture.time.dt_s == 5e-9 and capture.time.t0_s == -2e-8 and capture.time.n == 20


def test_sample_rate_in_the_preamble_gives_the_interval(tmp_path):
    rows = "".join(f"{i}\t{0.1 * i:.1f}\t{0.05 * i:.2f}\n" for i in range(10))
    text = "Sample Rate\t500 MSa/s\nIndex\tvdd\tvref\n" + rows
    (capture,) = read_path(_write(tmp_path, "rate.tsv", text.encode()))
    assert capture.time.dt_s == pytest.approx(2e-9, rel=1e-12)


def test_utf16_with_byte_order_mark(tmp_path):
    text = "time [s]\tvdd [V]\tvref [V]\n" + "".join(f"{k}e-6\t1.8\t1.2\n" for k in range(10))
    (capture,) = read_path(_write(tmp_path, "w.txt", text.encode("utf-16")))
    assert capture.time.n == 10 and capture.channel("output").values[0] == 1.2


def test_gzip_is_recognised_by_magic_bytes_not_name(tmp_path):
    t, vdd, vref = startup_arrays()
    path = _write(tmp_path, "no_suffix.csv", gzip.compress(render(Shape(), t, [vdd, vref]), mtime=0))
    (capture,) = read_path(path)
    assert capture.provenance.importer == "csv+gzip"
    np.testing.assert_array_equal(capture.channel("output").values, vref)


def test_non_uniform_times_are_kept_explicitly(tmp_path):
    t = np.array([0.0, 1e-6, 3e-6, 7e-6, 15e-6])
    shape = Shape()
    (capture,) = read_path(_write(tmp_path, "nu.csv", render(shape, t, [np.ones(5), np.ones(5)])))
    assert not capture.time.uniform
    np.testing.assert_array_equal(capture.times(), t)


def test_provenance_hash_is_of_the_raw_bytes_and_the_path_as_given(tmp_path, monkeypatch):
    from hashlib import sha256

    data = render(Shape(gzip=True), *startup_arrays()[:1], [np.ones(50), np.ones(50)])
    (tmp_path / "runs").mkdir()
    (tmp_path / "runs" / "a.csv.gz").write_bytes(data)
    monkeypatch.chdir(tmp_path)
    (capture,) = read_path("runs/a.csv.gz")
    # The hash is of the file as stored on disk (compressed), hashlib.sha256 as the reference.
    assert capture.provenance.sha256 == sha256(data).hexdigest()
    assert capture.provenance.source_path == "runs/a.csv.gz"
    assert len(capture.capture_id) == 16


def test_same_bytes_give_the_same_capture_id(tmp_path):
    data = render(Shape(), *startup_arrays()[:1], [np.ones(50), np.ones(50)])
    a = read_path(_write(tmp_path, "a.csv", data))[0]
    b = read_path(_write(tmp_path, "b.csv", data))[0]
    assert a.capture_id == b.capture_id


def test_explicit_column_picks_win_over_names(tmp_path):
    text = "t,CH1,CH2,CH3\n" + "".join(f"{k}e-6,1.8,1.2,0.0\n" for k in range(5))
    options = IngestOptions(supply="ch1", output="CH2", enable="CH3")
    (capture,) = read_path(_write(tmp_path, "picks.csv", text.encode()), options)
    assert [(c.name, c.role) for c in capture.channels] == [("CH1", "supply"), ("CH2", "output"), ("CH3", "enable")]


def test_instrument_settings_in_a_preamble_are_not_conditions(tmp_path):
    text = "VDD: CH1\nX: 10 div\nTemp: 25\ntime,vdd,vref\n0,0,0\n1e-6,1.8,1.2\n"
    (capture,) = read_path(_write(tmp_path, "s.csv", text.encode()))
    assert capture.conditions.vdd_v is None and capture.conditions.die_x is None
    assert capture.conditions.temperature_c == 25.0
    assert capture.provenance.metadata["VDD"] == "CH1"


@pytest.mark.parametrize("line", ["# vdd_v: 1.8", "VDD (V),1.8", "Vdd[V]: 1.8", "# supply_v = 1.8"])
def test_a_supply_key_with_its_unit_in_a_preamble_is_a_condition(tmp_path, line):
    # A condition field named together with its unit is unmistakable; a bare "VDD" (above) is not.
    text = line + "\ntime,vdd,vref\n0,0,0\n1e-6,1.8,1.2\n"
    (capture,) = read_path(_write(tmp_path, "v.csv", text.encode()))
    assert capture.conditions.vdd_v == 1.8


def test_a_one_based_index_without_a_start_time(tmp_path):
    text = "Sample Interval,1e-6\nindex,vdd,vref\n1,0,0\n2,1.8,1.2\n3,1.8,1.2\n"
    (capture,) = read_path(_write(tmp_path, "i.csv", text.encode()))
    assert capture.time.t0_s == 1e-6 and capture.time.dt_s == 1e-6


def test_whitespace_units_row_in_parentheses(tmp_path):
    text = "# run 12\ntime   vdd   vref\n(us)   (V)   (mV)\n0 0 0\n1 1.8 1200\n2 1.8 1200\n"
    (capture,) = read_path(_write(tmp_path, "ws.dat", text.encode()))
    assert capture.time.dt_s == 1e-6
    assert capture.channel("output").values.tolist() == [0.0, 1.2, 1.2]
    assert capture.provenance.metadata["notes"] == "run 12"


def test_a_clock_time_under_start_time_is_not_the_time_origin(tmp_path):
    text = "Start Time: 09:14:02\nSample Interval: 1 us\nSample,vdd,vref\n0,0,0\n1,1.8,1.2\n"
    (capture,) = read_path(_write(tmp_path, "clock.csv", text.encode()))
    assert capture.time.t0_s == 0.0 and capture.time.dt_s == 1e-6
    assert capture.provenance.metadata["Start Time"] == "09:14:02"
