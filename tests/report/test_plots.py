"""Report figures: each drawn from known data and checked for what it shows."""

import numpy as np
import pandas as pd
import pytest
from matplotlib.collections import PathCollection, QuadMesh
from matplotlib.patches import Rectangle, StepPatch
from matplotlib.text import Text

from labtool.report import plots, style
from labtool.report.traces import envelope
from tests.report.tables import measurement_rows, ramp_trace


def _by_gid(fig, kind, gid):
    return [a for ax in fig.axes for a in ax.findobj(kind) if a.get_gid() == gid]


def _texts(fig):
    return [t.get_text() for t in fig.findobj(Text) if t.get_text()]


# -- histogram --------------------------------------------------------------------------------
def test_histogram_bars_equal_the_counts_and_the_verdict_counts_are_beside_it():
    delays = [1e-6, 1e-6, 2e-6, 3e-6, 3e-6, 3e-6, 5e-6]
    specs = [("A", "W03", 0, i, "started", d) for i, d in enumerate(delays)]
    specs += [("A", "W03", 1, 0, "stuck_at_zero", None), ("A", "W03", 1, 1, "stuck_at_zero", None),
              ("A", "W03", 1, 2, "slow_start", 5e-6)]
    table = measurement_rows(specs)
    edges = np.array([0.0, 1.5, 2.5, 3.5, 6.0]) * 1e-6
    plot = plots.delay_histogram(table, title="A", bins=edges, spec_max_delay_s=4e-6,
                                 predicted_delays_s=[1e-6, 2e-6, 2e-6, 3e-6])
    fig = plot.figure
    # Counted by hand: [1, 1] in the first bin, [2], [3, 3, 3], [5, 5] (one of them the slow start).
    bars = sorted(_by_gid(fig, Rectangle, "measured"), key=lambda r: r.get_x())
    assert [r.get_height() for r in bars] == [2, 1, 3, 2]
    assert [round(r.get_x(), 9) for r in bars] == [0.0, 1.5, 2.5, 3.5]  # drawn in µs
    assert plot.data["panels"][0]["time_unit"] == "µs" and len(plot.data["panels"]) == 1
    # The model's 4 samples scaled to the 8 measured delays: bins hold 1, 2, 1, 0 samples → ×2.
    (stairs,) = _by_gid(fig, StepPatch, "predicted")
    np.testing.assert_allclose(stairs.get_data().values, [2.0, 4.0, 2.0, 0.0])
    (spec,) = [ln for ax in fig.axes for ln in ax.get_lines() if ln.get_gid() == "spec"]
    assert spec.get_xdata()[0] == pytest.approx(4.0)
    # Failure verdicts beside it, each a bar whose length is its count, labelled in text too.
    assert _by_gid(fig, Rectangle, "stuck_at_zero")[0].get_width() == 2
    assert _by_gid(fig, Rectangle, "slow_start")[0].get_width() == 1
    assert _by_gid(fig, Rectangle, "ringing")[0].get_width() == 0
    assert _by_gid(fig, Rectangle, "started") == []  # starts are the title, not a bar
    texts = _texts(fig)
    assert "stuck at zero  2" in texts and "slow start  1" in texts
    assert any("7 of 10 started" in t for t in texts)


def test_histogram_default_bins_cover_every_delay_and_count_them_all():
    rng = np.random.default_rng(3)
    d = rng.lognormal(np.log(12e-6), 0.3, 500)
    table = measurement_rows([("A", None, None, None, "started", float(x)) for x in d])
    plot = plots.delay_histogram(table, title="A")
    heights = [r.get_height() for r in _by_gid(plot.figure, Rectangle, "measured")]
    assert sum(heights) == 500
    # numpy.histogram as the reference counter over the same edges.
    np.testing.assert_array_equal(heights, np.histogram(d, plot.data["panels"][0]["edges_s"])[0])


def test_histogram_has_one_panel_per_setup_with_that_setups_prediction():
    # Delays at a slow ramp are negative (reference up before the supply is valid): own panel, and a
    # re-collapse's crossing is no startup delay (labtool.stats.setups).
    table = measurement_rows([("A", None, None, None, "started", d) for d in (10e-6, 11e-6, 11e-6)]
                             + [("A", None, None, None, "started", d) for d in (-1e-3, -1.1e-3)]
                             + [("A", None, None, None, "recollapse", -5e-3), ("A", None, None, None, "started", 9e-6)])
    table.loc[3:5, "ramp_s"] = 0.1
    table.loc[6, "temperature_c"] = -40.0
    plot = plots.delay_histogram(table, title="A", bins=4,
                                 predicted_delays_s={(1e-4, 25.0, None): [10e-6, 12e-6], (0.1, 25.0, None): [-1.05e-3] * 4})
    panels = plot.data["panels"]
    assert [tuple(p["setup"].values()) for p in panels] == [(1e-4, -40.0, None), (1e-4, 25.0, None), (0.1, 25.0, None)]
    assert [int(p["counts"].sum()) for p in panels] == [1, 3, 2]
    assert panels[1]["time_unit"] == "µs" and panels[2]["time_unit"] == "ms"
    assert panels[0]["predicted_counts"] is None  # no prediction at that set-up
    np.testing.assert_allclose(panels[2]["predicted_counts"].sum(), 2.0)  # scaled to that panel's 2 captures
    titles = [ax.get_title(loc="left") for ax in plot.figure.axes]
    assert "ramp 100 µs · 25 °C" in titles and "ramp 100 ms · 25 °C" in titles and "ramp 100 µs · -40 °C" in titles
    assert sum(r.get_height() for r in _by_gid(plot.figure, Rectangle, "measured")) == 6
    assert "ready before supply valid" in _texts(plot.figure)  # the negative panel says what it means
    spans = _by_gid(plot.figure, Rectangle, "before_supply_valid")
    assert len(spans) == 1 and spans[0].axes.get_title(loc="left") == "ramp 100 ms · 25 °C"


def test_histogram_shows_a_far_spec_in_the_legend_not_on_the_axis():
    table = measurement_rows([("A", None, None, None, "started", d) for d in (10e-6, 11e-6, 12e-6)])
    plot = plots.delay_histogram(table, title="A", spec_max_delay_s=1e-3)
    assert not [ln for ax in plot.figure.axes for ln in ax.get_lines() if ln.get_gid() == "spec"]
    assert plot.data["panels"][0]["edges_s"][-1] < 20e-6
    legend = plot.figure.axes[0].get_legend_handles_labels()[1]
    assert "spec max 1 ms (off scale)" in legend


# -- waveform overlay -------------------------------------------------------------------------
def test_overlay_draws_every_trace_faint_one_bold_median_and_the_event_markers():
    delays = [10e-6, 12e-6, 14e-6, 16e-6, 18e-6]
    traces = [ramp_trace(f"c{i}", d) for i, d in enumerate(delays)]
    plot = plots.waveform_overlay(traces, title="A · 20 µs ramp")
    fig = plot.figure
    faint = [ln for ax in fig.axes for ln in ax.get_lines() if ln.get_gid() == "trace"]
    bold = [ln for ax in fig.axes for ln in ax.get_lines() if ln.get_gid() == "median"]
    assert len(faint) == 5 and len(bold) == 1
    assert all(ln.get_alpha() < 0.5 for ln in faint) and bold[0].get_linewidth() > 2 * faint[0].get_linewidth()
    # 90 % crossings: one marker per trace at (delay, 0.9 · level), coloured as a start.
    (cross,) = _by_gid(fig, PathCollection, "cross90")
    np.testing.assert_allclose(cross.get_offsets(), [[d * 1e6, 0.9 * 1.2] for d in delays], rtol=1e-9, atol=1e-9)
    (supply,) = _by_gid(fig, PathCollection, "t_supply")
    np.testing.assert_allclose(supply.get_offsets(), [[0.0, 1.8]] * 5)
    (settle,) = _by_gid(fig, PathCollection, "settle")
    np.testing.assert_allclose(settle.get_offsets()[:, 0], [(d + 5e-6) * 1e6 for d in delays])
    # The bold line is the pointwise median: the middle trace here (numpy.median as reference).
    env = plot.data["envelope"]
    stack = np.vstack([np.interp(env.t_s, tr.t_s, tr.output_v) for tr in traces])
    np.testing.assert_allclose(env.median_v, np.median(stack, axis=0))
    np.testing.assert_allclose(bold[0].get_ydata(), env.median_v)


def test_envelope_percentiles_match_numpy_and_skip_traces_outside_their_record():
    traces = [ramp_trace(f"c{i}", None, offset_v=0.1 * i) for i in range(5)]
    env = envelope(traces, n_points=50)
    ref = np.percentile([0.0, 0.1, 0.2, 0.3, 0.4], [5, 50, 95])  # numpy.percentile, linear method
    np.testing.assert_allclose(env.low_v, ref[0])
    np.testing.assert_allclose(env.median_v, ref[1])
    np.testing.assert_allclose(env.high_v, ref[2])
    short = ramp_trace("short", None, offset_v=10.0)
    short = type(short)("short", short.t_s[:100], short.output_v[:100], short.supply_v[:100], verdict="stuck_at_zero")
    env = envelope([*traces, short], n_points=200)
    late = env.t_s > short.t_s[-1]
    np.testing.assert_allclose(env.median_v[late], 0.2)  # the short record does not count after its end
    assert env.median_v[0] == pytest.approx(np.median([0.0, 0.1, 0.2, 0.3, 0.4, 10.0]))  # six cover the start


def test_overlay_cuts_the_settled_tail_only_when_every_trace_settled():
    settled = [ramp_trace("a", 10e-6), ramp_trace("b", 20e-6)]  # records −40…100 µs, last settled at 25 µs
    assert plots.waveform_overlay(settled, title="t").data["window_s"] == pytest.approx((-40e-6, 25e-6 + 0.3 * 65e-6))
    mixed = [*settled, ramp_trace("c", None, verdict="stuck_at_zero")]
    assert plots.waveform_overlay(mixed, title="t").data["window_s"] == pytest.approx((-40e-6, 100e-6))


def test_stuck_trace_has_no_crossing_or_settling_marker():
    plot = plots.waveform_overlay([ramp_trace("a", 10e-6), ramp_trace("b", None, verdict="stuck_at_zero")],
                                  title="mixed")
    (cross,) = _by_gid(plot.figure, PathCollection, "cross90")
    assert len(cross.get_offsets()) == 1
    assert len(_by_gid(plot.figure, PathCollection, "t_supply")[0].get_offsets()) == 2


# -- wafer map --------------------------------------------------------------------------------
def test_wafer_map_places_each_die_at_its_coordinates():
    specs = [("A", "W07", 0, 0, "started", 10e-6), ("A", "W07", 0, 0, "started", 14e-6),
             ("A", "W07", 2, 1, "started", 20e-6), ("A", "W07", -1, 2, "started", 30e-6),
             ("A", "W07", -1, 2, "stuck_at_zero", None), ("A", "W07", 1, -1, "ringing", 16e-6)]
    plot = plots.wafer_map(measurement_rows(specs), title="A")
    fig = plot.figure
    (delay_mesh,) = _by_gid(fig, QuadMesh, "delay_map")
    grid = delay_mesh.get_array()  # rows are die_y from −1, columns die_x from −1
    assert grid.shape == (4, 4)
    expected = {(0, 0): 12.0, (2, 1): 20.0, (-1, 2): 30.0, (1, -1): 16.0}  # medians in µs
    for (x, y), v in expected.items():
        assert grid[y + 1, x + 1] == pytest.approx(v)
    assert int(np.ma.count(grid)) == 4  # every other position is empty
    # Verdict map: the most severe verdict per die, drawn as its marker at the die's position.
    stuck = _by_gid(fig, PathCollection, "verdict:stuck_at_zero")[0].get_offsets()
    started = _by_gid(fig, PathCollection, "verdict:started")[0].get_offsets()
    ringing = _by_gid(fig, PathCollection, "verdict:ringing")[0].get_offsets()
    np.testing.assert_array_equal(stuck, [[-1, 2]])
    np.testing.assert_array_equal(sorted(map(tuple, started)), [(0, 0), (2, 1)])
    np.testing.assert_array_equal(ringing, [[1, -1]])
    (vmesh,) = _by_gid(fig, QuadMesh, "verdict_map")
    codes = list(style.VERDICT_STYLES)
    assert vmesh.get_array()[2 + 1, -1 + 1] == codes.index("stuck_at_zero")
    dies = plot.data["dies"].set_index(["die_x", "die_y"])
    assert dies.loc[(0, 0), "n"] == 2 and dies.loc[(-1, 2), "verdict"] == "stuck_at_zero"


def test_wafer_map_draws_one_row_per_wafer_and_says_when_no_die_is_known():
    specs = [("A", "W03", 0, 0, "started", 1e-5), ("A", "W11", 0, 0, "started", 2e-5)]
    plot = plots.wafer_map(measurement_rows(specs), title="A")
    assert len(_by_gid(plot.figure, QuadMesh, "delay_map")) == 2
    empty = plots.wafer_map(measurement_rows([("A", None, None, None, "started", 1e-5)]), title="A")
    assert "no die positions recorded" in _texts(empty.figure)


# -- QQ ---------------------------------------------------------------------------------------
def test_qq_equal_sizes_pairs_the_sorted_samples():
    # NIST/SEMATECH e-Handbook §1.3.3.24: with equal sizes the QQ plot is sorted vs sorted.
    measured = np.array([5.0, 1.0, 3.0, 2.0, 4.0]) * 1e-6
    predicted = np.array([2.5, 0.5, 1.5, 4.5, 3.5]) * 1e-6
    plot = plots.qq_plot([("ramp 10 µs", measured, predicted), ("ramp 1 ms", measured * 3, predicted * 3)], title="qq")
    first, second = _by_gid(plot.figure, PathCollection, "qq")  # one series per set-up, never pooled
    np.testing.assert_allclose(first.get_offsets(), np.column_stack([np.sort(predicted), np.sort(measured)]) * 1e6)
    np.testing.assert_allclose(second.get_offsets(), 3 * first.get_offsets())
    np.testing.assert_allclose(plot.data["series"][0]["probabilities"], [0.1, 0.3, 0.5, 0.7, 0.9])
    assert plot.figure.axes[0].get_legend_handles_labels()[1][1:] == ["ramp 10 µs", "ramp 1 ms"]


def test_qq_unequal_sizes_interpolates_the_larger_sample():
    # e-Handbook §1.3.3.24 (from memory): the larger sample's quantiles at the smaller's plotting
    # positions; numpy.quantile (linear) is the reference for those quantiles.
    measured = np.array([3.0, 1.0, 2.0]) * 1e-6
    predicted = np.linspace(0.0, 10.0, 101) * 1e-6
    probs, qm, qp = plots.qq_points(measured, predicted)
    np.testing.assert_allclose(probs, [1 / 6, 0.5, 5 / 6])
    np.testing.assert_allclose(qm, [1e-6, 2e-6, 3e-6])
    np.testing.assert_allclose(qp, np.quantile(predicted, probs))
    np.testing.assert_allclose(qp, [10 / 6 * 1e-6, 5e-6, 50 / 6 * 1e-6])  # uniform grid: q(p) = 10 µs · p


# -- delay versus conditions ------------------------------------------------------------------
def test_condition_spread_is_per_setup_and_counts_stuck_captures():
    rows = []
    for ramp, temp, ds in ((1e-5, 25.0, [10e-6, 11e-6, 12e-6, 30e-6]), (1e-3, 25.0, [20e-6, 22e-6]),
                           (1e-5, -40.0, [40e-6, 44e-6])):
        rows += [{"lot": "A", "ramp_s": ramp, "temperature_c": temp, "verdict": "started", "delay_s": d} for d in ds]
    rows.append({"lot": "A", "ramp_s": 1e-3, "temperature_c": -40.0, "verdict": "stuck_at_zero", "delay_s": None})
    rows.append({"lot": "A", "ramp_s": 1e-3, "temperature_c": -40.0, "verdict": "recollapse", "delay_s": -9e-4})
    table = pd.DataFrame(rows)
    plot = plots.delay_vs_conditions(table, title="A")
    # Against ramp time one series per temperature: every point one set-up (ramp × temperature).
    ramp = plot.data["ramp_s"].set_index(["temperature_c", "ramp_s"])
    fast = np.array([10e-6, 11e-6, 12e-6, 30e-6])
    assert ramp.loc[(25.0, 1e-5), "delay_median_s"] == pytest.approx(np.median(fast))
    assert ramp.loc[(25.0, 1e-5), "delay_p95_s"] == pytest.approx(np.percentile(fast, 95))  # numpy reference
    assert ramp.loc[(-40.0, 1e-5), "delay_median_s"] == pytest.approx(42e-6)  # not pooled with 25 °C
    assert ramp.loc[(-40.0, 1e-3), "n"] == 0 and ramp.loc[(-40.0, 1e-3), "n_stuck"] == 1  # re-collapse: no delay
    temp = plot.data["temperature_c"].set_index(["ramp_s", "temperature_c"])
    assert temp.loc[(1e-3, -40.0), "n"] == 0 and temp.loc[(1e-3, -40.0), "n_stuck"] == 1
    assert "1 stuck" in _texts(plot.figure)
    points = _by_gid(plot.figure, PathCollection, "capture")
    assert sum(len(p.get_offsets()) for p in points) == 2 * 8  # every counted capture, in both panels
    labels = plot.figure.axes[1].get_legend_handles_labels()[1]
    assert labels == ["ramp 10 µs: median, p05–p95", "ramp 1 ms: median, p05–p95"]
    assert plot.figure.axes[0].get_legend_handles_labels()[1] == ["-40 °C: median, p05–p95", "25 °C: median, p05–p95"]
    assert plot.data["symlog_linthresh"] is None  # 10–44 µs: a linear axis


def test_delays_spanning_decades_and_signs_get_a_symmetric_log_axis():
    assert plots.symlog_threshold(np.array([10.0, 12.0, 20.0])) is None
    values = np.array([-11000.0, -100.0, 10.0, 12.0, 17.0])
    assert plots.symlog_threshold(values) == pytest.approx(np.percentile(np.abs(values), 10))
    table = pd.DataFrame({"lot": "A", "ramp_s": [1e-5, 1e-5, 0.1], "temperature_c": 25.0, "verdict": "started",
                          "delay_s": [12e-6, 15e-6, -11e-3]})
    plot = plots.delay_vs_conditions(table, title="A")
    assert plot.figure.axes[0].get_yscale() == "symlog"


# -- triage sheet -----------------------------------------------------------------------------
def test_triage_sheet_shows_the_part_against_its_lot_and_the_ranked_hypotheses():
    lot = [ramp_trace(f"l{i}", d) for i, d in enumerate([10e-6, 11e-6, 12e-6])]
    part = [ramp_trace("p1", 30e-6, verdict="slow_start"), ramp_trace("p2", None, verdict="stuck_at_zero")]
    hypotheses = [{"name": "weak_startup_slow", "posterior": 0.8, "where": "at or below -40 °C",
                   "evidence": {"delay_ratio": 2.5}, "bench_check": "raise the ramp time and repeat"},
                  {"name": "bistable_intermittent", "posterior": 0.19, "where": "at every set-up",
                   "evidence": ["1 of 2 cycles stuck"], "bench_check": ""},
                  {"name": "never_shown", "posterior": 0.005, "where": "", "evidence": {}, "bench_check": ""}]
    captures = pd.DataFrame({"temperature_c": [25.0, -40.0], "ramp_s": [1e-4, 1e-3], "repeat": [1, 1],
                             "verdict": ["slow_start", "stuck_at_zero"], "delay_s": [30e-6, None]})
    panels = [plots.TriagePanel("ramp 100 µs", part[:1], envelope(lot)), plots.TriagePanel("ramp 1 ms", part[1:])]
    plot = plots.triage_sheet(panels, hypotheses, captures, part_label="A/p07", lot_label="A",
                              conclusion="weak_startup_slow (posterior 0.80)", next_experiment="Power-cycle 5 times")
    fig = plot.figure
    assert tuple(fig.get_size_inches()) == pytest.approx(style.FIGSIZE_A4)
    for ax, n_part, n_median in zip(fig.axes[:2], (1, 1), (1, 0)):  # each set-up its own panel
        assert len([ln for ln in ax.get_lines() if ln.get_gid() == "part_trace"]) == n_part
        assert len([ln for ln in ax.get_lines() if ln.get_gid() == "median"]) == n_median
    assert [ax.get_title(loc="left") for ax in fig.axes[:2]] == ["ramp 100 µs", "ramp 1 ms"]
    texts = _texts(fig)
    assert "1. weak_startup_slow — at or below -40 °C" in texts and "2. bistable_intermittent — at every set-up" in texts
    assert any("delay_ratio = 2.5" in t and "bench check: raise the ramp time" in t for t in texts)
    assert "conclusion: weak_startup_slow (posterior 0.80)" in texts and "next experiment: Power-cycle 5 times" in texts
    (table,) = [t for ax in fig.axes for t in ax.tables]
    cells = {cell.get_text().get_text() for cell in table.get_celld().values()}
    assert {"slow start", "stuck at zero", "30 µs", "—", "-40 °C", "1 ms"} <= cells
    bars = sorted(_by_gid(fig, Rectangle, "posterior"), key=lambda r: -r.get_width())
    assert len(bars) == 2 and bars[0].get_width() == pytest.approx(0.08 * 0.8)  # as long as the posterior
    assert bars[1].get_width() == pytest.approx(0.08 * 0.19)
    assert not any("never_shown" in t for t in texts)  # below 1 % it is left to the HTML report


def test_plots_render_to_png():
    plot = plots.qq_plot([("set-up", [1e-6, 2e-6], [1e-6, 2e-6])], title="png")
    assert plot.png()[:8] == b"\x89PNG\r\n\x1a\n"
