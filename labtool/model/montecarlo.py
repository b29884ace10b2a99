"""Monte Carlo of startup: N parts per condition, integrated together, measured like silicon.

Common random numbers: the standard-normal draws depend only on ``seed`` and the sample index (one
fixed column per varied parameter, :data:`VARIED`), never on the conditions or the nominal values, so
differences between conditions or design changes are the physics, not the dice. Each sample is
measured by the same engine as a bench capture (labtool.measure: levels, crossings, verdict).
A sample whose integration or measurement fails is recorded with its parameters and the error
(``MonteCarloResult.failures``); the others go on. Behavioural model, not transistor-level sign-off.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
import pandas as pd

from labtool.execute import Scheduler, run_batch
from labtool.errors import ModelError
from labtool.measure import Limits, measure_outputs
from labtool.model.circuit import OUT, linear_ramp, make_circuit
from labtool.model.design import resolve_params
from labtool.model.integrator import integrate
from labtool.model.transient import default_stop

# Varied parameters, in the fixed order of the draw columns (changing it changes every sample).
VARIED = ("amp_offset_v", "is_dev_q1", "is_dev_q2", "is_dev_q3", "r_dev", "c_dev", "i_start_a",
          "leak_q1_a", "leak_q2_a", "leak_out_a")
_FIRST_STREAM = 7  # columns drawn from the seed's first stream (the original set); the leakages from a second
CHUNK = 2500  # samples integrated together in one batch item (bigger batches amortise numpy overhead)


def draws(n: int, seed: int) -> np.ndarray:
    """(n, len(VARIED)) standard-normal draws; sample i's row is the same for any n ≥ i + 1.

    The first seven columns come from ``default_rng(seed)``, the leakage columns from
    ``default_rng([seed, 1])``, so adding the leakages left every earlier draw as it was."""
    if n < 1:
        raise ModelError(f"Monte Carlo needs n ≥ 1 samples (got {n})")
    first = np.random.default_rng(seed).standard_normal((n, _FIRST_STREAM))
    second = np.random.default_rng([seed, 1]).standard_normal((n, len(VARIED) - _FIRST_STREAM))
    return np.hstack([first, second])


def sigmas(design) -> dict[str, float]:
    """The design's sigma of each varied parameter (its unit: see :func:`sampled_values`)."""
    d = design
    return {"amp_offset_v": d.sigma_offset_v, "is_dev_q1": d.sigma_is_rel, "is_dev_q2": d.sigma_is_rel,
            "is_dev_q3": d.sigma_is_rel, "r_dev": d.sigma_r_rel, "c_dev": d.sigma_c_rel,
            "i_start_a": d.sigma_i_start_rel, "leak_q1_a": d.sigma_leak_ln, "leak_q2_a": d.sigma_leak_ln,
            "leak_out_a": d.sigma_leak_ln}


def sampled_values(design, z: np.ndarray) -> dict[str, np.ndarray]:
    """Per-sample values of the varied parameters from the draws ``z`` (n, len(VARIED)) and the
    design's sigmas: offset additive (V); mismatch, resistors, capacitances relative (floored at
    −90 %); startup current relative (floored at zero); leakages log-normal."""
    d, s = design, sigmas(design)
    col = {name: z[:, k] for k, name in enumerate(VARIED)}
    rel = lambda name: np.maximum(getattr(d, name) + s[name] * col[name], -0.9)  # noqa: E731
    out = {"amp_offset_v": d.amp_offset_v + s["amp_offset_v"] * col["amp_offset_v"]}
    out.update({name: rel(name) for name in ("is_dev_q1", "is_dev_q2", "is_dev_q3", "r_dev", "c_dev")})
    out["i_start_a"] = d.i_start_a * np.maximum(1.0 + s["i_start_a"] * col["i_start_a"], 0.0)
    out.update({name: getattr(d, name) * np.exp(s[name] * col[name]) for name in ("leak_q1_a", "leak_q2_a",
                                                                                  "leak_out_a")})
    return out


def sample_population(design, n: int, seed: int) -> list:
    """``n`` designs with per-part variation (the same parts as :func:`monte_carlo` with this seed)."""
    values = sampled_values(design, draws(n, seed))
    return [design.replace(**{k: float(v[i]) for k, v in values.items()}) for i in range(n)]


@dataclass(frozen=True)
class MonteCarloResult:
    """Per-sample results (``samples``), samples that could not be simulated (``failures``: condition,
    sample, the varied parameters and the error) and per-condition summaries; behavioural model,
    not sign-off."""

    samples: pd.DataFrame
    seed: int
    failures: pd.DataFrame = field(default_factory=lambda: no_failures())

    def summary(self) -> pd.DataFrame:
        keys = ["ramp_s", "temperature_c"]
        conditions = sorted({*map(tuple, self.samples[keys].to_numpy().tolist()),
                             *map(tuple, self.failures[keys].to_numpy().tolist())})
        rows = []
        for ramp, temp in conditions:
            g = self.samples[(self.samples["ramp_s"] == ramp) & (self.samples["temperature_c"] == temp)]
            bad = self.failures[(self.failures["ramp_s"] == ramp) & (self.failures["temperature_c"] == temp)]
            rows.append({"ramp_s": ramp, "temperature_c": temp, **summarise(g, bad)})
        return pd.DataFrame(rows)


_FAILURE_COLUMNS = ["ramp_s", "temperature_c", "sample", "error", *VARIED]


def no_failures() -> pd.DataFrame:
    """An empty failures table (the columns of ``MonteCarloResult.failures``)."""
    return pd.DataFrame(columns=_FAILURE_COLUMNS)


def summarise(g: pd.DataFrame, failures: pd.DataFrame | None = None) -> dict:
    """n, p_stuck and the delay distribution of one condition's samples: the delays of samples whose
    output came up and stayed, summarised as every set-up is (labtool.stats.setups); ``n_failed``
    samples could not be simulated (not in n, not in p_stuck)."""
    from labtool.stats.setups import counted, quantiles

    q = quantiles(counted(g))
    counts = g["verdict"].value_counts()
    return {
        "n": int(len(g)), "p_stuck": float(g["stuck"].mean()) if len(g) else None, "n_stuck": int(g["stuck"].sum()),
        "delay_median_s": q.median, "delay_p05_s": q.p05, "delay_p95_s": q.p95,
        "delay_mean_s": q.mean, "delay_std_s": q.std,
        "verdicts": {str(k): int(v) for k, v in counts.items()},
        "n_failed": 0 if failures is None else int(len(failures)),
    }


def _integrate(design, ramp_s: float, temperature_c: float, values: dict[str, np.ndarray]):
    """The output waveforms of a batch of samples at one condition: (t, supply, outputs (B, n), steps)."""
    size = len(next(iter(values.values())))
    resolved = resolve_params({**design.values(), **values}, temperature_c)
    resolved["ramp_s"] = ramp_s
    circ = make_circuit(resolved, size, linear_ramp(design.vdd_v, ramp_s), (ramp_s,))
    rec = integrate(circ, default_stop(design, ramp_s), design.mc_points, (OUT,), rtol=design.rtol,
                    atol=design.atol_v)
    return rec.t_s, circ.supply(rec.t_s), rec.values[:, :, 0], rec.steps


def _one_line(exc: BaseException) -> str:
    return str(exc) if isinstance(exc, ModelError) else f"{type(exc).__name__}: {exc}"


def _measure(t, supply, outputs, limits: Limits, fit: bool) -> list[dict | str]:
    """A row per output, or the error message of an output that cannot be measured."""
    def row(r) -> dict:
        out = {"verdict": r.verdict, "delay_s": r.delay_s, "settle_s": r.settle_s, "overshoot_pct": r.overshoot_pct,
               "vout_final_v": r.vout_final_v}
        return {**out, "ring_hz": r.ring_hz, "damping": r.damping} if fit else out

    try:
        return [row(r) for r in measure_outputs(t, supply, outputs, limits, fit=fit)]
    except Exception:  # noqa: BLE001 -- find the output at fault; the others are measured as usual
        rows = []
        for o in outputs:
            try:
                rows.append(row(measure_outputs(t, supply, [o], limits, fit=fit)[0]))
            except Exception as exc:  # noqa: BLE001 -- one bad sample must not end the call
                rows.append(f"measurement failed: {_one_line(exc)}")
        return rows


def _simulate(design, ramp_s, temperature_c, values, limits, fit, index: np.ndarray) -> list[tuple[int, dict | str, int]]:
    """(sample position, row or error, steps) of the samples at ``index``. A batch whose integration fails
    is split in halves until the failing samples stand alone (a sample's result does not depend on its batch)."""
    try:
        with np.errstate(all="ignore"):  # non-finite trial steps are rejected by the integrator itself
            t, supply, outputs, steps = _integrate(design, ramp_s, temperature_c,
                                                   {k: v[index] for k, v in values.items()})
    except Exception as exc:  # noqa: BLE001 -- isolate the failing samples, keep the rest
        if index.size == 1:
            return [(int(index[0]), f"integration failed: {_one_line(exc)}", 0)]
        half = index.size // 2
        return (_simulate(design, ramp_s, temperature_c, values, limits, fit, index[:half])
                + _simulate(design, ramp_s, temperature_c, values, limits, fit, index[half:]))
    return list(zip(index.tolist(), _measure(t, supply, outputs, limits, fit), steps.tolist()))


_ROW_COLUMNS = ["verdict", "delay_s", "settle_s", "overshoot_pct", "vout_final_v"]


def _sample_frame(ramp_s, temperature_c, sample_ids, values, done: list[tuple[int, dict, int]], fit: bool) -> pd.DataFrame:
    """The samples table of one chunk from its (position, row, steps) of the samples that worked."""
    ok = [k for k, _, _ in done]
    frame = pd.DataFrame([row for _, row, _ in done], columns=_ROW_COLUMNS + (["ring_hz", "damping"] if fit else []))
    frame.insert(0, "sample", np.asarray(sample_ids, dtype=np.int64)[ok])
    frame.insert(0, "temperature_c", float(temperature_c))
    frame.insert(0, "ramp_s", float(ramp_s))
    frame.insert(3, "stuck", frame["verdict"] == "stuck_at_zero")
    frame["delay_s"] = frame["delay_s"].astype(float)
    for k, v in values.items():
        frame[k] = np.asarray(v, dtype=float)[ok]
    frame["steps"] = np.array([steps for _, _, steps in done], dtype=np.int64)
    return frame


def _run_chunk(item) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Integrate and measure one chunk of samples at one condition (a picklable batch item):
    (rows of the samples that worked, rows of those that failed)."""
    design, ramp_s, temperature_c, sample_ids, values, limits, fit = item
    done = sorted(_simulate(design, ramp_s, temperature_c, values, limits, fit, np.arange(len(sample_ids))),
                  key=lambda d: d[0])
    good = [d for d in done if isinstance(d[1], dict)]
    bad = [(k, row) for k, row, _ in done if not isinstance(row, dict)]
    return (_sample_frame(ramp_s, temperature_c, sample_ids, values, good, fit),
            _failure_rows(ramp_s, temperature_c, np.asarray(sample_ids), values, bad))


def _failure_rows(ramp_s, temperature_c, sample_ids, values, bad: list[tuple[int, str]]) -> pd.DataFrame:
    rows = [{"ramp_s": float(ramp_s), "temperature_c": float(temperature_c), "sample": int(sample_ids[k]),
             "error": message, **{name: float(v[k]) for name, v in values.items()}} for k, message in bad]
    return pd.DataFrame(rows, columns=_FAILURE_COLUMNS) if rows else no_failures()


def run_samples(design, z: np.ndarray, *, conditions: Sequence[tuple[float, float]], sample_ids=None,
                limits: Limits | None = None, scheduler: Scheduler | None = None, chunk: int = CHUNK,
                fit: bool = False, seed: int = 0) -> MonteCarloResult:
    """Simulate and measure the parts given by the draws ``z`` (n, len(VARIED)) at every condition.
    ``sample_ids`` name the rows (default 0…n−1). Failing samples go to ``failures``; the call goes on."""
    if not conditions:
        raise ModelError("Monte Carlo needs at least one (ramp_s, temperature_c) condition")
    z = np.asarray(z, dtype=float)
    if z.ndim != 2 or z.shape[1] != len(VARIED):
        raise ModelError(f"Monte Carlo draws must have shape (n, {len(VARIED)}) (got {z.shape})")
    ids = np.arange(len(z)) if sample_ids is None else np.asarray(sample_ids, dtype=np.int64)
    values = sampled_values(design, z)
    limits = limits or Limits()
    items = [(design, float(r), float(t), ids[s:s + chunk], {k: v[s:s + chunk] for k, v in values.items()}, limits, fit)
             for r, t in conditions for s in range(0, len(z), chunk)]
    frames, failures = [], []
    for outcome in run_batch(_run_chunk, items, scheduler, what="monte carlo", unit="batch"):
        if outcome.ok:
            frames.append(outcome.value[0])
            failures.append(outcome.value[1])
        else:  # the item itself could not run (e.g. a lost worker): all its samples failed
            _, r, t, item_ids, item_values, _, _ = outcome.item
            frames.append(_sample_frame(r, t, item_ids, item_values, [], fit))
            failures.append(_failure_rows(r, t, item_ids, item_values, [(k, outcome.error) for k in range(len(item_ids))]))
    return MonteCarloResult(_concat(frames), seed, _concat(failures))


def _concat(frames: list[pd.DataFrame]) -> pd.DataFrame:
    """Row-wise concatenation that keeps the columns of empty frames (pandas warns about those)."""
    full = [f for f in frames if len(f)]
    return pd.concat(full, ignore_index=True) if full else frames[0].iloc[0:0].reset_index(drop=True)


def monte_carlo(design, *, conditions: Sequence[tuple[float, float]], n: int, seed: int,
                limits: Limits | None = None, scheduler: Scheduler | None = None,
                chunk: int = CHUNK, fit: bool = False) -> MonteCarloResult:
    """``n`` samples at each (ramp_s, temperature_c); the same parts (draws) at every condition.
    ``fit=True`` measures each sample with the full ``measure_arrays`` (adds ring_hz, damping; slower).
    Samples that cannot be simulated are listed in ``failures`` (and counted as ``n_failed``)."""
    return run_samples(design, draws(n, seed), conditions=conditions, limits=limits, scheduler=scheduler,
                       chunk=chunk, fit=fit, seed=seed)
