"""SCPI reply forms (SCPI-1999 Vol. 1 §7.2.1, Vol. 2 SYSTem:ERRor?) and IEEE 488.2 common replies.

The reply values are the standards' (../shared/GUIDE.md §3, read in a stored text); the clause
numbers beside them are from memory.
"""

import math

import pytest

from instruments.scpi import (decode_esr, errors_to_exception, parse_bool, parse_error, parse_idn,
                              parse_int, parse_item, parse_number, parse_numbers, split_reply)
from labtool.errors import InstrumentError


def test_scpi_special_values():
    # SCPI-1999 Vol. 1 §7.2.1: 9.91E37 is not-a-number, +/-9.9E37 is +/-infinity.
    assert math.isnan(parse_number("9.91E+37"))
    assert parse_number("9.9E37") == math.inf
    assert parse_number("-9.90000E+37") == -math.inf
    assert parse_number("+1.20000E+00") == 1.2
    assert parse_number(" -5 \n") == -5.0  # NR1 with sign (IEEE 488.2 §8.7.2)
    assert parse_numbers("1,2.5,9.91E37")[:2] == [1.0, 2.5]


def test_not_a_number_reply_is_a_clear_error():
    with pytest.raises(InstrumentError, match="expected a number, got 'VOLT'"):
        parse_number("VOLT")
    with pytest.raises(InstrumentError, match="expected 0 or 1"):
        parse_bool("2")
    with pytest.raises(InstrumentError, match="whole number"):
        parse_int("1.5")


@pytest.mark.parametrize("reply, code, text", [
    ('0,"No error"', 0, "No error"),             # SCPI-1999 Vol. 2 SYSTem:ERRor?
    ('+0,"No error"', 0, "No error"),            # same with the NR1 sign many instruments send
    ('-113,"Undefined header;FOO:BAR"', -113, "Undefined header;FOO:BAR"),
    ('-222,"Data out of range"\n', -222, "Data out of range"),
    ('-350,"Queue overflow"', -350, "Queue overflow"),
    ('+201,"Say ""hi"""', 201, 'Say "hi"'),      # doubled quotes, IEEE 488.2 §8.7.8
])
def test_error_queue_entries(reply, code, text):
    e = parse_error(reply)
    assert (e.code, e.text) == (code, text)
    assert e.is_error == (code != 0)


def test_error_reply_garbage():
    with pytest.raises(InstrumentError, match="not of the form"):
        parse_error("No error")


def test_multi_entry_queue_attached_to_command():
    entries = [parse_error(s) for s in ('-222,"Data out of range"', '-350,"Queue overflow"', '0,"No error"')]
    err = errors_to_exception(entries, ":SOUR:VOLT 99")
    assert err.code == -222 and err.command == ":SOUR:VOLT 99"
    assert "then -350" in str(err) and "overflowed" in str(err)
    assert errors_to_exception([parse_error('+0,"No error"')], "x") is None


def test_idn_four_fields():
    # IEEE 488.2 §10.14: manufacturer, model, serial, firmware.
    idn = parse_idn("LABTOOL-SIM,SCOPE-2CH,SN0001,0.1\n")
    assert idn.model == "SCOPE-2CH" and idn.firmware == "0.1"
    with pytest.raises(InstrumentError, match="requires 4"):
        parse_idn("ACME,X")


def test_esr_bits():
    # IEEE 488.2 §11.5.1: bit 0 OPC, 2 query error, 3 device error, 4 execution error, 5 command error, 7 PON.
    assert decode_esr(1) == {"operation_complete"}
    assert decode_esr(0b10110100) == {"query_error", "execution_error", "command_error", "power_on"}
    with pytest.raises(InstrumentError):
        decode_esr(256)


def test_reply_data_split_at_commas_and_compound_semicolons():
    # IEEE 488.2 §8.4.1 (from memory): "," separates data elements, ";" the answers of a compound
    # query; a quoted string (§8.7.8) may hold either.
    assert split_reply("CH1,V,1e-6;2000\n") == ["CH1", "V", "1e-6", "2000"]
    assert split_reply('"a,b;c",4') == ['"a,b;c"', "4"]
    assert split_reply("") == []
    assert [parse_item(x) for x in split_reply('CH1,"x",+2.5E-03,9.91E37')][:3] == ["CH1", "x", 2.5e-3]
