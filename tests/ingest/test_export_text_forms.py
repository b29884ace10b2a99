"""How bench exports write their text: quoting, delimiters, encodings, number forms, footers, units
given only in the preamble. Each imports with no flags to the exact time base and values, or is
refused with one line naming the file, the line or field and what is wrong.

Invented fixtures (stating a property: what a layout holds, the importer reads back); values printed
with repr() or with the decimals the written floats already have, so they are read back bit for bit.
"""

import numpy as np
import pytest

from labtool.errors import InputError
from labtool.ingest import read_path
from tests.ingest.exports import DT, N, T0, assert_time_base, assert_values, startup, write


def cells(*columns, fmt=repr, delimiter=",", quote=False):
    """Lines of the columns' values, each cell ``fmt(value)``, quoted when asked."""
    q = '"' if quote else ""
    return "".join(delimiter.join(f"{q}{fmt(float(c[k]))}{q}" for c in columns) + "\n" for k in range(len(columns[0])))


def write_bytes(tmp_path, name: str, data: bytes) -> str:
    path = tmp_path / name
    path.write_bytes(data)
    return str(path)


# -- quoting --------------------------------------------------------------------------------------
@pytest.mark.parametrize("delimiter", [",", ", ", ";", "; "])
def test_quoted_headers_and_quoted_numbers(tmp_path, delimiter):
    t, s, o = startup()
    header = delimiter.join(f'"{h}"' for h in ("Time", "CH1", "CH2"))
    (cap,) = read_path(write(tmp_path, "q.csv", header + "\n" + cells(t, s, o, delimiter=delimiter, quote=True)))
    assert_time_base(cap)
    assert_values(cap, s, o)
    assert [c.name for c in cap.channels] == ["CH1", "CH2"]


def test_blanks_after_the_delimiter_without_quotes(tmp_path):
    t, s, o = startup()
    (cap,) = read_path(write(tmp_path, "sp.csv", "Time, CH1, CH2\n" + cells(t, s, o, delimiter=", ")))
    assert_time_base(cap)
    assert_values(cap, s, o)


def test_a_quoted_header_cell_may_hold_the_delimiter(tmp_path):
    t, s, o = startup()
    text = '"Time, s","VDD, supply (V)","VREF, output (V)"\n' + cells(t, s, o, quote=True)
    (cap,) = read_path(write(tmp_path, "qd.csv", text))
    assert_time_base(cap)
    assert_values(cap, s, o)
    assert [(c.name, c.role_source) for c in cap.channels] == [("VDD, supply", "name"), ("VREF, output", "name")]


def test_a_quoted_cell_that_is_no_number_is_named(tmp_path):
    text = '"Time", "CH1", "CH2"\n"0", "0.1", "0.2"\n"1e-6", "0.1", "abc"\n"2e-6", "0.1", "0.2"\n'
    with pytest.raises(InputError) as info:
        read_path(write(tmp_path, "bad.csv", text))
    assert str(info.value).endswith("bad.csv:3 [CH2]: 'abc' is not a number")


# -- delimiters -----------------------------------------------------------------------------------
def test_tab_separated_with_a_units_row(tmp_path):
    t, s, o = startup()
    (cap,) = read_path(write(tmp_path, "tab.txt", "Time\tCH1\tCH2\ns\tV\tV\n" + cells(t, s, o, delimiter="\t")))
    assert_time_base(cap)
    assert_values(cap, s, o)
    assert [c.unit for c in cap.channels] == ["V", "V"]


def test_whitespace_aligned_columns_with_a_units_row(tmp_path):
    t, s, o = startup()
    lines = ["{:>14}{:>12}{:>12}".format("Time", "CH1", "CH2"), "{:>14}{:>12}{:>12}".format("(us)", "(mV)", "(mV)")]
    # written in µs and mV with the decimals the values have (SI factors: BIPM SI Brochure 9th ed., table 7)
    lines += [f"  {t[k] * 1e6:12.1f}{s[k] * 1e3:12.1f}{o[k] * 1e3:12.1f}" for k in range(N)]
    (cap,) = read_path(write(tmp_path, "aligned.txt", "\n".join(lines) + "\n"))
    assert_time_base(cap)
    np.testing.assert_allclose(cap.channel("supply").values, s, rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(cap.channel("output").values, o, rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("delimiter", [";", "\t"])
def test_a_decimal_comma(tmp_path, delimiter):
    # no thousands separator: 1234,5 is one thousand two hundred and thirty-four and a half
    t, s, o = startup()
    big = np.full(N, 1234.5)
    body = cells(t, s, o, big, fmt=lambda v: repr(v).replace(".", ","), delimiter=delimiter)
    header = delimiter.join(["Time [s]", "VDD [V]", "VREF [V]", "Count"])
    (cap,) = read_path(write(tmp_path, "comma.csv", header + "\n" + body))
    assert_time_base(cap)
    assert_values(cap, s, o)
    np.testing.assert_array_equal([c.values for c in cap.channels if c.name == "Count"][0], big)
    assert "decimal comma" in cap.provenance.metadata["layout"]


# -- encodings ------------------------------------------------------------------------------------
ENCODINGS = {
    "utf-16-le-bom": lambda text: b"\xff\xfe" + text.encode("utf-16-le"),
    "utf-16-be-bom": lambda text: b"\xfe\xff" + text.encode("utf-16-be"),
    "utf-16-le-no-bom": lambda text: text.encode("utf-16-le"),
    "latin-1": lambda text: text.encode("latin-1"),
    "utf-8-bom": lambda text: b"\xef\xbb\xbf" + text.encode("utf-8"),
}


@pytest.mark.parametrize("encoding", sorted(ENCODINGS))
def test_encodings_with_micro_and_degree_signs(tmp_path, encoding):
    t, s, o = startup()
    temp = np.full(N, -40.0)
    text = "Time (µs),VDD (V),VREF (V),Chamber (°C)\r\n" + cells(t * 1e6, s, o, temp, fmt=lambda v: f"{v:.4f}")
    (cap,) = read_path(write_bytes(tmp_path, "enc.csv", ENCODINGS[encoding](text)))
    assert_time_base(cap)
    assert_values(cap, s, o)
    assert {c.name: c.unit for c in cap.channels}["Chamber"] == "°C"


def test_odd_length_utf16_is_refused_in_one_line(tmp_path):
    data = b"\xff\xfe" + "time,vdd,vref\n0,0,0\n".encode("utf-16-le") + b"\x00"
    with pytest.raises(InputError) as info:
        read_path(write_bytes(tmp_path, "half.csv", data))
    assert str(info.value).endswith("half.csv: invalid UTF-16 text at byte 42")  # the mark counts


# -- number forms ---------------------------------------------------------------------------------
def test_capital_e_plus_signs_inf_nan_and_blank_cells(tmp_path):
    t, s, o = startup()
    written = [f"{v:+.4E}" for v in s]  # "+1.8000E+00"
    missing = {5: "inf", 6: "-inf", 7: "nan", 8: "", 9: "NaN", 10: "1.#INF", 11: "OL", 12: "#N/A", 13: "Infinity"}
    # positive outputs with a leading "+", negative ones without the zero ("-.0023")
    out = [missing.get(k, f"+{o[k].item()!r}" if o[k] > 0 else repr(o[k].item()).replace("-0.", "-."))
           for k in range(N)]
    assert any(v.startswith("-.") for v in out)
    body = "".join(f"{t[k]:.4E},{written[k]},{out[k]}\n" for k in range(N))
    (cap,) = read_path(write(tmp_path, "forms.csv", "Time,VDD,VREF\n" + body))
    assert_time_base(cap)
    np.testing.assert_array_equal(cap.channel("supply").values, s)
    vref = cap.channel("output")
    assert np.flatnonzero(vref.clipped).tolist() == sorted(missing)  # flagged like SCPI 9.91E37 values
    assert np.isnan(vref.values[sorted(missing)]).all()
    keep = np.setdiff1d(np.arange(N), sorted(missing))
    np.testing.assert_array_equal(vref.values[keep], o[keep])


# -- footers --------------------------------------------------------------------------------------
def test_a_footer_after_the_data_ends_the_table(tmp_path):
    t, s, o = startup()
    footer = "\nEnd of data\nMax,1.8068,1.2036\nMin,-0.0052,-0.0049\nMean,0.9031,0.3315\n"
    (cap,) = read_path(write(tmp_path, "foot.csv", "Time,VDD,VREF\n" + cells(t, s, o) + footer))
    assert_time_base(cap)
    assert_values(cap, s, o)
    assert cap.provenance.warnings == [f"4 lines after the data (from line {N + 3}: 'End of data') read as a "
                                       f"footer, not as samples"]
    assert cap.provenance.metadata["footer"].startswith("End of data | Max,1.8068,1.2036")


def test_a_footer_with_another_delimiter_layout(tmp_path):
    t, s, o = startup()
    body = cells(t, s, o, fmt=lambda v: repr(v).replace(".", ","), delimiter=";")
    (cap,) = read_path(write(tmp_path, "foot2.csv", "Time;VDD;VREF\n" + body + "Samples;120\r\n"))
    assert_time_base(cap)
    assert_values(cap, s, o)
    assert cap.provenance.warnings[0].startswith(f"1 line after the data (from line {N + 2}: 'Samples;120')")


def test_text_between_data_rows_is_no_footer(tmp_path):
    t, s, o = startup()
    lines = cells(t, s, o).splitlines()
    lines.insert(100, "Max,1.8,1.2")
    with pytest.raises(InputError) as info:
        read_path(write(tmp_path, "mid.csv", "Time,VDD,VREF\n" + "\n".join(lines) + "\n"))
    assert str(info.value).endswith("mid.csv:102 [Time]: 'Max' is not a number")


def test_a_last_line_that_starts_with_a_value_is_a_bad_row_not_a_footer(tmp_path):
    t, s, o = startup()
    with pytest.raises(InputError) as info:
        read_path(write(tmp_path, "end.csv", "Time,VDD,VREF\n" + cells(t, s, o) + "2.4e-05,1.8,abc\n"))
    assert str(info.value).endswith(f"end.csv:{N + 2} [VREF]: 'abc' is not a number")


# -- units in the preamble only -------------------------------------------------------------------
@pytest.mark.parametrize("line,scale", [("Horizontal Units,ms", 1e3), ("HUnit,us", 1e6), ("# Horizontal Units: s", 1.0)])
def test_the_time_columns_unit_given_only_in_the_preamble(tmp_path, line, scale):
    t, s, o = startup()
    # times written in the preamble's unit, 6 significant decimals (SI factors: BIPM SI Brochure 9th ed., table 7)
    body = "".join(f"{t[k] * scale:.6g},{s[k].item()!r},{o[k].item()!r}\n" for k in range(N))
    (cap,) = read_path(write(tmp_path, "hunit.csv", f"{line}\nVertical Units,V\nTime,CH1,CH2\n" + body))
    assert_time_base(cap)
    assert_values(cap, s, o)
    assert [c.unit for c in cap.channels] == ["V", "V"]


def test_a_bare_sample_interval_is_in_the_horizontal_unit(tmp_path):
    _, s, o = startup()
    (cap,) = read_path(write(tmp_path, "hint.csv", "HUnit,ns\nSample Interval,200\nHOffset,-10000\nCH1,CH2\n"
                             + cells(s, o)))
    assert cap.time.dt_s == pytest.approx(DT, rel=1e-15) and cap.time.t0_s == pytest.approx(T0, rel=1e-15)
    assert cap.time.n == N


def test_empty_spreadsheet_rows_after_the_data_are_cut_without_a_word(tmp_path):
    t, s, o = startup()
    (cap,) = read_path(write(tmp_path, "rows.csv", "Time,VDD,VREF\n" + cells(t, s, o) + ",,\n,,\n ,, \n"))
    assert_time_base(cap)
    assert_values(cap, s, o)
    assert cap.provenance.warnings == []


def test_empty_rows_between_the_data_and_a_footer(tmp_path):
    t, s, o = startup()
    (cap,) = read_path(write(tmp_path, "rows.csv", "Time,VDD,VREF\n" + cells(t, s, o) + ",,\n,,\nEnd of data,,\n"))
    assert_values(cap, s, o)
    assert cap.provenance.warnings[0].startswith(f"1 line after the data (from line {N + 4}: 'End of data,,')")


@pytest.mark.parametrize("padding", [b"\x1a", b"\x00" * 300])
def test_end_of_file_padding_is_no_content(tmp_path, padding):
    t, s, o = startup()
    data = ("Time,VDD,VREF\r\n" + cells(t, s, o).replace("\n", "\r\n")).encode() + padding
    (cap,) = read_path(write_bytes(tmp_path, "pad.csv", data))
    assert_values(cap, s, o)
    assert cap.provenance.warnings == []


def test_quoted_decimal_commas_in_a_comma_delimited_file(tmp_path):
    t, s, o = startup()
    body = cells(t, s, o, fmt=lambda v: repr(v).replace(".", ","), quote=True)
    (cap,) = read_path(write(tmp_path, "qc.csv", '"Time","CH1","CH2"\n' + body))
    assert_time_base(cap)
    assert_values(cap, s, o)
    assert "comma-delimited, decimal comma" in cap.provenance.metadata["layout"]


def test_a_spreadsheet_separator_line_first(tmp_path):
    t, s, o = startup()
    (cap,) = read_path(write(tmp_path, "sep.csv", "sep=;\nTime;VDD;VREF\n" + cells(t, s, o, delimiter=";")))
    assert_time_base(cap)
    assert_values(cap, s, o)


@pytest.mark.parametrize("first", ["", "Unnamed: 0"])
def test_row_numbers_a_data_frame_writes_first_are_no_channel(tmp_path, first):
    # An unnamed first column of 0, 1, 2 … (a data-frame library's row index) beside a time column:
    # left out, so it can never be taken for the supply by its shape.
    t, s, o = startup()
    body = "".join(f"{k},{t[k].item()!r},{s[k].item()!r},{o[k].item()!r}\n" for k in range(N))
    (cap,) = read_path(write(tmp_path, "frame.csv", f"{first},Time,CH1,CH2\n" + body))
    assert_time_base(cap)
    assert_values(cap, s, o)
    assert [c.name for c in cap.channels] == ["CH1", "CH2"]


def test_a_units_row_without_names(tmp_path):
    t, s, o = startup()
    (cap,) = read_path(write(tmp_path, "units.csv", "Second,Volt,Volt\n" + cells(t * 1.0, s, o)))
    assert_time_base(cap)
    assert_values(cap, s, o)
    assert [c.unit for c in cap.channels] == ["V", "V"]
    assert "Second" not in cap.provenance.metadata


def test_a_record_length_printed_like_a_float_is_a_length_claim(tmp_path):
    t, s, o = startup()
    (cap,) = read_path(write(tmp_path, "rl.csv", "Record Length,2.000000e+03\nTime,CH1,CH2\n" + cells(t, s, o)))
    assert cap.provenance.metadata["truncated"] == f"{N} of 2000 samples"
