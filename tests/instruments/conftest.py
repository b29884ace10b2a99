"""Fixtures: the simulated bench on loopback port-0 servers, reached through pyvisa + pyvisa-py."""

from __future__ import annotations

import numpy as np
import pytest

from instruments.profile import load_profile
from instruments.sim.devices import SimBench
from instruments.sim.server import ScpiServer


def first_order_start(slot, t, *, ramp_s, vdd_v, temperature_c):
    """Invented stand-in for a part (a property fixture, not a reference): the supply ramps linearly,
    the output rises with a 20 µs time constant once the supply passes 1 V; slot 9 stays at zero."""
    supply = np.clip(t / ramp_s, 0.0, 1.0) * vdd_v
    t_on = ramp_s * 1.0 / vdd_v
    output = np.where(t > t_on, 1.2 * (1 - np.exp(-np.clip(t - t_on, 0, None) / 20e-6)), 0.0)
    if slot == 9:
        output = np.zeros_like(t)
    return {"supply": supply, "output": output, "supply_current": supply * 50e-6}


@pytest.fixture
def bench():
    b = SimBench(first_order_start, slots=set(range(1, 10)), noise_v=0.2e-3, seed=1)
    servers = {"scope": ScpiServer(b.scope).start(), "supply": ScpiServer(b.supply).start(),
               "chamber": ScpiServer(b.chamber).start()}
    b.servers = servers
    yield b
    for s in servers.values():
        s.stop()


@pytest.fixture
def bench_b():
    """The tests' second dialect (dialect_b.py): its scope and supply on loopback servers."""
    from tests.instruments.dialect_b import dialect_b_bench

    b = dialect_b_bench(first_order_start, slots=set(range(1, 10)), noise_v=0.2e-3, seed=3)
    yield b
    for s in b.servers.values():
        s.stop()


@pytest.fixture(scope="session")
def profile():
    return load_profile("generic-scpi")


@pytest.fixture
def sessions(bench, profile):
    opened = {role: profile.session(server.resource, name=f"sim {role}") for role, server in bench.servers.items()}
    for s in opened.values():
        s.timeout_s = 0.5  # short timeouts: fault tests must be quick
        s.open()
    yield opened
    for s in opened.values():
        s.close()
