"""Channel roles from names, conditions from file names and manifests, and how they layer."""

import openpyxl
import pytest

from labtool.capture import Conditions
from labtool.ingest import IngestOptions, Manifest, conditions_from_name, load_manifest, read_path
from labtool.ingest.roles import assign_roles, role_by_name

ROWS = "0,0,0\n1e-6,0.9,0.1\n2e-6,1.8,1.2\n"


@pytest.mark.parametrize("name,role", [
    ("vdd", "supply"), ("VCC", "supply"), ("AVDD", "supply"), ("Vin", "supply"), ("supply", "supply"),
    ("CH1 VDD", "supply"), ("ch2:vref", "output"), ("VREF_OUT", "output"), ("vbg", "output"), ("Vout", "output"),
    ("ref", "output"), ("out", "output"), ("EN", "enable"), ("enable", "enable"), ("IDD", "supply_current"),
    ("Icc", "supply_current"), ("i_supply", "supply_current"), ("supply current", "supply_current"),
    ("V(vdd)", "supply"), ("I(VDD)", "supply_current"), ("v(vref)", "output"),
    ("CH1", None), ("temp", None), ("vdd_out", None),
])
def test_role_by_name(name, role):
    assert role_by_name(name) == role


def test_roles_by_name_with_optional_channels():
    names = ["CH1 VDD", "CH2 VREF", "EN", "IDD", "CH4"]
    assert assign_roles(names, {}, path="f.csv") == [("supply", "name"), ("output", "name"), ("enable", "name"),
                                                     ("supply_current", "name"), ("other", "")]


def test_explicit_picks_take_a_column_away_from_name_matching():
    # vref is picked as the supply on purpose; "ref" then fills the output by name.
    roles = assign_roles(["vref", "ref"], {"supply": "vref"}, path="f.csv")
    assert roles == [("supply", "flag"), ("output", "name")]


def test_name_pattern_fields_are_typed_and_others_become_tags():
    c = conditions_from_name("runs/ZR24A_p01_m40C_1ms_boardB2.csv", "{lot}_{part}_{temp_c}C_{ramp}_board{board}.csv")
    assert (c.lot, c.part, c.temperature_c, c.ramp_s) == ("ZR24A", "p01", -40.0, 1e-3)
    assert c.tags == {"board": "B2"}


def test_name_pattern_matches_without_gz_or_extension_and_across_folders():
    assert conditions_from_name("x/ZR24B_p09.csv.gz", "{lot}_{part}.csv").part == "p09"
    assert conditions_from_name("x/ZR24B_p09.csv", "{lot}_{part}").lot == "ZR24B"
    c = conditions_from_name("data/W11/hot/p02.csv", "{wafer}/{}/{part}.csv")
    assert (c.wafer, c.part) == ("W11", "p02")


def test_manifest_csv_and_lookup_by_relative_path_or_basename(tmp_path):
    (tmp_path / "m.csv").write_text(
        "File;Lot;Part;Temperature [°C];Ramp [ms];die_x;board\n"
        "cold/a.csv;ZR24A;p01;-40;1;3;B1\n"
        "b.csv;ZR24B;p02;125;0,01;;B2\n")
    m = load_manifest(str(tmp_path / "m.csv"))
    a = Conditions.from_mapping(m.lookup("sample/cold/a.csv"))
    assert (a.lot, a.part, a.temperature_c, a.ramp_s, a.die_x, a.tags) == ("ZR24A", "p01", -40.0, 1e-3, 3, {"board": "B1"})
    b = Conditions.from_mapping(m.lookup("/anywhere/b.csv"))
    assert (b.lot, b.ramp_s) == ("ZR24B", 1e-5)
    assert m.lookup("hot/a.csv") is None  # the folder is part of the key
    assert len(m) == 2 and set(m) == {"cold/a.csv", "b.csv"}


def test_manifest_xlsx_with_a_sheet_column(tmp_path):
    wb = openpyxl.Workbook()
    ws = wb.active
    for row in (("file", "sheet", "part"), ("book.xlsx", "s1", "p01"), ("book.xlsx", "s2", "p02"), ("book.xlsx", None, "p00")):
        ws.append(row)
    wb.save(tmp_path / "m.xlsx")
    m = load_manifest(str(tmp_path / "m.xlsx"))
    assert m.lookup("book.xlsx", "s2")["part"] == "p02"
    assert m.lookup("book.xlsx", "s3")["part"] == "p00"  # the row without a sheet covers the rest


def test_conditions_layer_file_then_pattern_then_manifest_then_extra(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "ZR24A_p01_25C.csv").write_text("# lot: FROMFILE\n# wafer: W03\ntime,vdd,vref\n" + ROWS)
    options = IngestOptions(name_pattern="{lot}_{part}_{temp_c}C.csv",
                            manifest=Manifest({"ZR24A_p01_25C.csv": {"part": "p99", "repeat": "2"}}),
                            extra_conditions=Conditions(repeat=5, tags={"returned": "yes"}))
    (capture,) = read_path("ZR24A_p01_25C.csv", options)
    c = capture.conditions
    assert c.wafer == "W03"  # only the file says it
    assert c.lot == "ZR24A"  # the name pattern over the file
    assert c.part == "p99"  # the manifest over the name
    assert c.repeat == 5 and c.tags == {"returned": "yes"}  # extra over everything


def test_a_plain_dict_works_as_a_manifest(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "r.csv").write_text("time,vdd,vref\n" + ROWS)
    (capture,) = read_path("r.csv", IngestOptions(manifest={"r.csv": {"lot": "ZR24C", "ramp": "100ms"}}))
    assert (capture.conditions.lot, capture.conditions.ramp_s) == ("ZR24C", 0.1)
