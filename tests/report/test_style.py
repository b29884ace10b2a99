"""The visual identity: one style per verdict, readable without colour and under colour-vision deficiency."""

import itertools

import numpy as np
import pytest

from labtool.measure.verdict import VERDICTS
from labtool.report import style

# Machado, Oliveira & Fernandes, "A physiologically-based model for simulation of color vision
# deficiency", IEEE TVCG 15(6), 2009: severity-1.0 matrices on linear RGB (from memory).
CVD_MATRICES = {
    "protanopia": [[0.152286, 1.052583, -0.204868], [0.114503, 0.786281, 0.099216], [-0.003882, -0.048116, 1.051998]],
    "deuteranopia": [[0.367322, 0.860646, -0.227968], [0.280085, 0.672501, 0.047413], [-0.011820, 0.042940, 0.968881]],
    "tritanopia": [[1.255528, -0.076749, -0.178779], [-0.078411, 0.930809, 0.147602], [0.004733, 0.691367, 0.303900]],
}


def _linear(hex_colour):
    # sRGB transfer function, IEC 61966-2-1.
    c = np.array([int(hex_colour[i:i + 2], 16) / 255 for i in (1, 3, 5)])
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def _lab(linear_rgb):
    # linear sRGB → XYZ (IEC 61966-2-1 matrix, D65) → CIELAB (CIE 15:2004).
    xyz = np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]]) @ np.clip(linear_rgb, 0, 1)
    t = xyz / np.array([0.95047, 1.0, 1.08883])
    f = np.where(t > (6 / 29) ** 3, np.cbrt(t), t / (3 * (6 / 29) ** 2) + 4 / 29)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


def test_every_verdict_of_the_engine_has_a_style_in_its_order():
    assert tuple(style.VERDICT_STYLES) == VERDICTS


@pytest.mark.parametrize("attribute", ["colour", "marker", "hatch", "label", "glyph"])
def test_verdict_cues_are_all_different(attribute):
    values = [getattr(s, attribute) for s in style.VERDICT_STYLES.values()]
    assert len(set(values)) == len(values)


@pytest.mark.parametrize("deficiency", sorted(CVD_MATRICES))
def test_verdict_colours_stay_apart_under_simulated_colour_vision_deficiency(deficiency):
    # ΔE*ab ≥ 10 between every pair: well above the ~2.3 just-noticeable difference (Sharma &
    # Trussell, IEEE TIP 1997, from memory). The threshold is a property we state, not a standard.
    m = np.array(CVD_MATRICES[deficiency])
    labs = {v: _lab(m @ _linear(s.colour)) for v, s in style.VERDICT_STYLES.items()}
    worst = min(np.linalg.norm(labs[a] - labs[b]) for a, b in itertools.combinations(labs, 2))
    assert worst >= 10.0


def test_the_simulation_merges_a_classic_red_green_pair():
    # The check can fail: a saturated red and green, ~120 ΔE*ab apart in normal vision, fall below
    # the threshold under the deuteranopia matrix.
    m = np.array(CVD_MATRICES["deuteranopia"])
    red, green = _linear("#D62728"), _linear("#2CA02C")
    assert np.linalg.norm(_lab(red) - _lab(green)) > 100
    assert np.linalg.norm(_lab(m @ red) - _lab(m @ green)) < 10.0
