"""Data-logger exports: time stamps as dates and clock times, scan numbers, channel headers with units.

The time base is relative, in seconds from the first sample; the first stamp is kept in the
provenance. Invented fixtures (stating a property: what a logger writes, the importer reads back):
a supply ramp and a reference output scanned every 125 ms (exact in binary, so the intervals are
compared exactly), values with 4 decimals printed with repr().
"""

import datetime as dt

import numpy as np
import pytest

from labtool.errors import InputError
from labtool.ingest import read_path
from tests.ingest.exports import write
from tests.ingest.writers import write_workbook

N, SCAN_S = 64, 0.125
START = dt.datetime(2026, 11, 2, 13, 1, 2, 125000)


def logger_values():
    """Invented: the supply ramps from 1 s to 3 s, the reference follows from 2 s."""
    t = SCAN_S * np.arange(N)
    supply = np.round(np.clip((t - 1.0) / 2.0, 0, 1) * 3.3, 4)
    output = np.round(np.where(t > 2.0, 1.2 * (1 - np.exp(-(t - 2.0) / 0.5)), 0.0), 4)
    return t, supply, output


def stamps(form: str) -> list[str]:
    moments = [START + dt.timedelta(seconds=SCAN_S * k) for k in range(N)]
    ms = [f"{m.microsecond // 1000:03d}" for m in moments]
    if form == "iso-space":
        return [f"{m:%Y-%m-%d %H:%M:%S}.{f}" for m, f in zip(moments, ms)]
    if form == "iso-T":
        return [f"{m:%Y-%m-%dT%H:%M:%S}.{f}Z" for m, f in zip(moments, ms)]
    if form == "month-first":
        return [f"{m:%m/%d/%Y %H:%M:%S}.{f}" for m, f in zip(moments, ms)]
    if form == "12-hour":
        return [f"{m:%m/%d/%Y %I:%M:%S}.{f} {m:%p}" for m, f in zip(moments, ms)]
    if form == "elapsed":
        return [f"{int(s // 3600):02d}:{int(s % 3600 // 60):02d}:{s % 60:06.3f}" for s in SCAN_S * np.arange(N)]
    raise ValueError(form)


def assert_logger_capture(cap, supply, output):
    assert cap.time.uniform and cap.time.n == N
    assert cap.time.t0_s == 0.0 and cap.time.dt_s == SCAN_S
    np.testing.assert_array_equal(cap.channel("supply").values, supply)
    np.testing.assert_array_equal(cap.channel("output").values, output)


@pytest.mark.parametrize("form", ["iso-space", "iso-T", "month-first", "12-hour", "elapsed"])
def test_a_time_stamp_column_becomes_seconds_from_the_first_sample(tmp_path, form):
    _, s, o = logger_values()
    written = stamps(form)
    body = "".join(f"{k + 1},{written[k]},{s[k].item()!r},{o[k].item()!r}\n" for k in range(N))
    text = "Logger,bench logger 3\nScan,Time,101 (VDC),102 (VDC)\n" + body
    (cap,) = read_path(write(tmp_path, "log.csv", text))
    assert_logger_capture(cap, s, o)
    assert [(c.name, c.unit, c.role_source) for c in cap.channels] == [("101", "V", "shape"), ("102", "V", "shape")]
    meta = cap.provenance.metadata
    assert meta["time_origin"] == written[0]
    if form != "elapsed":
        assert meta["start_datetime"] == "2026-11-02T13:01:02.125000"


def test_a_date_column_and_a_time_column_are_one_stamp(tmp_path):
    _, s, o = logger_values()
    moments = [START + dt.timedelta(seconds=SCAN_S * k) for k in range(N)]
    body = "".join(f"{m:%d.%m.%Y}\t{m:%H:%M:%S},{m.microsecond // 1000:03d}\t{str(s[k].item()).replace('.', ',')}\t"
                   f"{str(o[k].item()).replace('.', ',')}\n" for k, m in enumerate(moments))
    (cap,) = read_path(write(tmp_path, "log.txt", "Date\tTime\tCh 1 [V]\tCh 2 [V]\n" + body))
    assert_logger_capture(cap, s, o)
    assert [c.name for c in cap.channels] == ["Ch 1", "Ch 2"]
    assert cap.provenance.metadata["start_datetime"] == "2026-11-02T13:01:02.125000"  # dotted: day first
    assert "date_order" in cap.provenance.metadata  # 02.11: no day above 12, so the order was assumed


def test_a_day_above_twelve_decides_the_date_order(tmp_path):
    _, s, o = logger_values()
    moments = [dt.datetime(2026, 11, 13, 23, 59, 58) + dt.timedelta(seconds=SCAN_S * k) for k in range(N)]
    body = "".join(f"{m:%d/%m/%Y %H:%M:%S}.{m.microsecond // 1000:03d},{s[k].item()!r},{o[k].item()!r}\n"
                   for k, m in enumerate(moments))  # crosses midnight into 14 November
    (cap,) = read_path(write(tmp_path, "log.csv", "Date/Time,VDD,VREF\n" + body))
    assert_logger_capture(cap, s, o)
    assert cap.provenance.metadata["start_datetime"] == "2026-11-13T23:59:58"
    assert "date_order" not in cap.provenance.metadata


def test_clock_times_of_day_past_midnight_go_on(tmp_path):
    _, s, o = logger_values()
    clock = [(dt.datetime(2026, 1, 1, 23, 59, 59) + dt.timedelta(seconds=SCAN_S * k)).strftime("%H:%M:%S.%f")[:-3]
             for k in range(N)]
    body = "".join(f"{clock[k]},{s[k].item()!r},{o[k].item()!r}\n" for k in range(N))
    (cap,) = read_path(write(tmp_path, "clock.csv", "Time,VDD,VREF\n" + body))
    assert_logger_capture(cap, s, o)


def test_a_stamp_that_is_no_date_is_named(tmp_path):
    rows = ["2026-11-02 13:01:02.000,0,0", "2026-11-31 13:01:02.125,0.5,0", "2026-11-02 13:01:02.250,1,0.5"]
    with pytest.raises(InputError) as info:
        read_path(write(tmp_path, "bad.csv", "Time,VDD,VREF\n" + "\n".join(rows) + "\n"))
    assert str(info.value).endswith("bad.csv:3 [Time]: '2026-11-31 13:01:02.125' is not a date and time "
                                    "(as in 2026-11-02 13:01:02.125) nor a time (13:01:02.125)")


def test_stamps_going_back_are_refused_with_their_line(tmp_path):
    rows = ["13:01:02.000,0,0", "13:01:02.125,0.5,0", "13:01:01.000,1,0.5", "13:01:02.375,1,1"]
    with pytest.raises(InputError) as info:
        read_path(write(tmp_path, "back.csv", "Time,VDD,VREF\n" + "\n".join(rows) + "\n"))
    assert str(info.value).endswith("back.csv:4 [Time]: time does not increase (-1 s after 0.125 s)")


@pytest.mark.parametrize("kind", ["datetime", "time", "text"])
def test_a_workbook_with_date_and_time_cells(tmp_path, kind):
    _, s, o = logger_values()
    moments = [START + dt.timedelta(seconds=SCAN_S * k) for k in range(N)]
    cell = {"datetime": lambda m: m, "time": lambda m: m.time(), "text": lambda m: f"{m:%Y-%m-%d %H:%M:%S.%f}"}[kind]
    path = write_workbook(tmp_path / "log.xlsx", {"scan": [("Scan", "Time", "VDD", "VREF")] + [
        (k + 1, cell(m), s[k].item(), o[k].item()) for k, m in enumerate(moments)]})
    (cap,) = read_path(path)
    assert_logger_capture(cap, s, o)
    if kind != "time":
        assert cap.provenance.metadata["start_datetime"] == "2026-11-02T13:01:02.125000"


def test_alarm_and_note_columns_of_text_are_left_out_with_a_warning(tmp_path):
    _, s, o = logger_values()
    written = stamps("iso-space")
    body = "".join(f"{k + 1},{written[k]},{s[k].item()!r},{'HI' if s[k] > 3 else 'OK'},{o[k].item()!r},OK,run {k}\n"
                   for k in range(N))
    (cap,) = read_path(write(tmp_path, "alarms.csv", "Scan,Time,101 (VDC),Alarm 101,102 (VDC),Alarm 102,Note\n" + body))
    assert_logger_capture(cap, s, o)
    assert [c.name for c in cap.channels] == ["101", "102"]
    assert cap.provenance.warnings == ["columns 'Alarm 101', 'Alarm 102', 'Note' hold text, not samples: not read"]
