"""A small campaign for the report tests: 2 lots × 4 parts × 2 ramp times, measured (invented traces)."""

import numpy as np
import pytest

from labtool.capture import Conditions
from labtool.measure import Limits
from labtool.measure.batch import measure_campaign
from labtool.store import Campaign
from tests.builders import make_capture
from tests.report.tables import RAMPS

DT = 0.2e-6


def _startup(ramp_s: float, delay_s: float | None, seed: int):
    """Supply 0 → 1.8 V over ramp_s from t = 10 µs; output a first-order rise to 1.2 V starting
    ``delay_s`` after supply valid (90 %), or stuck at zero; 8-bit-like noise."""
    rng = np.random.default_rng(seed)
    t = np.arange(int((ramp_s * 1.5 + 160e-6) / DT)) * DT
    supply = np.clip((t - 10e-6) / ramp_s, 0, 1) * 1.8
    out = np.zeros_like(t)
    if delay_s is not None:
        t_valid = 10e-6 + 0.9 * ramp_s
        start = t_valid + delay_s - 2.3 * 3e-6  # 90 % of a τ = 3 µs rise lands at delay_s
        out = np.where(t > start, 1.2 * (1 - np.exp(-(t - start) / 3e-6)), 0.0)
    return supply, out + rng.normal(0, 2e-3, t.size)


@pytest.fixture(scope="session")
def campaign(tmp_path_factory):
    root = tmp_path_factory.mktemp("camp") / "c"
    seed = 0
    with Campaign.open(root, create=True) as camp:
        for lot in ("ZR24A", "ZR24B"):
            for p in range(1, 5):
                for ramp in RAMPS:
                    seed += 1
                    part = f"p{p:02d}"
                    returned = lot == "ZR24A" and p == 4
                    stuck = returned and ramp == RAMPS[1]
                    delay = None if stuck else 12e-6 + 1e-6 * p + (3e-6 if lot == "ZR24B" else 0)
                    tags = {"status": "returned"} if returned else {}
                    cond = Conditions(lot=lot, wafer="W03", die_x=p, die_y=1 if lot == "ZR24A" else 2, part=part,
                                      temperature_c=25.0, ramp_s=ramp, repeat=1, tags=tags)
                    camp.add_capture(make_capture(*_startup(ramp, delay, seed), DT, conditions=cond,
                                                  source=f"runs/{lot}_{part}_{ramp:g}.csv"))
        report = measure_campaign(camp, Limits(max_delay_s=50e-6))
        assert not report.failed
    return root
