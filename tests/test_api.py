"""The public Python API (``labtool.__all__``, docs/api.md): the names exist and are typed, ``import
labtool`` stays light, and the API gives the same rows as the commands on the demo files (sample_runs/,
an invented scenario; its README gives the figures checked here)."""

from __future__ import annotations

import inspect
import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import labtool
from labtool.cli import main
from labtool.errors import UsageError

SAMPLES = Path(__file__).resolve().parents[1] / "sample_runs"
DESIGN = SAMPLES / "design.toml"
LIMITS = {"max_delay_s": "100us"}  # the demo's limits (sample_runs/README.md: slow start against 100 µs)


def _json_lines(capsys) -> list[dict]:
    return [json.loads(line) for line in capsys.readouterr().out.splitlines() if line.startswith("{")]


def _plain(value):
    """A DataFrame cell as JSON has it: NaN → None, numpy scalars → Python."""
    if isinstance(value, float) and math.isnan(value):
        return None
    return value.item() if isinstance(value, np.generic) else value


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo campaign made through the API: every sample run ingested with the run sheet, measured."""
    root = tmp_path_factory.mktemp("api") / "camp"
    with labtool.open_campaign(root, create=True) as camp:
        report = camp.ingest(SAMPLES, manifest=SAMPLES / "manifest.csv")
        table = camp.measure(LIMITS)
    assert not report.failed and not table.attrs["failed"]
    return root, table


# -- the public surface ---------------------------------------------------------------------------------
def test_every_public_name_resolves_and_nothing_else_is_listed():
    assert labtool.__all__ == list(dict.fromkeys(labtool.__all__))
    for name in labtool.__all__:
        assert getattr(labtool, name) is not None, name
    assert set(labtool.__all__) <= set(dir(labtool))
    with pytest.raises(AttributeError):
        labtool.no_such_name  # noqa: B018
    # the functions of the walk-through are all listed
    assert {"read", "read_all", "measure", "open_campaign", "lot", "compare", "triage", "predict", "plot_delays",
            "plot_overlay", "plot_wafer_map", "plot_triage"} <= set(labtool.__all__)


def test_public_functions_have_type_hints():
    import labtool._api.files as files

    functions = [files.measure if name == "measure" else getattr(labtool, name) for name in labtool.__all__
                 if name != "__version__" and not inspect.isclass(getattr(labtool, name))]
    for fn in functions:
        sig = inspect.signature(fn)
        assert sig.return_annotation is not inspect.Signature.empty, fn.__name__
        untyped = [p.name for p in sig.parameters.values() if p.annotation is inspect.Parameter.empty
                   and p.kind not in (p.VAR_KEYWORD, p.VAR_POSITIONAL)]
        assert not untyped, (fn.__name__, untyped)
    assert (Path(labtool.__file__).parent / "py.typed").is_file()


def test_measure_is_callable_and_still_the_measurement_package():
    from labtool.measure.engine import measure_capture

    assert callable(labtool.measure) and labtool.measure.measure_capture is measure_capture


def test_import_labtool_loads_no_numerical_library():
    code = ("import sys, labtool; labtool.__version__; "
            "print(','.join(m for m in ('numpy', 'pandas', 'scipy', 'matplotlib', 'pyarrow') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == ""


# -- read and measure -----------------------------------------------------------------------------------
def test_read_gives_a_capture_whose_frame_carries_times_and_units():
    path = sorted((SAMPLES / "bench_csv").glob("*_10us.csv"))[0]
    capture = labtool.read(path)
    frame = capture.to_pandas()
    assert frame.index.name == "time_s" and np.array_equal(frame.index.to_numpy(), capture.times())
    assert list(frame.columns) == [c.name for c in capture.channels] and len(frame) == 1000  # README: 1000 samples
    assert frame.attrs["units"] == {c.name: c.unit for c in capture.channels}
    assert set(frame.attrs["roles"].values()) >= {"supply", "output"}
    result = labtool.measure(capture, LIMITS)
    # sample_runs/README.md (invented demo): 11–38 µs on 10 µs ramps, settled at 1.17–1.22 V
    assert result.verdict == "started" and 11e-6 <= result.delay_s <= 38e-6
    assert 1.17 <= result.vout_final_v <= 1.22
    assert result.to_dict()["delay_s"] == result.delay_s
    roles = {role: name for name, role in frame.attrs["roles"].items()}
    arrays = (frame.index.to_numpy(), frame[roles["supply"]].to_numpy(), frame[roles["output"]].to_numpy())
    assert labtool.measure(arrays, LIMITS) == result  # the array form measures the same samples the same way
    assert labtool.measure(path, LIMITS) == result


def test_a_workbook_of_several_captures_needs_a_locator():
    book = next((SAMPLES / "workbooks").glob("*.xlsx"))
    captures = labtool.read_all(book)
    assert len(captures) > 1
    with pytest.raises(UsageError, match=f"holds {len(captures)} captures"):
        labtool.read(book)
    one = labtool.read(book, locator=captures[1].provenance.locator)
    assert one.capture_id == captures[1].capture_id


def test_measure_batch_rows_equal_the_cli_json(capsys):
    files = [str(p) for p in sorted(SAMPLES.rglob("*")) if p.is_file() and p.parent != SAMPLES]
    assert main(["measure", *files, "--json", "--max-delay", "100us", "--scheduler", "local:1"]) == 0
    cli = _json_lines(capsys)
    api = labtool.measure(files, LIMITS)
    assert list(api.columns) == list(cli[0]) and len(api) == len(cli) == 36  # README: 36 captures
    assert [{k: _plain(v) for k, v in row.items()} for row in api.to_dict("records")] == cli


def test_measure_batch_goes_on_past_a_bad_file(tmp_path):
    bad = tmp_path / "empty.csv"
    bad.write_bytes(b"")
    good = sorted((SAMPLES / "bench_csv").glob("*.csv"))[0]
    with pytest.warns(UserWarning, match="empty file"):
        table = labtool.measure([bad, good])
    assert len(table) == 1 and table.attrs["failed"] == [f"{bad}: empty file"]


# -- campaigns and statistics ---------------------------------------------------------------------------
def test_campaign_tables_and_waveforms(demo):
    root, table = demo
    # sample_runs/README.md: 36 captures, 32 started and one of each failure kind
    assert len(table) == 36 and table["capture_id"].is_unique
    assert table["verdict"].value_counts().to_dict() == {"started": 32, "stuck_at_zero": 1, "slow_start": 1,
                                                         "ringing": 1, "recollapse": 1}
    assert {"lot", "wafer", "part", "temperature_c", "ramp_s", "board"} <= set(table.columns)
    with labtool.open_campaign(root) as camp:
        assert len(camp.captures()) == 36
        assert len(camp.measurements()) == 36 and camp.measurements(LIMITS)["capture_id"].tolist() == \
            table["capture_id"].tolist()
        wave = camp.waveform(table["capture_id"].iloc[0])
        assert len(wave) == 1000 and wave.attrs["capture_id"] == table["capture_id"].iloc[0]
        again = camp.ingest(SAMPLES, manifest=SAMPLES / "manifest.csv")
    assert not again.added and len(again.skipped) == 36  # README: ingesting again adds nothing


def test_lot_rows_equal_the_cli_json(demo, capsys):
    root, table = demo
    assert main(["lot", str(root), "--by", "lot", "--spec-max-delay", "100us", "--json"]) == 0
    cli = _json_lines(capsys)
    result = labtool.lot(root, by="lot", spec_max_delay_s="100us")
    assert result.rows() == cli and result.to_dict()["rows"] == cli
    assert labtool.lot(table, by=["lot"], spec_max_delay_s=100e-6).rows() == cli  # the table gives the same
    frame = result.to_frame()
    assert len(frame) == len(cli) and set(frame["row"]) == {"group", "setup"}
    groups = frame[frame["row"] == "group"].set_index("lot")
    stuck_lot = table.loc[table["verdict"] == "stuck_at_zero", "lot"].iloc[0]
    assert groups.loc[stuck_lot, "n_parts_stuck"] == 1 and groups["n_captures"].sum() == 36


def test_compare_rows_equal_the_cli_json(demo, capsys):
    root, _ = demo
    assert main(["compare", str(root), "--model", str(DESIGN), "--samples", "8", "--seed", "3", "--json",
                 "--scheduler", "local:1"]) == 0
    cli = _json_lines(capsys)
    result = labtool.compare(root, model=DESIGN, samples=8, seed=3)
    assert result.rows() == cli
    assert len(result.predictions) == 8 * 9  # 8 simulated parts at each of the 3 × 3 measured set-ups
    assert len(result.to_frame()) == len(cli)
    with pytest.raises(UsageError, match="model= or predictions="):
        labtool.compare(root)


def test_triage_equals_the_cli_json(demo, capsys):
    root, table = demo
    stuck = table[table["verdict"] == "stuck_at_zero"].iloc[0]
    part = f"{stuck['lot']}/{stuck['part']}"
    assert main(["triage", str(root), "--part", part, "--json"]) == 0
    (cli,) = _json_lines(capsys)
    report = labtool.triage(root, part)
    assert json.loads(json.dumps(report.to_dict())) == cli
    assert report.verdicts == {"started": 8, "stuck_at_zero": 1}  # README: one stuck start of nine
    assert report.to_frame()["name"].tolist() == [h["name"] for h in cli["hypotheses"]]


def test_predict_equals_the_cli_json(capsys):
    assert main(["predict", str(DESIGN), "--json", "--montecarlo", "6", "--seed", "4", "--ramp", "10us"]) == 0
    cli = json.loads(capsys.readouterr().out.strip().splitlines()[-1])
    prediction = labtool.predict(DESIGN, samples=6, seed=4, ramp_s="10us")
    assert prediction.to_dict() == cli
    assert len(prediction.samples) == 6 and prediction.to_frame()["montecarlo.n"].iloc[0] == cli["montecarlo"]["n"]
    assert labtool.measure(prediction.capture).delay_s == cli["transient"]["delay_s"]


def test_figures_are_matplotlib_figures(demo):
    from matplotlib.figure import Figure

    root, table = demo
    stuck = table[table["verdict"] == "stuck_at_zero"].iloc[0]
    lot_rows = table[table["lot"] == stuck["lot"]]
    with labtool.open_campaign(root) as camp:
        figures = [labtool.plot_delays(lot_rows), labtool.plot_wafer_map(camp),
                   labtool.plot_overlay(camp, lot_rows[lot_rows["ramp_s"] == stuck["ramp_s"]]),
                   labtool.plot_triage(camp, f"{stuck['lot']}/{stuck['part']}")]
    assert all(isinstance(f, Figure) for f in figures)
    histogram = figures[0]
    assert histogram.get_suptitle().startswith(f"lot {stuck['lot']}")
    assert len(histogram.axes) == 9 + 1  # 3 ramps × 3 temperatures, and the failures panel
