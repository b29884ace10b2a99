"""Profile templates: safe arithmetic, format specs, the scaling record, and everything a bad profile
gets wrong refused when it loads (naming file, operation and field). No sockets."""

from __future__ import annotations

import operator

import pytest
from hypothesis import given, settings, strategies as st

from instruments.expression import parse_expression
from instruments.profile import Operation, load_profile
from instruments.template import parse_template
from labtool.errors import InstrumentError, ProfileError

OPS = {"+": operator.add, "-": operator.sub, "*": operator.mul, "/": operator.truediv}


@st.composite
def expressions(draw, depth=0):
    """(text, value) pairs: random trees of + - * / over small numbers, and the value Python's own
    ``operator`` functions give for the same tree (the reference: IEEE 754 double arithmetic)."""
    if depth >= 3 or draw(st.booleans()):
        x = draw(st.integers(1, 99)) / draw(st.sampled_from([1, 4, 10]))
        return repr(x), x
    op = draw(st.sampled_from(sorted(OPS)))
    left, right = draw(expressions(depth + 1)), draw(expressions(depth + 1))
    if op == "/" and right[1] == 0:
        op = "+"
    return f"({left[0]} {op} {right[0]})", OPS[op](left[1], right[1])


@settings(max_examples=200, deadline=None)
@given(expressions(), st.booleans())
def test_arithmetic_is_pythons_own(pair, negate):
    text, value = pair
    if negate:
        text, value = f"-{text}", -value
    assert parse_expression(text).evaluate({}) == value


def test_precedence_and_names():
    # Usual precedence: * and / before + and -, unary minus binds tightest (Python's grammar).
    assert parse_expression("2 + 3 * 4").evaluate({}) == 14
    assert parse_expression("-(2 - 5) / 2").evaluate({}) == 1.5
    e = parse_expression("pretrigger_s / record_s * 100")
    assert e.names == {"pretrigger_s", "record_s"}
    assert e.evaluate({"pretrigger_s": 3e-5, "record_s": 5e-4}) == pytest.approx(6.0)


@pytest.mark.parametrize("text, word", [
    ("__import__('os')", "a function call"), ("span_v.real", "an attribute"), ("span_v[0]", "an index"),
    ("span_v ** 2", "the operator **"), ("span_v // 2", "the operator //"), ("span_v % 2", "the operator %"),
    ("span_v > 1", "a comparison"), ("'x'", "only numbers"), ("True", "only numbers"),
    ("lambda: 1", "a lambda"), ("span_v if 1 else 2", "if/else"), ("(x := 1)", "an assignment"),
    ("span_v +", "is not an expression"),
])
def test_anything_but_arithmetic_is_refused(text, word):
    with pytest.raises(ProfileError, match=word.replace("*", r"\*").replace("(", r"\(")):
        parse_expression(text, where="t")


def test_evaluation_errors_name_the_expression():
    with pytest.raises(ProfileError, match=r"'span_v / 0': division by zero"):
        parse_expression("span_v / 0").evaluate({"span_v": 1.0})
    with pytest.raises(ProfileError, match=r"'unit \* 2': unit is 'V', not a number"):
        parse_expression("unit * 2").evaluate({"unit": "V"})


def test_format_specs_and_default_formatting():
    t = parse_template("TRIG:LEV {level_v:.4f};ACQ:NPTS {points:d};TB {record_s / 10};X {{literal}}", where="t")
    assert t.render({"level_v": 0.18, "points": 4000, "record_s": 5e-4}) == \
        "TRIG:LEV 0.1800;ACQ:NPTS 4000;TB 5e-05;X {literal}"
    # Without a spec a float goes with up to 9 significant digits, a whole number as it is.
    assert parse_template("{a}|{n}", where="t").render({"a": 1 / 3, "n": 7}) == "0.333333333|7"
    with pytest.raises(ProfileError, match="non-finite"):
        parse_template("{a}", where="t").render({"a": float("inf")})


@pytest.mark.parametrize("old, new, message", [
    (":TRIGger:SEQuence:LEVel {level_v}", ":TRIGger:SEQuence:LEVel {level_v:d}",
     r"\[scope.configure_trigger\] command: \{level_v:d\}: format spec 'd' does not suit a number with a fraction"),
    (":TRIGger:SEQuence:LEVel {level_v}", ":TRIGger:SEQuence:LEVel {volts}",
     r"\[scope.configure_trigger\] command: .* uses volts, which this operation is not given"),
    (":TRIGger:SEQuence:LEVel {level_v}", ":TRIGger:SEQuence:LEVel {level_v.real}",
     r"\[scope.configure_trigger\] command \{level_v.real\}: .*an attribute is not allowed"),
    (":TRIGger:SEQuence:LEVel {level_v}", ":TRIGger:SEQuence:LEVel {level_v!r}", r"conversions .* are not allowed"),
    (":TRIGger:SEQuence:LEVel {level_v}", ":TRIGger:SEQuence:LEVel {level_v", r"bad template"),
    ("[scope.wait_complete]", "[scope.wait_compelte]", r"\[scope.wait_compelte\]: not an operation of a scope"),
    ('fields = ["bits", "points", "dt_s", "t_first_s", "lsb", "code_zero", "zero_level"]\n\n[scope.read_data]',
     'fields = ["bits", "points", "dt_s", "t_first_s", "lsb", "zero_level"]\n\n[scope.read_data]',
     r"\[scope.read_scaling\]: the scaling record's code_zero is neither a reply field nor given in record"),
    ('fields = ["bits", "points", "dt_s", "t_first_s", "lsb", "code_zero", "zero_level"]\n\n[scope.read_data]',
     'fields = ["bits", "points", "dt_s", "t_first_s", "lsb", "code_zero", "zero_level"]\n'
     'record = { t_first_s = "start - trig" }\n\n[scope.read_data]',
     r"record t_first_s = 'start - trig': start, trig is not a reply field"),
    ('sync = "opc"\ntimeout_s = 20.0', 'reply = "text"\ntimeout_s = 20.0',
     r"\[scope.wait_complete\]: a wait that answers needs done"),
])
def test_bad_templates_and_records_fail_when_the_profile_loads(tmp_path, old, new, message):
    text = load_profile("generic-scpi").path
    source = open(text, encoding="utf-8").read()
    assert old in source, old
    path = tmp_path / "bad.toml"
    path.write_text(source.replace(old, new, 1))
    with pytest.raises(ProfileError, match=message) as info:
        load_profile(path)
    assert str(path) in str(info.value)


SCALING = Operation("read_scaling", "WAVE:SCALE? CH{channel};ACQ:NPTS?", reply="scaling",
                    fields=("source", "unit", "tstep", "trigger_index", "vstep", "centre_v", "npts"),
                    expect={"source": "CH{channel}", "unit": "V"},
                    record={"points": "npts", "dt_s": "tstep", "t_first_s": "-trigger_index * tstep",
                            "lsb": "vstep", "code_zero": 0, "zero_level": "centre_v"})


def test_scaling_reply_with_text_fields_constants_and_a_compound_answer():
    s = SCALING.scaling("CH1,V,1.0e-06,100,1.0e-03,5.0e-01;2000\n", {"channel": 1}, what="t")
    assert (s.points, s.dt_s, s.lsb, s.code_zero, s.zero_level) == (2000, 1e-6, 1e-3, 0.0, 0.5)
    assert s.t_first_s == -100 * 1e-6


@pytest.mark.parametrize("reply, message", [
    ("CH2,V,1e-6,100,1e-3,0.5;2000", r"source is 'CH2', expected 'CH1' \(the scaling of another trace\?\)"),
    ("CH1,V,1e-6,100,1e-3;2000", r"6 values, the profile names 7"),
    ("CH1,V,1e-6,TRIG,1e-3,0.5;2000", r"record t_first_s = '-trigger_index \* tstep': .*trigger_index is 'TRIG'"),
    ("CH1,V,0,100,1e-3,0.5;2000", r"unusable scaling \(dt_s = 0.0 \(must be > 0\)\)"),
    ("CH1,V,1e-6,100,1e-3,0.5;1.5", r"points = 1.5 is not a whole number"),
])
def test_scaling_replies_that_do_not_fit_are_refused(reply, message):
    with pytest.raises(InstrumentError, match=message):
        SCALING.scaling(reply, {"channel": 1}, what="t")
