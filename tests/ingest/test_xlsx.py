"""XLSX workbooks: capture sheets, conditions sheets, header cells, several captures per workbook."""

import numpy as np
import openpyxl
import pytest

from labtool.errors import InputError
from labtool.ingest import read_path
from labtool.store import Campaign
from tests.ingest.writers import startup_arrays, write_workbook


def _capture_rows(t, vdd, vref, header=("Time (us)", "VDD (V)", "VREF (mV)")):
    return [header, *zip((t * 1e6).tolist(), vdd.tolist(), (vref * 1e3).tolist())]


def test_one_capture_per_sheet_with_workbook_and_sheet_conditions(tmp_path):
    t, vdd, vref = startup_arrays()
    sheets = {
        "conditions": [("lot", "ZR24B"), ("wafer", "W07"), ("Temperature [°C]", 125), ("fixture", "B2")],
        "p03_fast": [("ZR-4410 power-up",), ("part", "p03"), ("ramp", "10us"), (), *_capture_rows(t, vdd, vref)],
        "p04_slow": [("part", "p04"), ("ramp [ms]", 100), (), *_capture_rows(t, vdd, vref * 0.99)],
        "notes": [("remark", "socket cleaned before run")],
    }
    captures = read_path(write_workbook(tmp_path / "book.xlsx", sheets))
    assert [c.provenance.locator for c in captures] == ["p03_fast", "p04_slow"]
    a, b = captures
    assert (a.conditions.lot, a.conditions.wafer, a.conditions.part, a.conditions.temperature_c) == ("ZR24B", "W07", "p03", 125.0)
    assert a.conditions.ramp_s == 1e-5 and b.conditions.ramp_s == 0.1
    assert a.conditions.tags == {"fixture": "B2"}  # an unknown key of the conditions sheet is a tag
    assert a.capture_id != b.capture_id and a.provenance.sha256 == b.provenance.sha256
    assert a.provenance.importer == "xlsx" and a.provenance.metadata["notes"] == "ZR-4410 power-up"
    # Workbooks keep about 15 significant digits (Excel's number precision, from memory), so compare
    # to 1e-14 rather than bit for bit.
    np.testing.assert_allclose(a.times(), t, rtol=1e-12, atol=1e-18)
    np.testing.assert_allclose(a.channel("supply").values, vdd, rtol=1e-14)
    # mV → V: BIPM SI Brochure 9th ed. table 7, milli = 1e-3.
    np.testing.assert_allclose(b.channel("output").values, vref * 0.99, rtol=1e-14)


def test_conditions_sheet_as_a_table_per_sheet(tmp_path):
    t, vdd, vref = startup_arrays()
    sheets = {
        "conditions": [("sheet", "lot", "part", "temp_c", "ramp_s"),
                       ("a", "ZR24A", "p01", -40, 1e-3), ("b", "ZR24A", "p02", 25, 0.1)],
        "a": _capture_rows(t, vdd, vref),
        "b": _capture_rows(t, vdd, vref + 0.001),
    }
    a, b = read_path(write_workbook(tmp_path / "runs.xlsx", sheets))
    assert (a.conditions.part, a.conditions.temperature_c, a.conditions.ramp_s) == ("p01", -40.0, 1e-3)
    assert (b.conditions.part, b.conditions.temperature_c, b.conditions.ramp_s) == ("p02", 25.0, 0.1)


def test_table_away_from_the_corner_and_formulas_are_not_evaluated(tmp_path):
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "scope"
    ws["B2"], ws["C2"], ws["D2"] = "time [s]", "vdd [V]", "vref [V]"
    for k in range(5):
        ws.cell(row=3 + k, column=2, value=k * 1e-6)
        ws.cell(row=3 + k, column=3, value=1.8)
        ws.cell(row=3 + k, column=4, value=1.2)
    ws["D5"] = "=1+1"  # a formula with no cached value: never evaluated, so a clear error (issue #9)
    wb.save(tmp_path / "corner.xlsx")
    with pytest.raises(InputError, match=r"corner.xlsx \[scope!D5\]: formula =1\+1 has no cached value"):
        read_path(str(tmp_path / "corner.xlsx"))
    ws["D5"] = None  # an empty cell is a missing sample
    wb.save(tmp_path / "corner.xlsx")
    (capture,) = read_path(str(tmp_path / "corner.xlsx"))
    out = capture.channel("output")
    assert [c.name for c in capture.channels] == ["vdd", "vref"]
    assert np.isnan(out.values[2]) and out.clipped.tolist() == [False, False, True, False, False]


def test_workbook_round_trips_through_the_store(tmp_path):
    t, vdd, vref = startup_arrays()
    rows = [("time [s]", "vdd [V]", "vref [V]"), *zip(t.tolist(), vdd.tolist(), vref.tolist())]
    captures = read_path(write_workbook(tmp_path / "b.xlsx", {"one": rows, "two": rows}))
    with Campaign.open(tmp_path / "c", create=True) as camp:
        ids = [camp.add_capture(c).capture_id for c in captures]
        back = [camp.load_capture(i) for i in ids]
        table = camp.captures()
    assert sorted(table["locator"]) == ["one", "two"]
    for cap, first in zip(back, captures):
        # The store keeps what the workbook gave exactly; the workbook itself keeps ~15 digits.
        np.testing.assert_array_equal(cap.channel("output").values, first.channel("output").values)
        np.testing.assert_allclose(cap.times(), t, rtol=1e-14)
        np.testing.assert_allclose(cap.channel("supply").values, vdd, rtol=1e-14)
        np.testing.assert_allclose(cap.channel("output").values, vref, rtol=1e-14)


def test_numbers_stored_as_text_are_read(tmp_path):
    rows = [("time", "vdd", "vref"), ("0", "0", "0"), ("1e-6", "1.8", "1.2"), ("2e-6", "1.8", "1.2")]
    (capture,) = read_path(write_workbook(tmp_path / "text.xlsx", {"s": rows}))
    assert capture.channel("output").values.tolist() == [0.0, 1.2, 1.2]


@pytest.mark.parametrize("name", ["conditions", "Conditions", "run info", "Setup"])
def test_conditions_sheet_names(tmp_path, name):
    t, vdd, vref = startup_arrays()
    sheets = {name: [("lot", "ZR24C")], "data": _capture_rows(t, vdd, vref)}
    (capture,) = read_path(write_workbook(tmp_path / "n.xlsx", sheets))
    assert capture.conditions.lot == "ZR24C"
