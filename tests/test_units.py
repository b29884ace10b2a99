"""SI prefixes and unit/quantity parsing against the BIPM SI Brochure."""

import pytest

from labtool.errors import UsageError
from labtool.units import ENGINEERING_PREFIXES, SI_PREFIX_TABLE, SI_PREFIXES, format_si, parse_quantity, parse_unit

# BIPM SI Brochure, 9th ed. (2019), §3, table 7 "SI prefixes": the 20 prefixes, name, symbol, factor.
# The same table is NIST's SI-prefix table (physics.nist.gov/cuu/Units/prefixes.html, read in a
# stored copy); written out here by hand from those tables.
BIPM_TABLE_7 = [
    ("deca", "da", 1), ("hecto", "h", 2), ("kilo", "k", 3), ("mega", "M", 6), ("giga", "G", 9),
    ("tera", "T", 12), ("peta", "P", 15), ("exa", "E", 18), ("zetta", "Z", 21), ("yotta", "Y", 24),
    ("deci", "d", -1), ("centi", "c", -2), ("milli", "m", -3), ("micro", "μ", -6), ("nano", "n", -9),
    ("pico", "p", -12), ("femto", "f", -15), ("atto", "a", -18), ("zepto", "z", -21), ("yocto", "y", -24),
]


def test_prefix_table_is_bipm_table_7():
    ours = {name: (symbol, factor) for name, symbol, factor in SI_PREFIX_TABLE}
    assert len(ours) == 20
    for name, symbol, exponent in BIPM_TABLE_7:
        assert ours[name][0] == symbol
        assert ours[name][1] == pytest.approx(10.0 ** exponent, rel=1e-15)


@pytest.mark.parametrize("name,symbol,exponent", BIPM_TABLE_7)
def test_every_prefix_scales_volts_and_seconds(name, symbol, exponent):
    # BIPM SI Brochure 9th ed. §3: a prefix symbol attached to a unit symbol multiplies it by the factor.
    assert parse_unit(f"{symbol}V") == ("V", pytest.approx(10.0 ** exponent, rel=1e-15))
    assert parse_unit(f"{symbol}s") == ("s", pytest.approx(10.0 ** exponent, rel=1e-15))


def test_micro_sign_and_plain_u_are_micro():
    # The brochure's symbol is the Greek mu (U+03BC); exports also write the micro sign U+00B5 and "u"
    # (common practice, no source).
    assert SI_PREFIXES["μ"] == SI_PREFIXES["µ"] == SI_PREFIXES["u"] == 1e-6
    assert parse_unit("µs") == parse_unit("μs") == parse_unit("us") == ("s", 1e-6)


@pytest.mark.parametrize("text,base,factor", [
    ("s", "s", 1.0), ("ms", "s", 1e-3), ("ns", "s", 1e-9), ("V", "V", 1.0), ("mV", "V", 1e-3),
    ("uV", "V", 1e-6), ("A", "A", 1.0), ("mA", "A", 1e-3), ("µA", "A", 1e-6), ("nA", "A", 1e-9),
    ("Volts", "V", 1.0), ("sec", "s", 1.0), ("msec", "s", 1e-3), ("kHz", "Hz", 1e3),
])
def test_bench_units(text, base, factor):
    assert parse_unit(text) == (base, pytest.approx(factor, rel=1e-15))


def test_unit_symbols_are_case_sensitive():
    # BIPM SI Brochure 9th ed. §3: "M" is mega, "m" milli; so "MV" is megavolts, never millivolts.
    assert parse_unit("MV") == ("V", 1e6)
    with pytest.raises(UsageError, match="unknown unit 'mv'"):
        parse_unit("mv")


def test_quantities_round_once():
    # 10 µs must be the same float wherever it comes from, or conditions would not group.
    assert parse_quantity("10us", "s") == 1e-5
    assert parse_quantity("100 ms", "s") == 0.1
    assert parse_quantity("0.1 ms", "s") == 1e-4
    assert parse_quantity("500u", "s") == 5e-4
    assert parse_quantity("1.8V", "V") == 1.8


def test_a_bare_prefix_after_a_number_is_only_a_power_of_1000():
    assert "c" not in ENGINEERING_PREFIXES and "da" not in ENGINEERING_PREFIXES
    with pytest.raises(UsageError):
        parse_quantity("25c", "s")
    with pytest.raises(UsageError, match="is in V, expected s"):
        parse_quantity("3 mV", "s")


def test_format_si_picks_an_engineering_prefix():
    assert format_si(2.5e-5, "s") == "25 µs"
    assert format_si(0.1, "s") == "100 ms"


@pytest.mark.parametrize("value,digits,text", [
    (999.6e-6, 3, "1 ms"), (999.6e-6, 4, "999.6 µs"), (999.96e-6, 4, "1 ms"), (-999.6e-6, 3, "-1 ms"),
    (999.5e3, 3, "1 MV"), (0.9996, 3, "1 V"), (1e-3, 3, "1 ms"), (-2.317e-4, 3, "-232 µs"), (1.2345e-9, 2, "1.2 ns"),
])
def test_format_si_rounds_before_it_picks_the_prefix(value, digits, text):
    # BIPM SI Brochure, 9th ed., §3 table 7 (prefixes as powers of 1000 here): 999.6 µs shown to three
    # significant digits is 1.00 ms, never "1e+03 µs"; the unit is V for the MV case.
    unit = "V" if text.endswith("V") else "s"
    assert format_si(value, unit, digits) == text
    assert "e+" not in format_si(value, unit, digits)
