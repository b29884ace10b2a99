"""Report figures, drawn headless (matplotlib's Agg canvas; pyplot and its global state are never used).

Every function takes plain tables or traces and returns a :class:`Plot`: the Figure and the numbers
it drew, so a caller (or a test) can check the content, not only that a picture exists.
"""

from __future__ import annotations

import io
import math
import textwrap
import threading
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import BoundaryNorm, ListedColormap
from matplotlib.figure import Figure
from matplotlib.patches import Circle, Patch, Rectangle
from matplotlib import rc_context
from matplotlib.lines import Line2D

from labtool.display import format_cell
from labtool.report import style
from labtool.stats.setups import (SETUP_KEYS, counted, delay_mask, quantiles, setup_keys, setup_tuple,
                                  split_setups)
from labtool.stats.table import STUCK
from labtool.units import format_si
from labtool.report.traces import Envelope, Trace, envelope

_TIME_SCALES = ((1e-9, "ns"), (1e-6, "µs"), (1e-3, "ms"), (1.0, "s"))
# Matplotlib's rcParams are process-global: figures are styled and drawn one at a time, so threads
# (a Dask worker runs several) never see each other's temporary settings.
_DRAWING = threading.RLock()


@contextmanager
def _styled():
    with _DRAWING, rc_context(style.RC):
        yield


@dataclass(frozen=True)
class Plot:
    """A drawn figure, the file stem it is saved under, and the data it shows."""

    name: str
    figure: Figure = field(repr=False)
    data: Mapping[str, Any] = field(default_factory=dict, repr=False)

    def png(self) -> bytes:
        buf = io.BytesIO()
        with _styled():
            self.figure.savefig(buf, format="png", dpi=style.DPI)
        return buf.getvalue()


def time_scale(values_s) -> tuple[float, str]:
    """The SI time unit that keeps the typical |value| between 1 and 1000: (factor in s, unit name)."""
    arr = np.abs(np.asarray([v for v in np.ravel(values_s) if v is not None], dtype=float))
    arr = arr[np.isfinite(arr) & (arr > 0)]
    if arr.size == 0:
        return 1e-6, "µs"
    typical = float(np.median(arr))
    chosen = _TIME_SCALES[0]
    for factor, unit in _TIME_SCALES:
        if typical >= factor:
            chosen = (factor, unit)
    return chosen


def _figure(size=style.FIGSIZE_WIDE, **kwargs) -> Figure:
    with _styled():
        fig = Figure(figsize=size, dpi=style.DPI, layout="constrained", **kwargs)
    FigureCanvasAgg(fig)
    return fig


def _finite_values(series) -> np.ndarray:
    arr = pd.to_numeric(pd.Series(series, dtype=object), errors="coerce").to_numpy(dtype=float)
    return arr[np.isfinite(arr)]


def _verdict_counts(verdicts) -> dict[str, int]:
    counts = pd.Series(list(verdicts), dtype=object).value_counts()
    keys = list(style.VERDICT_STYLES) + sorted(set(counts.index) - set(style.VERDICT_STYLES))
    return {k: int(counts.get(k, 0)) for k in keys}


# ---------------------------------------------------------------------------------------------
def _bin_edges(measured: np.ndarray, pooled: np.ndarray, bins) -> np.ndarray:
    """Explicit edges as given; else ``bins`` equal bins over ``pooled`` (measured, predicted, spec),
    by default as wide as numpy's "auto" rule makes them for the measured delays (6 to 60 bins)."""
    if np.ndim(bins) == 1:
        return np.asarray(bins, dtype=float)
    if not pooled.size:
        return np.linspace(0.0, 1e-6, 7)
    lo, hi = float(pooled.min()), float(pooled.max())
    hi = hi if hi > lo else lo + 1e-9
    if not bins:
        auto = np.histogram_bin_edges(measured if measured.size else pooled, bins="auto")
        width = float(auto[1] - auto[0]) if auto.size > 1 and auto[1] > auto[0] else (hi - lo) / 6
        bins = int(np.clip(math.ceil((hi - lo) / width), 6, 60))
    return np.linspace(lo, hi, bins + 1)


MAX_SETUP_PANELS = 12  # histogram panels per group; more set-ups are spread over this many
PANEL_COLUMNS = 3


def setup_title(setup: Mapping[str, Any]) -> str:
    """``ramp 10 µs · -40 °C · 1.8 V``: a set-up as the report names it (unknown keys left out)."""
    words = {"ramp_s": lambda v: f"ramp {format_si(float(v), 's')}", "temperature_c": lambda v: f"{float(v):g} °C",
             "vdd_v": lambda v: f"supply {format_si(float(v), 'V')}"}
    return " · ".join(words[k](v) for k, v in setup.items() if k in words and v is not None) or "set-up unknown"


def _setup_facets(table: pd.DataFrame, max_panels: int) -> tuple[list[tuple[dict, pd.DataFrame]], int]:
    """(set-up, rows) per set-up, at most ``max_panels`` spread over the sorted set-ups; and the total."""
    facets = list(split_setups(table))
    if len(facets) > max_panels:
        picked = np.linspace(0, len(facets) - 1, max_panels).round().astype(int)
        return [facets[i] for i in picked], len(facets)
    return facets, len(facets)


def delay_histogram(table: pd.DataFrame, *, title: str, spec_max_delay_s: float | None = None,
                    predicted_delays_s=None, bins: int | Sequence[float] | None = None,
                    max_panels: int = MAX_SETUP_PANELS) -> Plot:
    """Histogram of the group's startup delays, one panel per set-up (ramp × temperature × supply:
    delays at different set-ups differ by orders of magnitude, and are negative when the output is
    ready before the supply is valid), with the spec limit, the model's predicted distribution
    (scaled to the panel's count) and, in the last panel, the count of every failure verdict. Only
    captures whose output came up and stayed are counted (labtool.stats.setups).

    ``predicted_delays_s``: one array (every panel) or a mapping set-up tuple (ramp_s, temperature_c,
    vdd_v, as :func:`labtool.stats.setups.setup_tuple` gives it) → array.
    ``bins``: a count or explicit edges in seconds; by default numpy's "auto" rule, 6 to 60 bins.
    """
    with _styled():
        facets, total = _setup_facets(table, max_panels)
        cells = len(facets) + 1
        ncols = min(PANEL_COLUMNS, cells)
        nrows = math.ceil(cells / ncols)
        fig = _figure((4.2 * ncols, 0.7 + 3.0 * nrows))
        grid = fig.add_gridspec(nrows, ncols)
        panels = []
        for i, (setup, rows) in enumerate(facets):
            key = setup_tuple(setup)
            predicted = predicted_delays_s.get(key) if isinstance(predicted_delays_s, Mapping) else predicted_delays_s
            ax = fig.add_subplot(grid[i // ncols, i % ncols])
            panels.append({"setup": setup, **_histogram_panel(ax, rows, setup_title(setup), spec_max_delay_s,
                                                              predicted, bins)})
        side = fig.add_subplot(grid[len(facets) // ncols, len(facets) % ncols])
        verdict_counts = _verdict_counts(table.get("verdict", []))
        _verdict_bars(side, verdict_counts)
        shown = f" ({len(facets)} of {total} set-ups shown)" if total > len(facets) else ""
        fig.suptitle(f"{title}: startup delay by set-up{shown}", x=0.01, ha="left", fontsize=11)
    return Plot("delay_histogram", fig, {"panels": panels, "verdict_counts": verdict_counts,
                                         "spec_max_delay_s": spec_max_delay_s, "n_setups": total})


def _histogram_panel(ax, rows: pd.DataFrame, title: str, spec_max_delay_s, predicted_delays_s, bins) -> dict:
    measured = counted(rows)
    predicted = _finite_values([] if predicted_delays_s is None else predicted_delays_s)
    data = np.concatenate([measured, predicted])
    # the spec widens the axis only when it is near the delays; far beyond them the legend names it
    spec_shown = spec_max_delay_s is not None and (not data.size or spec_max_delay_s <= 2 * np.abs(data).max())
    pooled = np.concatenate([data, [spec_max_delay_s] if spec_shown else []])
    edges = _bin_edges(measured, pooled, bins)
    counts, _ = np.histogram(measured, edges)
    predicted_counts = None
    if predicted.size:
        predicted_counts = np.histogram(predicted, edges)[0] / predicted.size * max(measured.size, 1)
    factor, unit = time_scale(data)
    if edges[0] < 0:  # a negative delay: the output was up before the supply was valid
        ax.axvspan(edges[0] / factor, min(0.0, edges[-1]) / factor, color=style.INKS.band, alpha=0.35, linewidth=0,
                   gid="before_supply_valid", label="ready before supply valid")
    ax.bar(edges[:-1] / factor, counts, width=np.diff(edges) / factor, align="edge", color=style.INKS.bars,
           edgecolor=style.INKS.ink, linewidth=0.6, label="measured", gid="measured")
    if predicted_counts is not None:
        ax.stairs(predicted_counts, edges / factor, color=style.INKS.ink, linewidth=2.0, linestyle="--",
                  label=f"model ({predicted.size}, scaled)", gid="predicted")
    if spec_shown:
        ax.axvline(spec_max_delay_s / factor, color=style.INKS.accent, linestyle="-.", linewidth=1.6, gid="spec",
                   label=f"spec max {format_si(spec_max_delay_s, 's', 4)}")
    elif spec_max_delay_s is not None:
        ax.plot([], [], " ", label=f"spec max {format_si(spec_max_delay_s, 's', 4)} (off scale)")
    ax.set_xlabel(f"delay from supply valid [{unit}]")
    ax.set_ylabel("captures")
    ax.yaxis.get_major_locator().set_params(integer=True)
    ax.set_title(title, fontsize=9.5, loc="left")
    if measured.size:
        p05, p50, p95 = np.percentile(measured, [5, 50, 95])
        lines = [f"n = {measured.size}", f"median {format_si(p50, 's')}",
                 f"p05–p95 {format_si(p05, 's')} to {format_si(p95, 's')}"]
        supply_at = counted(rows, "vsupply_at_valid_v")
        if p50 < 0 and supply_at.size:
            lines.append(f"output valid at supply {format_si(float(np.median(supply_at)), 'V')}")
        ax.text(0.99, 0.97, "\n".join(lines), transform=ax.transAxes, ha="right", va="top", fontsize=7.5,
                color=style.INKS.slate, bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.8, "pad": 1.5})
    else:
        ax.text(0.5, 0.5, "no capture has a startup delay", transform=ax.transAxes, ha="center",
                color=style.INKS.slate)
    ax.legend(loc="best", fontsize=7)
    return {"edges_s": edges, "counts": counts, "predicted_counts": predicted_counts, "time_unit": unit}


def _verdict_bars(ax, counts: Mapping[str, int]) -> None:
    """Horizontal bars, one per failure verdict (colour, hatch and the label with its count), on
    their own scale so a few failures stay visible next to hundreds of starts."""
    names = [v for v in counts if v != "started"]
    total = sum(counts.values())
    y = np.arange(len(names))[::-1]
    for yi, name in zip(y, names):
        vs = style.verdict_style(name)
        ax.barh(yi, counts[name], height=0.45, color=vs.colour, hatch=vs.hatch, edgecolor=vs.edge,
                linewidth=0.6, gid=name)
        ax.text(0, yi + 0.27, f"{vs.label}  {counts[name]}", va="bottom", ha="left", fontsize=7.5,
                color=style.INKS.ink if counts[name] else style.INKS.rule)
    ax.set_yticks([])
    ax.set_ylim(-0.4, len(names) - 0.1)
    ax.set_xlim(0, max(1, max((counts[n] for n in names), default=1)) * 1.15)
    ax.xaxis.get_major_locator().set_params(integer=True)
    ax.set_xlabel("captures")
    ax.set_title(f"failures · {counts.get('started', 0)} of {total} started", fontsize=9)
    ax.grid(axis="y", visible=False)
    ax.spines["left"].set_visible(False)


# ---------------------------------------------------------------------------------------------
def waveform_overlay(traces: Sequence[Trace], *, title: str, note: str = "") -> Plot:
    """All traces faint, the median envelope bold over its p05–p95 band, and markers at supply
    valid, the 90 % crossing and settling. Supply on the upper panel, reference output below."""
    with _styled():
        env = envelope(traces)
        times = np.concatenate([tr.t_s for tr in traces]) if traces else np.array([])
        span = (float(times.min()), float(times.max())) if times.size else (0.0, 1e-6)
        factor, unit = time_scale([max(abs(span[0]), abs(span[1]))])
        fig = _figure(style.FIGSIZE_TALL)
        grid = fig.add_gridspec(2, 1, height_ratios=(1.0, 2.4))
        ax_s = fig.add_subplot(grid[0])
        ax_o = fig.add_subplot(grid[1], sharex=ax_s)
        faint = dict(color=style.INKS.slate, alpha=0.28 if len(traces) < 50 else 0.14, linewidth=0.7)
        for tr in traces:
            if tr.supply_v is not None:
                ax_s.plot(tr.t_s / factor, tr.supply_v, gid="supply_trace", **faint)
            ax_o.plot(tr.t_s / factor, tr.output_v, gid="trace", **faint)
        if env is not None:
            _draw_envelope(ax_o, env, factor)
        _draw_events(ax_s, ax_o, traces, factor)
        ax_s.set_ylabel("supply [V]")
        ax_o.set_ylabel("reference output [V]")
        ax_o.set_xlabel(f"time from supply valid [{unit}]")
        ax_s.set_title(title)
        ax_s.tick_params(labelbottom=False)
        if note:
            ax_s.text(1.0, 1.02, note, transform=ax_s.transAxes, ha="right", va="bottom", fontsize=8,
                      color=style.INKS.slate)
        _event_legend(ax_o, [tr.verdict for tr in traces if "cross90" in tr.events()])
        window = overlay_window(traces, span)
        ax_o.set_xlim(window[0] / factor, window[1] / factor)
    return Plot("waveform_overlay", fig, {"n_traces": len(traces), "envelope": env, "time_unit": unit,
                                          "window_s": window})


def overlay_window(traces: Sequence[Trace], span: tuple[float, float]) -> tuple[float, float]:
    """The time window to show: the whole record, except that when every trace settled the long
    settled tail is cut 30 % of the way past the last settling instant."""
    settles = [tr.events().get("settle") for tr in traces]
    if not traces or any(e is None for e in settles):
        return span
    last = max(e[0] for e in settles)
    return span[0], min(span[1], last + 0.3 * (last - span[0]))


def _draw_envelope(ax, env: Envelope, factor: float, label: str = "median") -> None:
    t = env.t_s / factor
    ax.fill_between(t, env.low_v, env.high_v, color=style.INKS.band, alpha=0.7, linewidth=0,
                    label="p05–p95", gid="band")
    ax.plot(t, env.median_v, color=style.INKS.ink, linewidth=2.4, label=f"{label} (n = {env.n})", gid="median")


def _draw_events(ax_s, ax_o, traces: Sequence[Trace], factor: float) -> None:
    points: dict[str, list[tuple[float, float, str]]] = {k: [] for k in style.EVENT_MARKERS}
    for tr in traces:
        for name, (t, v) in tr.events().items():
            points[name].append((t / factor, v, tr.verdict))
    for name, pts in points.items():
        if not pts:
            continue
        marker, _ = style.EVENT_MARKERS[name]
        x, y, verdicts = zip(*pts)
        ax = ax_s if name == "t_supply" else ax_o
        face = [style.verdict_style(v).colour for v in verdicts] if name == "cross90" else "white"
        ax.scatter(x, y, marker=marker, s=22, c=face, edgecolors=style.INKS.ink, linewidths=0.6, zorder=4,
                   gid=name)


def _event_legend(ax, verdicts) -> None:
    handles = [Line2D([], [], color=style.INKS.ink, linewidth=2.4, label="median"),
               Patch(color=style.INKS.band, label="p05–p95")]
    for name, (marker, label) in style.EVENT_MARKERS.items():
        handles.append(Line2D([], [], linestyle="", marker=marker, markerfacecolor="white",
                              markeredgecolor=style.INKS.ink, label=label))
    for v in style.verdict_order(verdicts):
        vs = style.verdict_style(v)
        handles.append(Line2D([], [], linestyle="", marker="o", markerfacecolor=vs.colour,
                              markeredgecolor=style.INKS.ink, label=f"crossing: {vs.label}"))
    ax.legend(handles=handles, loc="lower right", ncols=2, fontsize=7)


# ---------------------------------------------------------------------------------------------
GROUP_STYLES = (("#1F2A36", "o"), ("#2E5E7E", "s"), ("#8C6D46", "^"), ("#5E7F4E", "D"), ("#7B5C8E", "v"),
                ("#9A4E3A", "P"))


def condition_spread(table: pd.DataFrame, condition: str, series: str | None = None) -> pd.DataFrame:
    """Per set-up, keyed by (series, condition value, the other set-up keys): n with a counted delay,
    median, p05 and p95 of those delays (labtool.stats.setups), and the stuck count. Never pooled
    across set-ups: every row is one ramp × temperature × supply."""
    others = [k for k in setup_keys(table) if k not in (series, condition)]
    cols = [c for c in (series, condition) if c] + others
    rows = []
    for key, sub in table.dropna(subset=[condition]).groupby(cols, sort=True, dropna=False):
        key = key if isinstance(key, tuple) else (key,)
        q = quantiles(counted(sub))
        stuck = sub["verdict"] == STUCK if "verdict" in sub.columns else sub.get("stuck", pd.Series(False, sub.index))
        rows.append({**dict(zip(cols, key)), "n": q.n, "delay_median_s": q.median, "delay_p05_s": q.p05,
                     "delay_p95_s": q.p95, "n_stuck": int(np.asarray(stuck, bool).sum())})
    frame = pd.DataFrame(rows, columns=[*cols, "n", "delay_median_s", "delay_p05_s", "delay_p95_s", "n_stuck"])
    return frame.astype({c: float for c in ("delay_median_s", "delay_p05_s", "delay_p95_s")})


def delay_vs_conditions(table: pd.DataFrame, *, title: str, predicted: pd.DataFrame | None = None) -> Plot:
    """Startup delay against supply ramp time (log axis, one series per temperature) and against
    temperature (one series per ramp time): every counted capture as a small point, per set-up the
    median with its p05–p95 bar, the model's median dashed. Delays spanning decades or both signs get a
    symmetric-log axis."""
    with _styled():
        delays = counted(table)
        factor, unit = time_scale(delays)
        fig = _figure()
        axes = fig.subplots(1, 2, sharey=True)
        spreads = {}
        panels = ((axes[0], "ramp_s", "temperature_c", "supply ramp time [s]"),
                  (axes[1], "temperature_c", "ramp_s", "temperature [°C]"))
        for ax, condition, series, label in panels:
            series = series if series in table.columns and table[series].notna().any() else None
            if condition not in table.columns or table[condition].isna().all():
                ax.text(0.5, 0.5, f"no {condition} recorded", transform=ax.transAxes, ha="center")
                spreads[condition] = condition_spread(table.assign(**{condition: np.nan}), condition)
                continue
            spreads[condition] = condition_spread(table, condition, series)
            styles = _series_styles(spreads[condition], series)
            _draw_condition_panel(ax, table, spreads[condition], condition, series, styles, factor,
                                  log=condition == "ramp_s")
            if predicted is not None and condition in predicted.columns and len(predicted):
                _draw_model(ax, predicted, condition, series if series in predicted.columns else None, styles, factor)
            ax.set_xlabel(label)
            ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.16), ncols=2, fontsize=7.5)
        linear_range = symlog_threshold(delays / factor)
        if linear_range is not None:
            axes[0].set_yscale("symlog", linthresh=linear_range)
        axes[0].set_ylabel(f"delay from supply valid [{unit}]" + (" (symmetric log)" if linear_range else ""))
        if delays.size and delays.min() < 0:
            axes[0].axhline(0.0, color=style.INKS.rule, linewidth=0.8, linestyle=":")
            axes[0].text(0.01, 0.02, "below 0: ready before supply valid", transform=axes[0].transAxes, fontsize=7,
                         color=style.INKS.slate)
        fig.suptitle(title, x=0.01, ha="left", fontsize=11)
    return Plot("delay_vs_conditions", fig, {"ramp_s": spreads["ramp_s"], "temperature_c": spreads["temperature_c"],
                                             "time_unit": unit, "symlog_linthresh": linear_range})


def symlog_threshold(values: np.ndarray) -> float | None:
    """The linear half-width for a symmetric-log axis when values span more than two decades
    (including both signs); None when a linear axis shows them well."""
    mags = np.abs(values[np.isfinite(values) & (values != 0)])
    if mags.size < 2 or mags.max() / mags.min() <= 100:
        return None
    return float(np.percentile(mags, 10))


def _series_label(column: str | None, value) -> str:
    if column is None:
        return "all"
    if column in SETUP_KEYS and value is not None and not (isinstance(value, float) and math.isnan(value)):
        return setup_title({column: value})
    return str(value)


def _series_styles(spread: pd.DataFrame, series: str | None) -> dict:
    """Colour and marker per series key, in the order the keys appear."""
    keys = list(dict.fromkeys(spread[series])) if series else [None]
    return {k: GROUP_STYLES[i % len(GROUP_STYLES)] for i, k in enumerate(keys)}


def _draw_model(ax, predicted: pd.DataFrame, condition: str, series: str | None, styles: dict, factor: float) -> None:
    model = condition_spread(predicted, condition, series)
    keys = list(dict.fromkeys(model[series])) if series else [None]
    for si, key in enumerate(keys):
        part = model if key is None else model[model[series] == key]
        colour = styles.get(key, GROUP_STYLES[0])[0]
        ax.plot(part[condition], part["delay_median_s"] / factor, color=colour, linestyle="--", marker="x",
                linewidth=1.1, label="model median" if si == 0 else None, gid="model")


def _draw_condition_panel(ax, table, spread, condition, series, styles, factor, *, log: bool) -> None:
    keys = list(styles)
    values = np.sort(spread[condition].unique())
    # Series side by side around each condition value: multiplicative offsets on a log axis.
    step = 0.14 if log else 0.9 * (np.min(np.diff(values)) if values.size > 1 else 10.0) / max(len(keys), 1) / 2
    rng = np.random.default_rng(0)  # fixed jitter: the same table always draws the same picture
    stuck = style.VERDICT_STYLES["stuck_at_zero"]
    for si, key in enumerate(keys):
        colour, marker = styles[key]
        offset = (si - (len(keys) - 1) / 2) * step
        sub = table if key is None else table[table[series] == key]
        sub = sub[delay_mask(sub)]
        x = pd.to_numeric(sub[condition], errors="coerce").to_numpy(float)
        y = pd.to_numeric(sub["delay_s"], errors="coerce").to_numpy(float) / factor
        jitter = rng.uniform(-0.35, 0.35, x.size) * step
        xs = x * 10 ** (offset + jitter) if log else x + offset + jitter
        ax.scatter(xs, y, s=8, color=colour, alpha=0.35, marker=marker, linewidths=0, gid="capture")
        ss = spread if key is None else spread[spread[series] == key]
        cx = ss[condition].to_numpy(float)
        cx = cx * 10 ** offset if log else cx + offset
        med = ss["delay_median_s"].to_numpy(float) / factor
        err = np.vstack([med - ss["delay_p05_s"].to_numpy(float) / factor,
                         ss["delay_p95_s"].to_numpy(float) / factor - med])
        ax.errorbar(cx, med, yerr=err, fmt=marker, color=colour, markersize=6, markeredgecolor="white", capsize=3,
                    linewidth=1.4, label=f"{_series_label(series, key)}: median, p05–p95", gid="median")
        for xi, n_stuck in zip(cx, ss["n_stuck"]):
            if n_stuck:  # stuck captures have no delay: counted along the top edge instead
                ax.annotate(f"{n_stuck} stuck", (xi, 1.0 - 0.045 * si), xycoords=("data", "axes fraction"),
                            ha="center", va="top", fontsize=7, color=stuck.colour, gid="stuck_count")
    if log:
        ax.set_xscale("log")


# ---------------------------------------------------------------------------------------------
def map_setup(table: pd.DataFrame) -> dict | None:
    """The set-up a die map shows delays at: the one with the most counted delays (the first of equals)."""
    facets = list(split_setups(table))
    if not facets:
        return None
    return max(facets, key=lambda f: int(delay_mask(f[1]).sum()))[0]


def die_table(table: pd.DataFrame, setup: Mapping[str, Any] | None = None) -> pd.DataFrame:
    """One row per (wafer, die_x, die_y): captures, the median counted delay at ``setup`` (delays of
    different set-ups are never pooled) and the most severe verdict over every set-up."""
    rank = {v: i for i, v in enumerate(style.VERDICT_STYLES)}
    located = table.dropna(subset=["die_x", "die_y"]).copy()
    if "wafer" not in located.columns:
        located["wafer"] = None
    located["wafer"] = located["wafer"].fillna("—")
    at = np.ones(len(located), bool)
    for k, v in (setup or {}).items():
        if k in located.columns:
            at &= located[k].isna().to_numpy() if v is None else (located[k] == v).to_numpy()
    located["_at"] = at
    rows = []
    for (wafer, x, y), sub in located.groupby(["wafer", "die_x", "die_y"], sort=True):
        d = counted(sub[sub["_at"]])
        worst = min(sub["verdict"], key=lambda v: rank.get(v, len(rank)))
        rows.append({"wafer": wafer, "die_x": int(x), "die_y": int(y), "n": len(sub),
                     "delay_median_s": float(np.median(d)) if d.size else np.nan, "verdict": worst})
    return pd.DataFrame(rows, columns=["wafer", "die_x", "die_y", "n", "delay_median_s", "verdict"])


def wafer_map(table: pd.DataFrame, *, title: str, max_wafers: int = 6) -> Plot:
    """Per wafer, two maps by die position: the median startup delay at one set-up (:func:`map_setup`,
    named in the title), and the most severe verdict (colour, a marker and the legend's text, so it
    reads without colour too)."""
    with _styled():
        setup = map_setup(table)
        dies = die_table(table, setup)
        wafers = list(dict.fromkeys(dies["wafer"]))[:max_wafers]
        factor, unit = time_scale(dies["delay_median_s"])
        fig = _figure((9.0, 3.9 * max(1, len(wafers))))
        if not wafers:
            ax = fig.add_subplot()
            ax.text(0.5, 0.5, "no die positions recorded", transform=ax.transAxes, ha="center")
            ax.set_axis_off()
            return Plot("wafer_map", fig, {"dies": dies, "time_unit": unit, "setup": setup})
        fig.get_layout_engine().set(wspace=0.12)
        axes = np.atleast_2d(fig.subplots(len(wafers), 2))
        delays = dies["delay_median_s"].to_numpy(float) / factor
        finite = delays[np.isfinite(delays)]
        vmin, vmax = (finite.min(), finite.max()) if finite.size else (0.0, 1.0)
        codes = list(style.VERDICT_STYLES)
        verdict_cmap = ListedColormap([style.VERDICT_STYLES[v].colour for v in codes])
        verdict_norm = BoundaryNorm(np.arange(len(codes) + 1) - 0.5, len(codes))
        mesh = None
        for row, wafer in zip(axes, wafers):
            wd = dies[dies["wafer"] == wafer]
            x0, y0 = wd["die_x"].min(), wd["die_y"].min()
            shape = (wd["die_y"].max() - y0 + 1, wd["die_x"].max() - x0 + 1)
            xe = np.arange(x0, x0 + shape[1] + 1) - 0.5
            ye = np.arange(y0, y0 + shape[0] + 1) - 0.5
            delay_grid = np.full(shape, np.nan)
            verdict_grid = np.full(shape, np.nan)
            for r in wd.itertuples():
                delay_grid[r.die_y - y0, r.die_x - x0] = r.delay_median_s / factor
                verdict_grid[r.die_y - y0, r.die_x - x0] = codes.index(r.verdict) if r.verdict in codes else np.nan
            mesh = row[0].pcolormesh(xe, ye, np.ma.masked_invalid(delay_grid), cmap=style.SEQUENTIAL_MAP,
                                     vmin=vmin, vmax=vmax if vmax > vmin else vmin + 1e-12, edgecolors="white",
                                     linewidth=0.8, gid="delay_map")
            row[1].pcolormesh(xe, ye, np.ma.masked_invalid(verdict_grid), cmap=verdict_cmap, norm=verdict_norm,
                              edgecolors="white", linewidth=0.8, alpha=0.55, gid="verdict_map")
            for v in style.verdict_order(wd["verdict"]):
                vd = wd[wd["verdict"] == v]
                vs = style.verdict_style(v)
                row[1].scatter(vd["die_x"], vd["die_y"], marker=vs.marker, s=38, color=vs.colour,
                               edgecolors=style.INKS.ink, linewidths=0.6, label=vs.label, gid=f"verdict:{v}")
            for ax, what in ((row[0], f"median delay at {setup_title(setup or {})}"), (row[1], "most severe verdict")):
                _wafer_frame(ax, xe, ye)
                ax.set_title(f"{title} · wafer {wafer} · {what}", fontsize=9.5)
            row[1].legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=7.5)
            fig.colorbar(mesh, ax=row[0], label=f"median delay [{unit}]", shrink=0.75)
    return Plot("wafer_map", fig, {"dies": dies, "time_unit": unit, "setup": setup})


def _wafer_frame(ax, xe, ye) -> None:
    cx, cy = (xe[0] + xe[-1]) / 2, (ye[0] + ye[-1]) / 2
    radius = math.hypot(xe[-1] - cx, ye[-1] - cy) + 0.3
    ax.add_patch(Circle((cx, cy), radius, fill=False, edgecolor=style.INKS.rule, linewidth=1.2, linestyle=":"))
    ax.set_xlim(cx - radius - 0.5, cx + radius + 0.5)
    ax.set_ylim(cy - radius - 0.5, cy + radius + 0.5)
    ax.set_aspect("equal")
    ax.set_xlabel("die x")
    ax.set_ylabel("die y")
    ax.grid(False)


# ---------------------------------------------------------------------------------------------
def qq_points(measured_s, predicted_s) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Two-sample quantile–quantile points (NIST/SEMATECH e-Handbook §1.3.3.24): the smaller sample
    sorted, against the larger sample's quantiles at the same plotting positions (i − 0.5)/n.
    Equal sizes give sorted against sorted. Returns (probabilities, measured, predicted)."""
    a = np.sort(_finite_values(measured_s))
    b = np.sort(_finite_values(predicted_s))
    n = min(a.size, b.size)
    if n == 0:
        empty = np.array([])
        return empty, empty, empty
    probs = (np.arange(1, n + 1) - 0.5) / n
    if a.size == b.size:
        return probs, a, b
    if a.size < b.size:
        return probs, a, np.quantile(b, probs)
    return probs, np.quantile(a, probs), b


def qq_plot(pairs: Sequence[tuple[str, Any, Any]], *, title: str) -> Plot:
    """Quantiles of measured against predicted delays, one series per set-up: ``pairs`` is
    (set-up label, measured delays, predicted delays); quantiles are paired within a set-up only."""
    with _styled():
        series = []
        for label, measured_s, predicted_s in pairs:
            probs, qm, qp = qq_points(measured_s, predicted_s)
            if probs.size:
                series.append({"label": label, "probabilities": probs, "measured_s": qm, "predicted_s": qp})
        every = np.concatenate([np.concatenate([s["measured_s"], s["predicted_s"]]) for s in series]) \
            if series else np.array([])
        factor, unit = time_scale(every)
        fig = _figure((6.4, 5.2))
        ax = fig.add_subplot()
        if series:
            lo, hi = every.min() / factor, every.max() / factor
            pad = 0.05 * (hi - lo or 1.0)
            ax.plot([lo - pad, hi + pad], [lo - pad, hi + pad], color=style.INKS.rule, linestyle="--",
                    linewidth=1.0, label="measured = predicted", gid="identity")
            for i, s in enumerate(series):
                colour, marker = GROUP_STYLES[i % len(GROUP_STYLES)]
                ax.scatter(s["predicted_s"] / factor, s["measured_s"] / factor, s=18, color=colour, marker=marker,
                           edgecolors="white", linewidths=0.4, label=s["label"], gid="qq")
            linear_range = symlog_threshold(every / factor)
            if linear_range is not None:  # set-ups whose delays differ by decades: keep each visible
                ax.set_xscale("symlog", linthresh=linear_range)
                ax.set_yscale("symlog", linthresh=linear_range)
            else:
                ax.set_aspect("equal", adjustable="datalim")
            ax.legend(loc="upper left", fontsize=6.5)
        else:
            ax.text(0.5, 0.5, "needs measured and predicted delays", transform=ax.transAxes, ha="center")
        ax.set_xlabel(f"predicted delay from supply valid [{unit}]")
        ax.set_ylabel(f"measured delay from supply valid [{unit}]")
        ax.set_title(title)
    return Plot("qq", fig, {"series": series, "time_unit": unit})


# ---------------------------------------------------------------------------------------------
def hypothesis_fields(h) -> dict[str, Any]:
    """name, title, posterior, where, evidence, bench_check of a ranked hypothesis (an object or a mapping)."""
    get = h.get if isinstance(h, Mapping) else lambda k, d=None: getattr(h, k, d)
    return {k: get(k) for k in ("name", "title", "posterior", "where", "evidence", "bench_check")}


def evidence_text(evidence) -> str:
    if evidence is None:
        return ""
    if isinstance(evidence, Mapping):
        return "; ".join(f"{k} = {_short(v)}" for k, v in evidence.items())
    if isinstance(evidence, (list, tuple)):
        return "; ".join(map(str, evidence))
    return str(evidence)


def _short(v) -> str:
    if isinstance(v, float):
        return f"{v:.4g}"
    if isinstance(v, Mapping):
        return "{" + ", ".join(f"{k}: {_short(x)}" for k, x in v.items()) + "}"
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_short(x) for x in v) + "]"
    return str(v)


@dataclass(frozen=True)
class TriagePanel:
    """One panel of a triage sheet: the part's traces at one set-up against its lot's envelope there."""

    title: str
    part: Sequence[Trace]
    lot: Envelope | None = None


def triage_sheet(panels: Sequence[TriagePanel], hypotheses: Sequence, captures: pd.DataFrame, *,
                 part_label: str, lot_label: str = "lot", conclusion: str = "", next_experiment: str = "") -> Plot:
    """One A4 page for a returned part: its traces against its lot's envelope (a panel per set-up,
    e.g. per ramp time, at most three), its captures with verdicts, the conclusion and the next
    experiment, and the hypotheses ranked by posterior probability with their evidence and bench check."""
    with _styled():
        fig = _figure(style.FIGSIZE_A4)
        n_rows = min(len(captures), _MAX_TABLE_ROWS)
        grid = fig.add_gridspec(3, 1, height_ratios=(1.25, 0.3 + 0.075 * n_rows, 1.9))
        shown = list(panels)[:3] or [TriagePanel("no waveforms", ())]
        top = grid[0].subgridspec(1, len(shown))
        axes = [fig.add_subplot(top[0, i]) for i in range(len(shown))]
        for ax, panel in zip(axes, shown):
            _triage_panel(ax, panel, lot_label)
        axes[0].set_ylabel("reference output [V]")
        verdicts = [tr.verdict for p in shown for tr in p.part]
        handles = [Line2D([], [], color=style.INKS.ink, linewidth=2.4, label=f"{lot_label} median"),
                   Patch(color=style.INKS.band, label=f"{lot_label} p05–p95")]
        for v in style.verdict_order(verdicts):
            vs = style.verdict_style(v)
            handles.append(Line2D([], [], color=vs.colour, marker=vs.marker, markeredgecolor=style.INKS.ink,
                                  label=f"{part_label}: {vs.label}"))
        axes[-1].legend(handles=handles, loc="center right", fontsize=7)

        tab = fig.add_subplot(grid[1])
        tab.set_axis_off()
        _captures_table(tab, captures)

        hyp = fig.add_subplot(grid[2])
        hyp.set_axis_off()
        rows = [hypothesis_fields(h) for h in hypotheses]
        _hypotheses_block(hyp, rows, conclusion, next_experiment)
        fig.suptitle(f"Triage sheet · returned part {part_label} against {lot_label}", x=0.02, ha="left")
    return Plot("triage", fig, {"n_traces": len(verdicts), "panels": [p.title for p in shown], "hypotheses": rows,
                                "captures": captures})


def _triage_panel(ax, panel: TriagePanel, lot_label: str) -> None:
    spans = [tr.t_s for tr in panel.part] + ([panel.lot.t_s] if panel.lot is not None else [])
    factor, unit = time_scale([np.max(np.abs(s)) for s in spans if s.size] or [1e-6])
    if panel.lot is not None:
        _draw_envelope(ax, panel.lot, factor, label=f"{lot_label} median")
    for tr in panel.part:
        vs = style.verdict_style(tr.verdict)
        ax.plot(tr.t_s / factor, tr.output_v, color=vs.colour, linewidth=1.3, gid="part_trace")
        ev = tr.events().get("cross90")
        if ev:
            ax.plot(ev[0] / factor, ev[1], marker=vs.marker, color=vs.colour, markeredgecolor=style.INKS.ink)
    if not panel.part:
        ax.text(0.5, 0.5, "no waveforms available for this part", transform=ax.transAxes, ha="center",
                color=style.INKS.slate)
    ax.set_xlabel(f"time from supply valid [{unit}]")
    ax.set_title(panel.title, fontsize=9.5)


_CAPTURE_COLUMNS = (("temperature_c", "temperature"), ("ramp_s", "ramp time"), ("repeat", "repeat"),
                    ("verdict", "verdict"), ("delay_s", "startup delay"), ("settle_s", "settling"))


def _cell(column: str, value) -> str:
    """A triage-table cell: a verdict's label, else the value in its column's unit (labtool.display)."""
    if column == "verdict" and str(value) in style.VERDICT_STYLES:
        return style.VERDICT_STYLES[str(value)].label
    if column == "repeat" and isinstance(value, float) and value.is_integer():
        value = int(value)
    return format_cell(column, value, digits=3)


_MAX_TABLE_ROWS = 14


def _captures_table(ax, captures: pd.DataFrame, max_rows: int = _MAX_TABLE_ROWS) -> None:
    cols = [c for c in _CAPTURE_COLUMNS if c[0] in captures.columns]
    shown = captures.head(max_rows)
    cells = [[_cell(c, row[c]) for c, _ in cols] for _, row in shown.iterrows()]
    ax.set_title(f"Captures of this part ({len(captures)}{', first ' + str(max_rows) if len(captures) > max_rows else ''})",
                 fontsize=10)
    if not cells:
        ax.text(0.0, 0.5, "no captures", fontsize=9)
        return
    table = ax.table(cellText=cells, colLabels=[h for _, h in cols], loc="upper center", cellLoc="center")
    table.auto_set_font_size(False)
    table.set_fontsize(7.5)
    table.scale(1.0, 1.15)
    vcol = [c for c, _ in cols].index("verdict") if any(c == "verdict" for c, _ in cols) else None
    for (r, c), cell in table.get_celld().items():
        cell.set_edgecolor(style.INKS.grid)
        if r == 0:
            cell.set_facecolor(style.INKS.band)
            cell.set_text_props(weight="bold")
        elif c == vcol:
            vs = style.verdict_style(str(shown.iloc[r - 1]["verdict"]))
            cell.set_facecolor(vs.colour + "40")  # the colour at 25 % opacity; the text names it


MIN_SHOWN_POSTERIOR = 0.01  # hypotheses below it are left to the HTML report


def _hypotheses_block(ax, rows: Sequence[Mapping], conclusion: str = "", next_experiment: str = "",
                      max_rows: int = 5) -> None:
    """The conclusion and next experiment, then the hypotheses with a posterior of at least 1 %, most
    likely first: a bar as long as the posterior, the name and where, evidence and bench check."""
    ax.set_title("Hypotheses by posterior probability", fontsize=10)
    line = 0.029  # one 7.5 pt line (1.25 spacing), in axes fraction of this panel
    y = 0.97
    for label, text in (("conclusion", conclusion), ("next experiment", next_experiment)):
        if text:
            wrapped = textwrap.fill(f"{label}: {text}", 118)
            ax.text(0.0, y, wrapped, transform=ax.transAxes, fontsize=8, va="top", weight="bold" if label ==
                    "conclusion" else "normal", color=style.INKS.ink, linespacing=1.25, gid=label.replace(" ", "_"))
            y -= 1.1 * line * (wrapped.count("\n") + 1) + 0.4 * line
    shown = [r for r in rows if float(r["posterior"] or 0.0) >= MIN_SHOWN_POSTERIOR][:max_rows]
    for rank, r in enumerate(shown, start=1):
        posterior = float(r["posterior"])
        body = "evidence: " + evidence_text(r["evidence"])
        if r["bench_check"]:
            body += "\nbench check: " + str(r["bench_check"])
        wrapped = "\n".join(textwrap.fill(part, 108) for part in body.splitlines())
        height = 1.6 * line + 1.08 * line * (wrapped.count("\n") + 1)
        if y - height < 0 and rank > 1:
            ax.text(0.0, max(y, 0.0), f"… {len(shown) - rank + 1} more in the HTML report", transform=ax.transAxes,
                    fontsize=7.5, va="top", color=style.INKS.slate)
            break
        ax.add_patch(Rectangle((0.0, y - 0.022), 0.08 * posterior, 0.018, transform=ax.transAxes,
                               color=style.INKS.accent, alpha=0.85, gid="posterior"))
        ax.text(0.09, y, f"{posterior:.2f}", transform=ax.transAxes, fontsize=8, va="top", color=style.INKS.slate)
        where = f" — {r['where']}" if r.get("where") else ""
        title = textwrap.shorten(f"{rank}. {r['name']}{where}", 92, placeholder=" …")
        ax.text(0.14, y, title, transform=ax.transAxes, fontsize=9.5, weight="bold", va="top")
        ax.text(0.155, y - 1.3 * line, wrapped, transform=ax.transAxes, fontsize=7.5, va="top", color=style.INKS.ink,
                linespacing=1.25)
        y -= height + 0.6 * line
