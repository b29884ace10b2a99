"""Limits: TOML file, flags override it, stable key, SI suffixes for seconds and volts."""

import pytest

from labtool.errors import InputError, UsageError
from labtool.measure import Limits


def test_defaults_are_those_of_the_issue():
    lim = Limits()
    assert (lim.supply_ref, lim.band_pct) == ("90%", 1.0)  # issue #3 defaults
    assert lim.supply_ref_level() == ("fraction", 0.9)


def test_toml_file_then_flags_override(tmp_path):
    f = tmp_path / "zr4410.toml"
    f.write_text('supply_ref = "1.62"\nexpect_v = 1.2\nmax_delay_s = "500us"\nlevel_tol_pct = "3%"\n')
    lim = Limits.from_toml(f)
    assert lim.supply_ref_level() == ("volts", 1.62)
    assert (lim.expect_v, lim.max_delay_s, lim.level_tol_pct) == (1.2, pytest.approx(500e-6), 3.0)
    over = lim.merged(max_delay_s="250e-6", expect_v=None, band_pct="2")
    assert (over.max_delay_s, over.expect_v, over.band_pct) == (pytest.approx(250e-6), 1.2, 2.0)


def test_key_is_stable_and_depends_on_every_limit():
    assert Limits().key() == Limits().key() == Limits.merged(Limits(), band_pct=1).key()
    assert len(Limits().key()) == 12
    keys = {Limits().key(), Limits(band_pct=2).key(), Limits(expect_v=1.2).key(), Limits(supply_ref="80%").key()}
    assert len(keys) == 4


def test_bad_limits_files_name_the_file_and_field(tmp_path):
    f = tmp_path / "bad.toml"
    f.write_text("max_delay = 3\n")
    with pytest.raises(InputError, match=r"bad.toml \[max_delay\]: unknown limit"):
        Limits.from_toml(f)
    f.write_text('max_delay_s = "3 furlongs"\n')
    with pytest.raises(InputError, match=r"bad.toml \[max_delay_s\]: max_delay_s: unknown unit"):
        Limits.from_toml(f)
    f.write_text("expect_v = \n")
    with pytest.raises(InputError, match=r"bad.toml: not valid TOML.*line 1"):
        Limits.from_toml(f)
    with pytest.raises(UsageError, match="band_pct: must be a positive number"):
        Limits(band_pct=0)
    with pytest.raises(UsageError, match="supply_ref"):
        Limits(supply_ref="150%")
