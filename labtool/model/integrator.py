"""A batched implicit integrator for C·dy/dt = f(y, t): backward Euler, Newton, per-sample steps.

Every sample of a batch has its own time and step size, so a fast sample never waits for a slow one
and a sample's result does not depend on which others share its batch. Each iteration advances all
unfinished samples at once: one stacked evaluation gives every per-sample 6×6 Jacobian by forward
differences, numpy's batched ``inv`` factors them, and a simplified Newton iteration converges each
sample independently (converged samples are frozen). The local error is estimated from the change of
slope, (h/2)·|ẏ(n+1) − ẏ(n)| (Hairer & Wanner, Solving ODEs II, §IV.8, the backward Euler estimate),
and steps are controlled against ``atol + rtol·|y|``. Backward Euler is L-stable, which the model needs:
its time constants span from picoseconds (a diode node at 100 µA) to seconds (a gate at femtoamps).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from labtool.errors import ModelError

_NEWTON_ITERATIONS = 8
_NEWTON_TOL = 0.02  # Newton update, in units of the error tolerance, that counts as converged
_MAX_V_STEP = 0.25  # per-iteration limit of a node voltage update (V), against exponential overshoot
_FD_STEP = 1e-7  # forward-difference step of the Jacobian (V)
_MAX_ITERATIONS = 400_000
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
    h_max = h_max_s or 8.0 * (grid[1] - grid[0])
    bps = np.array(sorted({b for b in system.breakpoints if 0 < b < t_stop_s} | {t_stop_s}))
    steps = np.zeros(total, dtype=np.int64)
    rejected = np.zeros(total, dtype=np.int64)

    gid = np.arange(total)
    t = np.zeros(total)
    y = np.zeros((total, n))
    ydot = np.zeros((total, n))
    h = np.full(total, min(h_max, t_stop_s * 1e-6))
    h_floor = t_stop_s * _STEP_FLOOR
    k = np.ones(total, dtype=np.int64)
    sys_w = system
    for _ in range(_MAX_ITERATIONS):
        running = t < t_stop_s * (1 - 1e-12)
        if not running.any():
            break
        if running.mean() < 0.8:  # compact the working set so finished samples cost nothing
            gid, t, y, ydot, h, k = gid[running], t[running], y[running], ydot[running], h[running], k[running]
            sys_w = sys_w.take(running)
            running = running[running]
        nb = np.minimum(np.searchsorted(bps, t * (1 + 1e-12) + 1e-30, side="right"), bps.size - 1)
        h_try = np.minimum(np.minimum(h, h_max), bps[nb] - t)
        h_try = np.where(bps[nb] - t - h_try < 1e-9 * h_try, bps[nb] - t, h_try)  # land on breakpoints
        h_try = np.where(running, h_try, h_max)  # finished samples idle until the next compaction
        t_new = t + h_try
        cap_h = sys_w.caps / h_try[:, None]
        f0, jac = _jacobian(sys_w, y, t, t_new)
        m_inv = np.linalg.inv(cap_h[:, :, None] * np.eye(n) - jac)
        y_new = y.copy()
        conv = np.zeros(t.size, dtype=bool)
        f = f0
        for it in range(_NEWTON_ITERATIONS):
            if it:
                f = sys_w.currents(y_new, t, t_new)
            resid = cap_h * (y_new - y) - f
            dy = np.clip(-np.einsum("bij,bj->bi", m_inv, resid), -_MAX_V_STEP, _MAX_V_STEP)
            scale = atol + rtol * np.abs(y_new)
            small = np.max(np.abs(dy) / scale, axis=1) < _NEWTON_TOL
            upd = ~conv
            y_new[upd] += dy[upd]
            conv |= small
            if conv.all():
                break
        err = np.max(0.5 * np.abs(y_new - y - h_try[:, None] * ydot)
                     / (atol + rtol * np.maximum(np.abs(y), np.abs(y_new))), axis=1)
        # at the step floor a converged step is taken whatever its error: a supply profile may jump
        at_floor = h_try <= h_floor
        ok = running & conv & ((err <= 1.0) | at_floor) & np.all(np.isfinite(y_new), axis=1)
        if np.any(running & at_floor & ~ok):
            raise ModelError(f"the integrator cannot converge at t = {float(t[running & at_floor & ~ok][0]):.6e} s")
        _record(out, grid, gid, k, ok, t, t_new, y, y_new, record)
        ydot = np.where(ok[:, None], (y_new - y) / h_try[:, None], ydot)
        y = np.where(ok[:, None], y_new, y)
        t = np.where(ok, t_new, t)
        growth = np.clip(0.9 / np.sqrt(err + 1e-12), 0.2, 4.0)
        h = np.where(ok, h_try * growth, np.where(conv, h_try * np.minimum(growth, 0.9), h_try * 0.25))
        h = np.where(running, np.maximum(h, h_floor), h_max)
        steps[gid] += ok
        rejected[gid] += running & ~ok
    else:
        raise ModelError("the integrator did not reach the end of the record")
    return Recording(grid, out, steps, rejected)


def _record(out, grid, gid, k, ok, t_old, t_new, y_old, y_new, record):
    """Linear interpolation of accepted steps onto the output grid points they passed."""
    n_points = grid.size
    rec = list(record)
    while True:
        kc = np.minimum(k, n_points - 1)
        m = ok & (k < n_points) & (grid[kc] <= t_new * (1 + 1e-12))
        if not m.any():
            return
        frac = ((grid[kc] - t_old) / (t_new - t_old))[m, None]
        out[gid[m], k[m], :] = y_old[m][:, rec] + frac * (y_new[m][:, rec] - y_old[m][:, rec])
        k[m] += 1
