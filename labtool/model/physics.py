"""Device laws of the behavioural bandgap model, as numpy functions that broadcast over samples.

References: thermal voltage kT/q with k and q exact in the 2019 SI (``scipy.constants``); the diode
law I = IS·(exp(V/VT) − 1) and the SPICE saturation-current temperature law IS(T) =
IS(T0)·(T/T0)^XTI·exp((Eg/k)·(1/T0 − 1/T)) (Gray, Hurst, Lewis, Meyer, 5th ed., §1.3 and §4.4);
the EKV interpolation of the MOS drain current, valid from weak to strong inversion (Enz, Krummenacher,
Vittoz, Analog Integrated Circuits and Signal Processing 8, 1995): I = I_spec·(F(xf) − F(xr)),
F(x) = ln²(1 + exp(x/2)).
"""

from __future__ import annotations

import numpy as np
from scipy import constants

ZERO_C_K = constants.zero_Celsius  # 273.15 K
K_OVER_Q = constants.k / constants.e  # V/K, exact in the 2019 SI

# Beyond this many thermal voltages the diode law is continued linearly: it keeps Newton steps
# finite (a trial forward bias of a volt or more) and is far above any physical bias of the core.
_DIODE_X_MAX = 60.0


def thermal_voltage(temperature_c):
    """kT/q in volts at ``temperature_c`` (°C)."""
    return K_OVER_Q * (np.asarray(temperature_c, dtype=float) + ZERO_C_K)


def saturation_current(is_ref_a, temperature_c, tnom_c, xti, eg_ev):
    """Diode saturation current at ``temperature_c`` from its value at ``tnom_c`` (SPICE law)."""
    t = np.asarray(temperature_c, dtype=float) + ZERO_C_K
    t0 = np.asarray(tnom_c, dtype=float) + ZERO_C_K
    return is_ref_a * (t / t0) ** xti * np.exp(eg_ev / K_OVER_Q * (1.0 / t0 - 1.0 / t))


def doubling_law(value_ref, temperature_c, tnom_c, doubling_c):
    """A leakage current that doubles every ``doubling_c`` kelvin (junction leakage, rule of thumb)."""
    return value_ref * 2.0 ** ((np.asarray(temperature_c, dtype=float) - tnom_c) / doubling_c)


def softplus(x):
    """ln(1 + exp(x)) without overflow."""
    return np.logaddexp(0.0, x)


def sigmoid(x):
    """1 / (1 + exp(−x)) without overflow."""
    return 0.5 * (1.0 + np.tanh(0.5 * np.asarray(x, dtype=float)))


def diode_current(v, is_a, ut):
    """I = IS·(exp(V/VT) − 1), continued linearly past ``_DIODE_X_MAX`` thermal voltages."""
    x = v / ut
    xc = np.minimum(x, _DIODE_X_MAX)
    e = np.exp(xc)
    return is_a * (e * (1.0 + (x - xc)) - 1.0)


def diode_conductance(v, is_a, ut):
    """dI/dV of :func:`diode_current`; VT/I for I ≫ IS (the incremental resistance of a diode)."""
    return is_a * np.exp(np.minimum(v / ut, _DIODE_X_MAX)) / ut


def leakage_current(v, il_a, ut):
    """Junction leakage of a node to ground: saturates at ``il_a`` a few VT above ground, zero at 0 V."""
    return il_a * np.tanh(v / ut)


def mos_current(vsg, vsd, vt0, slope_n, i_spec_a, ut):
    """EKV source-referred drain current of a PMOS with gate-source ``vsg`` and source-drain ``vsd``."""
    return mirror_currents(vsg, (vsd,), vt0, slope_n, i_spec_a, ut)[0]


def mirror_currents(vsg, vsds, vt0, slope_n, i_spec_a, ut):
    """EKV currents of PMOS devices sharing source and gate, one per source-drain voltage in ``vsds``."""
    scale = 2.0 * slope_n * ut
    overdrive = vsg - vt0
    forward = softplus(overdrive / scale) ** 2
    return [i_spec_a * (forward - softplus((overdrive - slope_n * vsd) / scale) ** 2) for vsd in vsds]


def mos_vsg_for_current(i_a, vt0, slope_n, i_spec_a, ut):
    """Inverse of :func:`mos_current` in saturation: the gate drive that carries ``i_a``."""
    root = np.sqrt(np.maximum(i_a, 0.0) / i_spec_a)
    return vt0 + 2.0 * slope_n * ut * np.log(np.maximum(np.expm1(root), 1e-300))  # −∞ drive at zero current


def node_voltage(i_a, is_a, il_a, ut, *, iterations: int = 64):
    """Voltage of a diode node fed ``i_a`` that also leaks: solves IS(e^{V/VT} − 1) + IL·tanh(V/VT) = I.

    Bisection (the left side is strictly increasing in V), vectorised over arrays; 64 halvings of
    the 2.5 V bracket leave ~1e-19 V, below double precision.
    """
    i_a, is_a, il_a, ut = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (i_a, is_a, il_a, ut)))
    lo = np.full(i_a.shape, -0.5)
    hi = np.full(i_a.shape, 2.0)
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        above = diode_current(mid, is_a, ut) + leakage_current(mid, il_a, ut) > i_a
        hi = np.where(above, mid, hi)
        lo = np.where(above, lo, mid)
    return 0.5 * (lo + hi)


def node_resistance(v, is_a, il_a, ut):
    """Incremental resistance dV/dI of a leaking diode node at voltage ``v``."""
    t = np.tanh(v / ut)
    return 1.0 / (diode_conductance(v, is_a, ut) + il_a * (1.0 - t * t) / ut)
