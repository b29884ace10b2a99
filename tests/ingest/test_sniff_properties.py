"""Property: whatever delimiter / decimal mark / units layout / framing we write, we read back.

The fixtures are generated (invented values, stating a property, not a reference). Values are written
with repr(), which Python reads back as the same float, so base-unit columns must match bit for bit;
prefixed units are compared to a relative 1e-15 (one rounding of the SI factor, BIPM SI Brochure
9th ed. table 7).
"""

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from labtool.ingest import read_path
from tests.ingest.writers import Shape, render

TIME_UNITS = [("s", 1.0), ("ms", 1e-3), ("us", 1e-6), ("µs", 1e-6), ("ns", 1e-9)]
VOLT_UNITS = [("V", 1.0), ("mV", 1e-3), ("uV", 1e-6)]
CURRENT_UNITS = [("A", 1.0), ("mA", 1e-3), ("uA", 1e-6), ("nA", 1e-9)]
PREAMBLES = ["Model{d}ZR-4410 bench", "# lot: ZR24A", "Operator note{d}first power-up", "% wafer = W07",
             "Vertical Resolution{d}8 bit", ""]


@st.composite
def shapes(draw):
    delimiter = draw(st.sampled_from([",", ";", "\t", " "]))
    decimal = draw(st.sampled_from([".", ","])) if delimiter != "," else "."
    with_current = draw(st.booleans())
    columns = [("vdd", draw(st.sampled_from(VOLT_UNITS))), ("vref", draw(st.sampled_from(VOLT_UNITS)))]
    if with_current:
        columns.append(("idd", draw(st.sampled_from(CURRENT_UNITS))))
    preamble = draw(st.lists(st.sampled_from(PREAMBLES), max_size=4))
    sep = delimiter if delimiter != " " else ": "
    return Shape(
        delimiter=delimiter, decimal=decimal,
        units=draw(st.sampled_from(["brackets", "parens", "row", "slash", "none"])),
        preamble=tuple(p.format(d=sep) for p in preamble),
        crlf=draw(st.booleans()), bom=draw(st.booleans()), gzip=draw(st.booleans()),
        trailing_delimiter=delimiter != " " and draw(st.booleans()),
        time_unit=draw(st.sampled_from(TIME_UNITS)),
        columns=tuple((name, unit[0]) for name, unit in columns)), [u[1] for _, u in columns]


values = st.floats(min_value=-1e3, max_value=1e3, allow_nan=False, allow_infinity=False, allow_subnormal=False)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(shape_and_factors=shapes(), n=st.integers(min_value=2, max_value=25), data=st.data())
def test_what_we_write_we_read_back(tmp_path, shape_and_factors, n, data):
    shape, factors = shape_and_factors
    if shape.units == "none":  # without units everything is taken as already SI
        factors = [1.0] * len(factors)
        shape = Shape(**{**shape.__dict__, "time_unit": ("s", 1.0)})
    steps = data.draw(st.lists(st.floats(min_value=1e-3, max_value=10.0), min_size=n - 1, max_size=n - 1))
    t_written = np.concatenate([[data.draw(values)], np.zeros(n - 1)])
    t_written[1:] = t_written[0] + np.cumsum(steps)
    if not np.all(np.diff(t_written) > 0):  # float addition can swallow a tiny step on a large start
        return
    written = [np.array(data.draw(st.lists(values, min_size=n, max_size=n))) for _ in factors]
    t_unit = shape.time_unit[1]
    path = tmp_path / ("cap.csv.gz" if shape.gzip else "cap.csv")
    path.write_bytes(render(shape, t_written, written))
    (capture,) = read_path(str(path))
    t_expect = t_written * t_unit
    if capture.time.uniform:
        # Near-equal steps are stored as t0 + i·dt (TimeBase.from_times accepts steps within 1e-6 of
        # the mean), so each instant may move by up to n · 1e-6 of a step.
        step = (t_expect[-1] - t_expect[0]) / (n - 1)
        np.testing.assert_allclose(capture.times(), t_expect, rtol=0, atol=2e-6 * n * step)
    elif t_unit == 1.0:
        np.testing.assert_array_equal(capture.times(), t_written)
    else:
        np.testing.assert_allclose(capture.times(), t_expect, rtol=1e-15, atol=0)
    for channel, values_written, factor in zip(capture.channels, written, factors):
        expect = values_written * factor
        if factor == 1.0:
            np.testing.assert_array_equal(channel.values, expect)
        else:
            np.testing.assert_allclose(channel.values, expect, rtol=1e-15, atol=0)
    assert [c.role for c in capture.channels][:2] == ["supply", "output"]
    assert capture.channels[-1].role == ("supply_current" if len(factors) == 3 else "output")



_LINES = st.lists(st.sampled_from(["time,vdd,vref", "0,0,0", "1e-6,1.8,1.2", "2e-6;1,8;1,2", "# lot: ZR24A",
                                   "x", "", "9.91E37,1,1", "1,2", "  ", "nan,nan,nan", "Sample Interval,1e-9",
                                   "Sample,vdd,vref", "3,1.8,1.2", "\x00", "µs,V,V"]), max_size=12)


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(lines=_LINES, newline=st.sampled_from(["\n", "\r\n", "\r"]), junk=st.binary(max_size=40))
def test_any_mix_of_lines_is_a_capture_or_one_input_error(tmp_path, lines, newline, junk):
    """A property, not a reference: the reader never fails with anything but a one-line InputError."""
    from labtool.errors import InputError

    path = tmp_path / "mix.csv"
    path.write_bytes(newline.join(lines).encode() + junk)
    try:
        captures = read_path(str(path))
    except InputError as exc:
        assert "\n" not in str(exc) and str(exc).startswith(str(path))
    else:
        assert all(c.time.n >= 2 for c in captures)
