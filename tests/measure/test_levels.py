"""IEEE Std 181-2011 histogram state levels on two-level records (clause 5.2, number from memory).

The records are two-level pulse trains built for the test (invented data, stating a property):
IEEE 181 defines the low and high state levels as the histogram modes of the lower and upper halves
of the amplitude range, so on a record that dwells on two known levels, with aberrations (overshoot
and ringing after each edge, as in IEEE 181 figures) and noise, the method must return those levels.
"""

import numpy as np
import pytest

from labtool.measure.levels import noise_rms, quantisation_step, segment_level, state_levels
from tests.measure.signals import adc, second_order_step

LOW, HIGH = 0.1, 1.3


def _pulse_train(n=200_000, periods=8, duty=0.3):
    t = np.arange(n) / n
    phase = (t * periods) % 1.0
    ideal = np.where(phase < duty, HIGH, LOW)
    # each edge rings: a second-order response (ζ = 0.3) to the level change, decaying within the state
    ring = np.zeros(n)
    step = second_order_step(np.arange(4000) / n * periods * 40.0, zeta=0.3, wn=2.0, delay_s=-1e-9) - 1.0
    for e in np.flatnonzero(np.diff(ideal)) + 1:
        ring[e:e + step.size] += step[: n - e] * (ideal[e] - ideal[e - 1])
    return ideal + ring


@pytest.mark.parametrize("bits,noise", [(8, 2e-3), (8, 10e-3), (12, 0.5e-3)])
def test_histogram_state_levels_of_a_ringing_pulse_train(bits, noise):
    record = adc(_pulse_train(), bits=bits, full_scale_v=2.0, noise_v=noise, seed=3)
    levels = state_levels(record)
    q = 2.0 / 2 ** bits
    # Within half a code, or a tenth of the noise, whichever is larger: the refined mode averages the
    # samples of the modal bin and its neighbours, so neither codes nor noise bias it beyond that.
    tol = max(q / 2, noise / 10)
    assert levels.low_v == pytest.approx(LOW, abs=tol)
    assert levels.high_v == pytest.approx(HIGH, abs=tol)
    # IEEE 181 reference levels (§5.3.3, clause number from memory): 50 % is halfway between the state levels.
    assert levels.reference(0.5) == pytest.approx((LOW + HIGH) / 2, abs=tol)


def test_mean_or_median_would_be_wrong_but_the_mode_is_not():
    """The property the histogram method exists for: a 30 % duty cycle pulls the mean and median
    away from either level; the modes stay on them."""
    record = adc(_pulse_train(), bits=8, full_scale_v=2.0, noise_v=2e-3, seed=4)
    assert abs(np.median(record) - LOW) < 0.01  # the median sits on the low level ...
    assert abs(record.mean() - LOW) > 0.3  # ... the mean on neither
    assert state_levels(record).high_v == pytest.approx(HIGH, abs=2.0 / 256)


def test_quantisation_step_and_noise_estimates():
    rng = np.random.default_rng(0)
    q = 2.0 / 256
    coded = np.round((0.6 + rng.normal(0, 0.02, 50_000)) / q) * q
    assert quantisation_step(coded) == pytest.approx(q, rel=1e-9)
    assert quantisation_step(rng.normal(0, 1, 50_000)) == 0.0  # continuous values are not quantised
    # noise from first differences: √2·σ per difference, MAD → σ for a normal distribution; 3 % on
    # 20,000 differences (a MAD-based sigma has variance ≈ 1.36σ²/n, 37 % efficiency, so its standard
    # error is ≈ 1.17σ/√n ≈ 0.8 %; Rousseeuw & Croux, JASA 88, 1993; from memory).
    slow = np.linspace(0, 1, 200_000) + rng.normal(0, 0.01, 200_000)
    assert noise_rms(slow) == pytest.approx(0.01, rel=0.03)
    assert segment_level(coded) == pytest.approx(0.6, abs=q / 2)
