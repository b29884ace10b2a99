"""Every class of malformed input gets one exact line naming the file, the line or cell, and what is wrong."""

import gzip

import pytest

from labtool.errors import InputError, UsageError
from labtool.ingest import IngestOptions, load_manifest, read_path
from labtool.ingest.conditions import compile_name_pattern
from tests.ingest.writers import write_workbook

GOOD_ROWS = "0,0,0\n1e-6,0.9,0.1\n2e-6,1.8,1.2\n"

# (file name, bytes, expected message) — invented fixtures, each broken in one way.
TEXT_CASES = [
    ("empty.csv", b"", "empty.csv: empty file"),
    ("blank.csv", b"\n  \n\r\n", "blank.csv: empty file"),
    ("header.csv", b"time,vdd,vref\n", "header.csv:1: header only, no data rows"),
    ("prose.txt", b"operator notes\nnothing measured today\n", "prose.txt: no data rows: no line holds numbers"),
    ("nul.csv", b"time,vdd,vref\n0,0\x00,0\n", "nul.csv:2: binary data (NUL byte), not a text export"),
    ("text.csv", b"time,vdd,vref\n0,0,0\n1e-6,abc,0\n2e-6,1.8,1.2\n", "text.csv:3 [vdd]: 'abc' is not a number"),
    ("cut.csv", b"time,vdd,vref\n0,0,0\n1e-6,0.9,0.1\n2e-6,1.8",
     "cut.csv:4: 2 fields, expected 3 (line cut short or extra delimiter)"),
    ("extra.csv", b"time,vdd,vref\n0,0,0\n1e-6,0.9,0.1,7\n2e-6,1.8,1.2\n",
     "extra.csv:3: 4 fields, expected 3 (line cut short or extra delimiter)"),
    ("decimal.csv", b"time;vdd;vref\n0;0;0\n0,1;1.5;0\n0,2;1,8;1\n0,3;1,8;1\n",
     "decimal.csv:3 [vdd]: '1.5' is not a number (this file uses a decimal comma)"),
    ("backwards.csv", b"time,vdd,vref\n0,0,0\n2e-6,0.5,0\n1e-6,1.8,1\n",
     "backwards.csv:4 [time]: time does not increase (1e-06 s after 2e-06 s)"),
    ("repeat.csv", b"time,vdd,vref\n0,0,0\n1e-6,0.5,0\n1e-6,1.8,1\n",
     "repeat.csv:4 [time]: time does not increase (1e-06 s after 1e-06 s)"),
    ("notime.csv", b"time,vdd,vref\n0,0,0\n,0.5,0\n2e-6,1,1\n", "notime.csv:3 [time]: time is missing or not a number"),
    ("one.csv", b"time,vdd,vref\n0,0,0\n", "one.csv:1: 1 data row; a capture needs at least 2 samples"),
    # a repeated name is made unique (vdd_2); two supplies by name are then one choice too many
    ("dup.csv", b"time,vdd,vdd,vref\n0,0,0,0\n1e-6,0.5,0,0\n",
     "dup.csv:1: several columns look like the supply (vdd, vdd_2); pick one with --supply NAME "
     "(columns: time, vdd, vdd_2, vref)"),
    ("amps.csv", b"time [s],vdd [A],vref [V]\n" + GOOD_ROWS.encode(),
     "amps.csv:1 [vdd]: column 'vdd' (supply) is in A; it must be in V"),
    ("div.csv", b"time [s],vdd [V],vref [div]\n" + GOOD_ROWS.encode(),
     "div.csv:1 [vref]: column 'vref' (output) has an unknown unit 'div'; it must be in V"),
    ("volt_time.csv", b"time [V],vdd [V],vref [V]\n" + GOOD_ROWS.encode(),
     "volt_time.csv:1 [time]: column 'time' is in V; time must be in seconds"),
    ("current_in_volts.csv", b"time,vdd,vref,idd [mV]\n0,0,0,0\n1e-6,1,1,1\n",
     "current_in_volts.csv:1 [idd]: column 'idd' (supply_current) is in V; it must be in A"),
    ("all_nan.csv", b"time,vdd,vref\n0,nan,0\n1e-6,,0\n", "all_nan.csv:1 [vdd]: column 'vdd' (supply) holds no valid values"),
    ("scpi_only.csv", b"time,vdd,vref\n0,0,9.91E37\n1e-6,1,9.9E37\n",
     "scpi_only.csv:1 [vref]: column 'vref' (output) holds no valid values"),
    ("no_time.csv", b"vdd,vref\n0,0\n0.5,0\n",
     "no_time.csv:1: no time column (a column in seconds or named time) and no sample interval in the preamble"),
    ("index.csv", b"Sample,vdd,vref\n0,0,0\n1,0.5,0\n",
     "index.csv:1 [Sample]: column 'Sample' is a sample index and the preamble gives no sample interval "
     "(a line such as 'Sample Interval,2e-9')"),
    ("interval.csv", b"Sample Interval,fast\nSample,vdd,vref\n0,0,0\n1,0.5,0\n",
     "interval.csv:1: Sample Interval: 'fast' is not a quantity in s"),
    ("negative.csv", b"Sample Interval,-2e-9\nSample,vdd,vref\n0,0,0\n1,0.5,0\n",
     "negative.csv:1: Sample Interval: the sample interval must be positive"),
    ("short.csv", b"x,y\nRecord Length,100\ntime,vdd,vref\n0,0,0\n1e-6,0,0\n2e-6,0,0\n",
     "short.csv:2: Record Length is 100 but the file holds 3 samples and none of them moves: the cut removed "
     "the whole startup"),
    ("hot.csv", b"# temperature: hot\ntime,vdd,vref\n" + GOOD_ROWS.encode(),
     "hot.csv:1: temperature_c = 'hot' is not a valid float"),
    ("roles.csv", b"time,node3,node7\n0,0,0\n1e-6,0.5,0\n",
     "roles.csv:1: no supply column recognised (columns: time, node3, node7); name it with --supply NAME"),
    ("no_output.csv", b"time,vdd,node7\n0,0,0\n1e-6,0.5,0\n",
     "no_output.csv:1: no reference output column recognised (columns: time, vdd, node7); name it with --output NAME"),
    ("two_supplies.csv", b"time,vdd,avdd,vref\n0,0,0,0\n1e-6,0.5,0,0\n",
     "two_supplies.csv:1: several columns look like the supply (vdd, avdd); pick one with --supply NAME "
     "(columns: time, vdd, avdd, vref)"),
    ("ragged.csv", b"a,b\n1,2\n1,2,3\n1\n1,2,3,4\n", "ragged.csv:3: 3 fields, expected 2 (line cut short or extra delimiter)"),
    ("legacy.xls", b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\0" * 64,
     "legacy.xls: a legacy .xls workbook (or another binary document): save it as .xlsx or CSV"),
    ("fake.xlsx", b"time,vdd,vref\n" + GOOD_ROWS.encode(),
     "fake.xlsx: named like an XLSX workbook but is not one (no zip signature)"),
    ("junk.xlsx", b"PK\x03\x04" + b"junk" * 20, "junk.xlsx: not a readable XLSX workbook (BadZipFile: File is not a zip file)"),
]


@pytest.mark.parametrize("name,data,expected", TEXT_CASES, ids=[c[0] for c in TEXT_CASES])
def test_bad_file_gives_one_exact_message(tmp_path, monkeypatch, name, data, expected):
    monkeypatch.chdir(tmp_path)
    (tmp_path / name).write_bytes(data)
    with pytest.raises(InputError) as info:
        read_path(name)
    assert str(info.value) == expected
    assert "\n" not in str(info.value)


def test_explicit_pick_of_a_missing_column(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "a.csv").write_text("time,vdd,vref\n" + GOOD_ROWS)
    with pytest.raises(InputError) as info:
        read_path("a.csv", IngestOptions(supply="CH9"))
    assert str(info.value) == "a.csv:1: --supply 'CH9': no such column (columns: time, vdd, vref)"
    with pytest.raises(InputError) as info:
        read_path("a.csv", IngestOptions(supply="vdd", output="vdd"))
    assert str(info.value) == "a.csv:1: column 'vdd' is picked both as supply and as output"


def test_corrupt_and_truncated_gzip(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    whole = gzip.compress(("time,vdd,vref\n" + GOOD_ROWS * 200).encode(), mtime=0)
    (tmp_path / "cut.csv.gz").write_bytes(whole[: len(whole) // 2])
    (tmp_path / "junk.csv.gz").write_bytes(b"\x1f\x8b\x08\x00" + b"junk" * 8)
    with pytest.raises(InputError) as info:
        read_path("cut.csv.gz")
    assert str(info.value) == "cut.csv.gz: corrupt gzip data: Compressed file ended before the end-of-stream marker was reached"
    with pytest.raises(InputError) as info:
        read_path("junk.csv.gz")
    assert str(info.value).startswith("junk.csv.gz: corrupt gzip data: ")


def test_missing_file_and_folder(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "folder").mkdir()
    with pytest.raises(InputError) as info:
        read_path("nothere.csv")
    assert str(info.value) == "nothere.csv: cannot read: No such file or directory"
    with pytest.raises(InputError) as info:
        read_path("folder")
    assert str(info.value) == "folder: is a folder, not a file"


TABLE = [("time [s]", "vdd [V]", "vref [V]"), (0.0, 0.0, 0.0), (1e-6, 0.9, 0.1), (2e-6, 1.8, 1.2)]

XLSX_CASES = [
    ("text_cell", {"run": [*TABLE[:2], (1e-6, "abc", 0.1), TABLE[3]]}, "book.xlsx [run!B3]: 'abc' is not a number"),
    ("date_cell", {"run": [*TABLE[:2], (1e-6, __import__("datetime").datetime(2026, 1, 1), 0.1), TABLE[3]]},
     "book.xlsx [run!B3]: '2026-01-01T00:00:00' is not a number"),
    ("backwards", {"run": [TABLE[0], TABLE[2], TABLE[1], TABLE[3]]},
     "book.xlsx [run!A3]: time does not increase (0 s after 1e-06 s)"),
    ("no_table", {"notes": [("measured by", "bench 3"), ("remark", "nothing here")]},
     "book.xlsx: no sheet holds a capture table (a header row above columns of numbers)"),
    ("unknown_sheet", {"conditions": [("sheet", "part"), ("nope", "p01")], "run": TABLE},
     "book.xlsx [conditions!A2]: names sheet 'nope', which is not in the workbook"),
    ("bad_condition", {"conditions": [("temperature_c", "hot")], "run": TABLE},
     "book.xlsx [conditions!B1]: temperature_c = 'hot' is not a valid float"),
    ("bad_header_cell", {"run": [("ramp", "slow"), (), *TABLE]}, "book.xlsx [run!B1]: ramp_s = 'slow' is not a valid float"),
    ("roles", {"run": [("t", "node3", "node7"), *TABLE[1:]]},
     "book.xlsx [run!A1]: no supply column recognised (columns: t, node3, node7); name it with --supply NAME"),
]


@pytest.mark.parametrize("case,sheets,expected", XLSX_CASES, ids=[c[0] for c in XLSX_CASES])
def test_bad_workbook_gives_one_exact_message(tmp_path, monkeypatch, case, sheets, expected):
    monkeypatch.chdir(tmp_path)
    write_workbook(tmp_path / "book.xlsx", sheets)
    with pytest.raises(InputError) as info:
        read_path("book.xlsx")
    assert str(info.value) == expected


def test_name_pattern_problems(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    for name in ("run7.csv", "ZR24A_hot.csv"):
        (tmp_path / name).write_text("time,vdd,vref\n" + GOOD_ROWS)
    with pytest.raises(InputError) as info:
        read_path("run7.csv", IngestOptions(name_pattern="{lot}_{temp_c}.csv"))
    assert str(info.value) == "run7.csv: file name does not match --name-pattern '{lot}_{temp_c}.csv'"
    with pytest.raises(InputError) as info:
        read_path("ZR24A_hot.csv", IngestOptions(name_pattern="{lot}_{temp_c}.csv"))
    assert str(info.value) == "ZR24A_hot.csv [--name-pattern {temp_c}]: temperature_c = 'hot' is not a valid float"
    for pattern, message in [("x{ramp time}", "field {ramp time} is not a plain name"),
                             ("{lot}_{lot}", "field {lot} appears twice"), ("plain.csv", "no {field} in it")]:
        with pytest.raises(UsageError) as info:
            compile_name_pattern(pattern)
        assert str(info.value) == f"--name-pattern {pattern!r}: {message}"


MANIFEST_CASES = [
    ("no_file_column", "lot,part\nZR24A,p01\n", "m.csv:1: no file column (one named file, path or filename); columns: lot, part"),
    ("listed_twice", "file,lot\na.csv,ZR24A\nb.csv,ZR24A\na.csv,ZR24B\n", "m.csv:4: 'a.csv' is listed twice (first on line 2)"),
    ("bad_ramp", "file,ramp\na.csv,slow\n", "m.csv:2 [ramp]: ramp_s = 'slow' is not a valid float"),
    ("bad_die", "file;die_x\na.csv;3,5\n", "m.csv:2 [die_x]: die_x = '3,5' is not a valid int"),
    ("empty_name", "file,lot\n,ZR24A\n", "m.csv:2 [file]: empty file name"),
    ("empty", "\n\n", "m.csv: empty manifest"),
]


@pytest.mark.parametrize("case,text,expected", MANIFEST_CASES, ids=[c[0] for c in MANIFEST_CASES])
def test_bad_manifest_gives_one_exact_message(tmp_path, monkeypatch, case, text, expected):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "m.csv").write_text(text)
    with pytest.raises(InputError) as info:
        load_manifest("m.csv")
    assert str(info.value) == expected


def test_missing_manifest(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    with pytest.raises(InputError) as info:
        load_manifest("nope.csv")
    assert str(info.value) == "nope.csv: cannot read manifest: No such file or directory"
