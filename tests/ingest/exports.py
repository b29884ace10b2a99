"""Invented scope-export fixtures shared by the export-layout tests (stating properties: what a layout
holds, the importer reads back). Values are printed with repr() or with a fixed number of decimals
that the written floats already have, so they are read back bit for bit."""

import numpy as np
import pytest

N, DT, T0 = 120, 2e-7, -1e-5


def startup(n: int = N, dt: float = DT, t0: float = T0):
    """An invented supply ramp (0 → 1.8 V) and a reference output following it (0 → 1.2 V), 4 decimals."""
    t = t0 + dt * np.arange(n)
    rng = np.random.default_rng(7)
    supply = np.round(np.clip((t + 6e-6) / 6e-6, 0, 1) * 1.8 + rng.normal(0, 2e-3, n), 4)
    output = np.round(1.2 * (1 - np.exp(-np.clip(t - 2e-6, 0, None) / 2e-6)) + rng.normal(0, 2e-3, n), 4)
    return t, supply, output


def write(tmp_path, name: str, text: str, newline: str = "\n") -> str:
    path = tmp_path / name
    path.write_bytes(text.replace("\n", newline).encode("utf-8"))
    return str(path)


def rows(*columns, delimiter: str = ",", lead: str = "", tail: str = "") -> str:
    return "".join(lead + delimiter.join(repr(float(c[k])) for c in columns) + tail + "\n"
                   for k in range(len(columns[0])))


def roles(capture) -> dict:
    return {c.name: (c.role, c.role_source) for c in capture.channels}


def assert_time_base(capture, n=N, dt=DT, t0=T0):
    tb = capture.time
    assert tb.uniform and tb.n == n
    assert tb.dt_s == pytest.approx(dt, rel=1e-9)
    assert tb.t0_s == pytest.approx(t0, rel=1e-12, abs=1e-18)


def assert_values(capture, supply, output):
    np.testing.assert_array_equal(capture.channel("supply").values, supply)
    np.testing.assert_array_equal(capture.channel("output").values, output)
