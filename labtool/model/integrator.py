"""A batched implicit integrator for C·dy/dt = f(y, t): variable-step BDF2 with Newton, per-sample steps.

Every sample of a batch has its own time and step size, so a fast sample never waits for a slow one
and a sample's result does not depend on which others share its batch. Each iteration advances all
unfinished samples at once from an explicit predictor by a simplified Newton iteration; converged
samples are frozen. Per-sample 6×6 Jacobians come from one stacked forward-difference evaluation and
serve a few steps (sooner renewed when Newton fails); numpy's batched ``inv`` refactors only the
samples whose Newton matrix changed, and a step that could grow only a little keeps its size.

The method is the variable-step two-step backward differentiation formula (BDF2; Hairer & Wanner,
Solving ODEs II, §III.5 and §IV.8), started, and restarted after each corner of the supply ramp,
with one backward-Euler step. Both are A-stable and damp stiff modes, which the model needs: its time
constants span from picoseconds (a diode node at 100 µA) to seconds (a gate at femtoamps). The local
error is (2/9)·h³·|y‴| for BDF2, with y‴ from divided differences of the slopes, and
(h/2)·|ẏ(n+1) − ẏ(n)| for backward Euler; steps are controlled against ``atol + rtol·|y|``, and a
BDF2 step grows at most twofold (its variable-step stability needs a ratio below 1 + √2).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from labtool.errors import ModelError

_NEWTON_ITERATIONS = 8
_NEWTON_TOL = 0.1  # Newton update, in units of the error tolerance, that counts as converged
_MAX_V_STEP = 0.25  # per-iteration limit of a node voltage update (V), against exponential overshoot
_FD_STEP = 1e-7  # forward-difference step of the Jacobian (V)
_HOLD_GROWTH = 1.5  # a step that could grow by less than this keeps its size (and its factorisation)
_JACOBIAN_REUSE = 5  # steps a Jacobian serves before it is re-evaluated (sooner if Newton fails)
_MAX_ITERATIONS = 400_000
_GRID_STEPS_PER_STEP = 16  # longest step, in output-grid intervals (interpolation stays faithful)
_STEP_FLOOR = 1e-11  # smallest step, relative to the record length


@dataclass(frozen=True)
class Recording:
    t_s: np.ndarray  # (n_points,) the uniform output grid
    values: np.ndarray  # (B, n_points, len(record)) states interpolated on the grid
    steps: np.ndarray  # (B,) accepted steps per sample
    rejected: np.ndarray  # (B,) rejected step attempts per sample


def _jacobian(system, y, t_old, t_new):
    """f(y) and df/dy (B, n, n) from one stacked evaluation of n + 1 states."""
    n = y.shape[-1]
    shift = np.zeros((n + 1, 1, n))
    shift[1:, 0, :] = _FD_STEP * np.eye(n)
    stack = y[None] + shift
    f = system.currents(stack, t_old, t_new)
    return f[0], np.moveaxis((f[1:] - f[0]) / _FD_STEP, 0, -1)


def integrate(system, t_stop_s: float, n_points: int, record: tuple[int, ...], *, rtol: float, atol: float,
              h_max_s: float | None = None) -> Recording:
    """Integrate every sample of ``system`` from the unpowered state y = 0 at t = 0 to ``t_stop_s``."""
    total = system.size
    n = system.caps.shape[-1]
    grid = np.linspace(0.0, t_stop_s, n_points)
    out = np.zeros((total, n_points, len(record)))
    h_max = h_max_s or _GRID_STEPS_PER_STEP * (grid[1] - grid[0])
    bps = np.array(sorted({b for b in system.breakpoints if 0 < b < t_stop_s} | {t_stop_s}))
    steps = np.zeros(total, dtype=np.int64)
    rejected = np.zeros(total, dtype=np.int64)

    gid = np.arange(total)
    t = np.zeros(total)
    y = np.zeros((total, n))
    ydot = np.zeros((total, n))
    y_prev = np.zeros((total, n))  # the BDF2 history: state, slope and step before the current one
    ydot_prev = np.zeros((total, n))
    h_prev = np.ones(total)
    has_prev = np.zeros(total, dtype=bool)  # False: the next step is backward Euler (start, corners)
    h = np.full(total, min(h_max, t_stop_s * 1e-6))
    h_floor = t_stop_s * _STEP_FLOOR
    k = np.ones(total, dtype=np.int64)
    jac = np.zeros((total, n, n))
    jac_age = np.full(total, _JACOBIAN_REUSE, dtype=np.int64)  # every sample starts with a fresh one
    m_inv = np.zeros((total, n, n))
    a0h_factored = np.zeros(total)
    sys_w = system
    for _ in range(_MAX_ITERATIONS):
        running = t < t_stop_s * (1 - 1e-12)
        if not running.any():
            break
        if running.mean() < 0.8:  # compact the working set so finished samples cost nothing
            gid, t, y, ydot, h, k = gid[running], t[running], y[running], ydot[running], h[running], k[running]
            jac, jac_age, m_inv, a0h_factored = jac[running], jac_age[running], m_inv[running], a0h_factored[running]
            y_prev, ydot_prev, h_prev, has_prev = y_prev[running], ydot_prev[running], h_prev[running], has_prev[running]
            sys_w = sys_w.take(running)
            running = running[running]
        nb = np.minimum(np.searchsorted(bps, t * (1 + 1e-12) + 1e-30, side="right"), bps.size - 1)
        h_try = np.minimum(np.minimum(h, h_max), bps[nb] - t)
        h_try = np.where(bps[nb] - t - h_try < 1e-9 * h_try, bps[nb] - t, h_try)  # land on breakpoints
        h_try = np.where(running, h_try, h_max)  # finished samples idle until the next compaction
        landed = h_try == bps[nb] - t
        t_new = t + h_try
        # variable-step BDF2 coefficients (backward Euler without history): a0·y(n+1) + a1·y(n) + a2·y(n−1)
        w = h_try / h_prev
        a0 = np.where(has_prev, (1 + 2 * w) / (1 + w), 1.0)
        hist = (np.where(has_prev, -(1 + w), -1.0)[:, None] * y
                + np.where(has_prev, w * w / (1 + w), 0.0)[:, None] * y_prev)
        a0h = a0 / h_try
        caps = sys_w.caps
        stale = running & (jac_age >= _JACOBIAN_REUSE)
        if stale.any():  # per sample, so a sample's steps never depend on the rest of its batch
            jac[stale] = _jacobian(sys_w.take(stale), y[stale], t[stale], t_new[stale])[1]
            jac_age[stale] = 0
        changed = stale | (a0h != a0h_factored)  # refactor only where the Newton matrix changed
        if changed.any():
            m_inv[changed] = np.linalg.inv((a0h[changed, None] * caps[changed])[:, :, None] * np.eye(n) - jac[changed])
            a0h_factored = np.where(changed, a0h, a0h_factored)
        y_new = y + np.clip(h_try[:, None] * ydot, -_MAX_V_STEP, _MAX_V_STEP)  # explicit predictor
        conv = np.zeros(t.size, dtype=bool)
        for it in range(_NEWTON_ITERATIONS):
            f = sys_w.currents(y_new, t, t_new)
            resid = caps * (a0[:, None] * y_new + hist) / h_try[:, None] - f
            dy = np.clip(-np.einsum("bij,bj->bi", m_inv, resid), -_MAX_V_STEP, _MAX_V_STEP)
            scale = atol + rtol * np.abs(y_new)
            small = np.max(np.abs(dy) / scale, axis=1) < _NEWTON_TOL
            upd = ~conv
            y_new[upd] += dy[upd]
            conv |= small
            if conv.all():
                break
        ydot_new = (a0[:, None] * y_new + hist) / h_try[:, None]
        # local error: BDF2 (2/9)·h³·|third derivative| from divided differences of the slopes;
        # backward Euler (h/2)·|ẏ(n+1) − ẏ(n)|
        y3 = ((ydot_new - ydot) / h_try[:, None] - (ydot - ydot_prev) / h_prev[:, None]) / (
            0.5 * (h_try + h_prev))[:, None]
        lte = np.where(has_prev[:, None], (2.0 / 9.0) * h_try[:, None] ** 3 * np.abs(y3),
                       0.5 * h_try[:, None] * np.abs(ydot_new - ydot))
        err = np.max(lte / (atol + rtol * np.maximum(np.abs(y), np.abs(y_new))), axis=1)
        # at the step floor a converged step is taken whatever its error: a supply profile may jump
        at_floor = h_try <= h_floor
        ok = running & conv & ((err <= 1.0) | at_floor) & np.all(np.isfinite(y_new), axis=1)
        if np.any(running & at_floor & ~ok):
            raise ModelError(f"the integrator cannot converge at t = {float(t[running & at_floor & ~ok][0]):.6e} s")
        _record(out, grid, gid, k, ok, t, t_new, y, y_new, record)
        okc = ok[:, None]
        y_prev, ydot_prev = np.where(okc, y, y_prev), np.where(okc, ydot, ydot_prev)
        h_prev = np.where(ok, h_try, h_prev)
        ydot = np.where(okc, ydot_new, ydot)
        y = np.where(okc, y_new, y)
        t = np.where(ok, t_new, t)
        has_prev = np.where(ok, ~landed, has_prev)
        # BDF2 steps grow at most 2× (its variable-step stability needs a ratio below 1 + √2)
        growth = np.where(has_prev, np.clip(0.9 * (err + 1e-12) ** (-1 / 3), 0.2, 2.0),
                          np.clip(0.9 / np.sqrt(err + 1e-12), 0.2, 4.0))
        growth = np.where((growth >= 1.0) & (growth < _HOLD_GROWTH), 1.0, growth)  # keep the factored matrix
        h = np.where(ok, h_try * growth, np.where(conv, h_try * np.minimum(growth, 0.9), h_try * 0.25))
        h = np.where(running, np.maximum(h, h_floor), h_max)
        jac_age = np.where(conv, jac_age + 1, _JACOBIAN_REUSE)  # Newton failed: refresh it
        steps[gid] += ok
        rejected[gid] += running & ~ok
    else:
        raise ModelError("the integrator did not reach the end of the record")
    return Recording(grid, out, steps, rejected)


def _record(out, grid, gid, k, ok, t_old, t_new, y_old, y_new, record):
    """Linear interpolation of accepted steps onto the output grid points they passed."""
    rec = list(record)
    passed = np.where(ok, np.searchsorted(grid, t_new * (1 + 1e-12), side="right") - k, 0)
    idx = np.nonzero(passed > 0)[0]
    a, b = y_old[idx][:, rec], y_new[idx][:, rec]
    t0, span = t_old[idx], (t_new - t_old)[idx]
    for j in range(int(passed[idx].max()) if idx.size else 0):
        sel = passed[idx] > j
        kk = k[idx[sel]] + j
        frac = ((grid[kk] - t0[sel]) / span[sel])[:, None]
        out[gid[idx[sel]], kk, :] = a[sel] + frac * (b[sel] - a[sel])
    k[idx] += passed[idx]
