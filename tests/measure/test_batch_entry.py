"""``measure_outputs``: many outputs against one shared supply give exactly the per-record results."""

import numpy as np
import pytest

from labtool.errors import MeasurementError
from labtool.measure import Limits, measure_arrays, measure_outputs
from tests.measure.signals import adc, second_order_step, supply_ramp


def test_many_outputs_on_one_supply_equal_one_at_a_time():
    # Reference responses from scipy.signal.step (tests/measure/signals.py); one output stays at zero,
    # one has clipped (NaN) samples, which the engine drops from every channel.
    t = np.arange(0.0, 200e-6, 20e-9)
    supply = adc(supply_ramp(t, start_s=0.0, ramp_s=30e-6, vdd_v=1.8), bits=8, full_scale_v=4.0, noise_v=2e-3, seed=1)
    outputs = [adc(1.2 * second_order_step(t, zeta=z, wn=5e5, delay_s=d), bits=8, full_scale_v=2.0, noise_v=2e-3,
                   seed=k) for k, (z, d) in enumerate([(0.6, 40e-6), (0.3, 60e-6), (1.0, 90e-6)])]
    outputs.append(adc(0.0 * t, bits=8, full_scale_v=2.0, noise_v=2e-3, seed=9))
    clipped = outputs[0].copy()
    clipped[5000:5010] = np.nan
    outputs.append(clipped)
    limits = Limits(max_delay_s=50e-6)
    for fit in (True, False):
        batch = measure_outputs(t, supply, outputs, limits, fit=fit)
        for got, o in zip(batch, outputs):
            one = measure_arrays(t, supply, o, limits)
            assert got.verdict == one.verdict and got.delay_s == one.delay_s and got.settle_s == one.settle_s
            assert got.overshoot_pct == one.overshoot_pct and got.vout_final_v == one.vout_final_v
            assert (got.ring_hz == one.ring_hz) if fit else got.ring_hz is None
    assert [r.verdict for r in batch] == ["started", "ringing", "slow_start", "stuck_at_zero", "started"]


def test_a_bad_output_is_refused_like_a_single_record():
    t = np.linspace(0.0, 1e-4, 500)
    with pytest.raises(MeasurementError, match="one length"):
        measure_outputs(t, 1.8 * np.ones_like(t), [np.zeros(10)])
