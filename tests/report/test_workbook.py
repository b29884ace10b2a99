"""The report workbook read back with openpyxl: equal to the measurement table, values only."""

import json
import zipfile

import numpy as np
import pandas as pd
import pytest
from openpyxl import load_workbook

from labtool.errors import UsageError
from labtool.report.workbook import measurement_columns, number_format, write_workbook


def _table():
    return pd.DataFrame({
        "capture_id": ["a1", "b2", "c3"],
        "source_path": ["runs/ZR24A_p01.csv", "runs/ZR24A_p02.csv", "runs/ZR24B_p01.csv"],
        "lot": ["ZR24A", "ZR24A", "ZR24B"], "wafer": ["W03", "W03", None],
        "die_x": [1, 2, None], "die_y": [0, 0, None], "part": ["p01", "p02", "p01"],
        "temperature_c": [25.0, -40.0, 125.0], "ramp_s": [1e-5, 1e-3, 1e-4],
        "verdict": ["started", "stuck_at_zero", "slow_start"],
        "t_supply_s": [9e-6, 9e-4, 9e-5], "delay_s": [1.25e-5, np.nan, 8.1e-5], "overshoot_pct": [2.5, None, 0.0],
        "vout_final_v": [1.2011, 0.0012, 1.1998], "ramp_v_per_s": [1.44e5, 1.44e3, 1.44e4],
        "evidence": [{"delay_s": 1.25e-5}, {"output_peak_v": 0.003}, {"delay_s": 8.1e-5, "max_delay_s": 5e-5}],
        "board": ["=HYPERLINK(\"x\")", "b\x07ell", "plain"],  # a hostile tag and a control character
        "tags_json": ["{}"] * 3, "waveform_path": ["w/a.parquet"] * 3,
    })


def _read(path, sheet):
    ws = load_workbook(path)[sheet]
    rows = list(ws.iter_rows(values_only=True))
    return ws, pd.DataFrame(rows[1:], columns=rows[0])


def test_measurement_sheet_reads_back_equal_to_the_table(tmp_path):
    table = _table()
    path = write_workbook(tmp_path / "r.xlsx", table, summary=pd.DataFrame({"lot": ["ZR24A"], "n": [2]}),
                          limits={"band_pct": 1.0, "max_delay_s": 5e-5}, about={"labtool_version": "0.1.0"})
    ws = load_workbook(path)["Measurements"]
    header, *rows = list(ws.iter_rows(values_only=True))
    cols = measurement_columns(table)
    assert list(header) == cols
    assert "tags_json" not in cols and "waveform_path" not in cols  # store internals stay out
    assert len(rows) == len(table)
    for i, c in enumerate(cols):
        for got, want in zip([r[i] for r in rows], table[c].astype(object)):
            if isinstance(want, dict):
                assert json.loads(got) == want
            elif want is None or (isinstance(want, float) and np.isnan(want)):
                assert got is None
            elif c == "board" and "\x07" in want:
                assert got == "bell"  # characters XML cannot hold are dropped, the rest kept
            else:
                assert got == want, (c, got, want)
    assert ws.freeze_panes == "B2" and ws.auto_filter.ref == f"A1:{ws.cell(1, len(cols)).column_letter}4"


def test_workbook_has_values_only_no_formulas_and_no_macros(tmp_path):
    path = write_workbook(tmp_path / "r.xlsx", _table())
    wb = load_workbook(path)
    for ws in wb.worksheets:
        for row in ws.iter_rows():
            for cell in row:
                assert cell.data_type != "f", (ws.title, cell.coordinate)
    _, back = _read(path, "Measurements")
    assert back.loc[0, "board"] == '=HYPERLINK("x")'  # kept as text
    with zipfile.ZipFile(path) as z:
        names = z.namelist()
        assert not any("vbaProject" in n for n in names)
        assert all("<f>" not in z.read(n).decode("utf-8", "replace") for n in names if n.endswith(".xml"))


def test_units_are_shown_by_number_format_and_sheets_are_complete(tmp_path):
    path = write_workbook(tmp_path / "r.xlsx", _table(), summary=pd.DataFrame({"lot": ["ZR24A"], "delay_median_s": [1e-5]}),
                          comparison=pd.DataFrame({"lot": ["ZR24A"], "finding": ["consistent"]}),
                          limits={"band_pct": 1.0, "nested": {"a": 1}}, about={"labtool_version": "0.1.0"})
    wb = load_workbook(path)
    assert wb.sheetnames == ["Summary", "Comparison", "Measurements", "Failures", "Limits"]
    ws = wb["Measurements"]
    header = [c.value for c in ws[1]]
    fmt = {h: ws.cell(2, i + 1).number_format for i, h in enumerate(header)}
    assert fmt["delay_s"].endswith('" s"') and fmt["ramp_v_per_s"].endswith('" V/s"')
    assert fmt["vout_final_v"].endswith('" V"') and fmt["overshoot_pct"].endswith('" %"')
    assert fmt["temperature_c"].endswith('" °C"')
    assert number_format("capture_id") is None
    _, failures = _read(path, "Failures")
    assert list(failures["capture_id"]) == ["b2", "c3"]
    _, limits = _read(path, "Limits")
    items = dict(zip(limits["item"], limits["value"]))
    assert items == {"labtool_version": "0.1.0", "limits.band_pct": 1.0, "limits.nested.a": 1}


def test_a_failed_write_is_one_clear_error_and_leaves_no_partial_file(tmp_path):
    (tmp_path / "r.xlsx").mkdir()  # the target name is taken by a directory
    with pytest.raises(UsageError, match=r"r\.xlsx: cannot write the workbook"):
        write_workbook(tmp_path / "r.xlsx", _table())
    assert [p.name for p in tmp_path.iterdir()] == ["r.xlsx"]


def test_text_longer_than_a_cell_holds_is_cut_with_a_note(tmp_path):
    table = _table()
    table.loc[0, "board"] = "x" * 40_000
    ws = load_workbook(write_workbook(tmp_path / "r.xlsx", table))["Measurements"]
    header = [c.value for c in ws[1]]
    cell = ws.cell(2, header.index("board") + 1).value
    assert len(cell) == 32_767 and cell.startswith("xxx") and "cut: 40000 characters" in cell
