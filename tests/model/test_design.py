"""The design file: schema, overrides, errors that name the file and the field."""

import pickle

import pytest

from labtool.errors import ModelError
from labtool.model import PARAMS, Design, load_design
from labtool.model.design import parse_assignments

from .conftest import DEMO


def _write(tmp_path, text):
    path = tmp_path / "d.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_demo_design_loads_every_section(demo):
    assert demo.name == "ZR-4410" and demo.area_ratio == 8.0 and demo.vdd_v == 1.8
    assert demo.source == str(DEMO)
    text = DEMO.read_text()
    assert all(f"{p.name} =" in text for p in PARAMS if p.section != "variation")  # the demo shows the schema


def test_overrides_and_resolved(demo):
    d = load_design(DEMO, {"i_start_a": "2e-6", "startup_kind": "pulldown"})
    assert d.i_start_a == 2e-6 and d.startup_kind == "pulldown"
    r = d.resolved(125.0)
    assert r["temperature_c"] == 125.0 and r["i_start_a"] == 2e-6
    assert r["is_a"] > 1e4 * demo.is_a  # IS rises steeply with temperature (SPICE law)
    assert demo.resolved(demo.tnom_c)["is_a"] == pytest.approx(demo.is_a, rel=1e-15)
    assert {p.name for p in PARAMS} <= set(r)
    assert pickle.loads(pickle.dumps(d)) == d  # designs travel to worker processes


@pytest.mark.parametrize("text, message", [
    ("[core]\nr1_ohm = -5\n", "d.toml: [core]: r1_ohm = -5: must be > 0"),
    ("[core]\nr1_ohms = 5\n", "d.toml: [core]: unknown parameter 'r1_ohms' (did you mean r1_ohm"),
    ("[core]\ni_start_a = 1e-6\n", "d.toml: [core] i_start_a: belongs in section [startup]"),
    ("[cores]\nr1_ohm = 5\n", "d.toml: unknown section [cores]"),
    ("[startup]\nstartup_kind = \"magic\"\n", "startup_kind = 'magic': expected one of inject, pulldown"),
    ("[core]\nr1_ohm = \"big\"\n", "r1_ohm = 'big': expected a number"),
    ("[core\nr1_ohm = 5\n", "d.toml: not valid TOML"),
])
def test_bad_design_files(tmp_path, text, message):
    with pytest.raises(ModelError) as exc:
        load_design(_write(tmp_path, text))
    assert message in str(exc.value)


def test_bad_overrides():
    with pytest.raises(ModelError, match="override: unknown parameter 'i_strat_a'"):
        load_design(DEMO, {"i_strat_a": "1e-6"})
    with pytest.raises(ModelError, match="expected NAME=VALUE"):
        parse_assignments(["i_start_a"])
    with pytest.raises(ModelError, match="must be ≥ 0"):
        Design().replace(i_start_a=-1e-6)
    with pytest.raises(ModelError, match="no such design file"):
        load_design("missing.toml")
