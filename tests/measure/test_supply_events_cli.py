"""Enable-edge and brown-out captures through ingest, ``labtool measure`` and the campaign store.

Invented CSV exports (time, supply, enable, output columns; a 1.8 V supply, a 1.2 V output). The
figures are closed forms of the traces as in test_supply_events.py: a first-order output
V·(1 − exp(−t/τ)) reaches 90 % at τ·ln 10 and enters ±1 % at τ·ln 100 (solve the exponential).
"""

import json
import math
import sqlite3

import numpy as np
import pytest

from labtool.cli import main
from labtool.ingest import read_path
from labtool.measure import Limits, measure_capture_rows
from labtool.store import Campaign
from labtool.store.campaign import CATALOG_NAME
from tests.measure.test_supply_events import TAU, VDD, VREF, first_order_return, return_instant, trapezoid_dip

DT = 20e-9
T = np.arange(0.0, 200e-6, DT)
DIPS = [dict(start=40e-6, fall=1e-6, flat=10e-6, rise=1e-6, depth=1.0),
        dict(start=120e-6, fall=1e-6, flat=10e-6, rise=1e-6, depth=0.4)]


def write_csv(path, columns: dict) -> str:
    names = list(columns)
    lines = [",".join(names)] + [",".join(repr(float(columns[n][k])) for n in names) for k in range(T.size)]
    path.write_text("\n".join(lines) + "\n")
    return str(path)


def enable_export(tmp_path, name="en_p01.csv") -> str:
    enable = np.interp(T, [30e-6, 30.04e-6], [0.0, VDD])  # 50 % at 30.02 µs
    output = np.where(T < 32e-6, 0.0, first_order_return(T, 32e-6, 0.0))
    return write_csv(tmp_path / name, {"Time": T, "VDD": np.full_like(T, VDD), "EN": enable, "VREF": output})


def dip_export(tmp_path, name="dip_p01.csv") -> str:
    supply = np.minimum.reduce([trapezoid_dip(T, **d) for d in DIPS])
    output = np.full_like(T, VREF)
    t_ret = return_instant(**DIPS[0])
    output[(T >= DIPS[0]["start"] + 0.5e-6) & (T < t_ret)] = 0.0
    later = T >= t_ret
    output[later] = first_order_return(T[later], t_ret, 0.0)
    output[T >= DIPS[1]["start"] + 0.5e-6] = 0.0  # the second dip: no recovery
    return write_csv(tmp_path / name, {"Time": T, "VDD": supply, "EN": np.full_like(T, VDD), "VREF": output})


def test_a_csv_with_time_supply_enable_output_columns_imports_and_measures_from_the_enable(tmp_path):
    (cap,) = read_path(enable_export(tmp_path))
    assert {c.name: c.role for c in cap.channels} == {"VDD": "supply", "EN": "enable", "VREF": "output"}
    (r,) = measure_capture_rows(cap)
    assert r.delay_ref == "enable" and r.capture_kind == "enable" and r.verdict == "started"
    assert r.t_enable_s == pytest.approx(30.02e-6, abs=1e-12)
    assert r.delay_s == pytest.approx(32e-6 - 30.02e-6 + TAU * math.log(10), rel=1e-4)


def test_enable_column_picked_by_name_on_the_command_line(tmp_path, capsys):
    enable = np.interp(T, [30e-6, 30.04e-6], [0.0, VDD])
    output = np.where(T < 32e-6, 0.0, first_order_return(T, 32e-6, 0.0))
    path = write_csv(tmp_path / "generic.csv", {"Time": T, "CH1": np.full_like(T, VDD), "CH2": output,
                                                "CH3": enable})
    status = main(["measure", path, "--supply", "CH1", "--output", "CH2", "--enable", "CH3", "--json",
                   "--scheduler", "local:1"])
    assert status == 0
    (row,) = [json.loads(line) for line in capsys.readouterr().out.splitlines()]
    assert row["delay_ref"] == "enable" and row["t_enable_s"] == pytest.approx(30.02e-6, abs=1e-12)
    assert row["dip_index"] is None and row["recovery_s"] is None


def test_measure_json_gives_one_line_per_dip(tmp_path, capsys):
    status = main(["measure", dip_export(tmp_path), "--json", "--scheduler", "local:1"])
    assert status == 0
    rows = [json.loads(line) for line in capsys.readouterr().out.splitlines()]
    assert [(r["dip_index"], r["verdict"]) for r in rows] == [(0, "recovered"), (1, "no_recovery")]
    assert len({r["capture_id"] for r in rows}) == 1
    assert [r["dip_depth_v"] for r in rows] == pytest.approx([1.0, 0.4], abs=1e-9)
    assert rows[0]["recovery_s"] == pytest.approx(TAU * math.log(100), rel=1e-4)
    assert rows[1]["recovery_s"] is None
    status = main(["measure", dip_export(tmp_path), "--scheduler", "local:1"])  # the readable table
    table = capsys.readouterr().out
    assert status == 0 and "dip_depth_v" in table and "recovery_s" in table and "t_enable_s" not in table


def test_the_store_keeps_one_row_per_capture_and_dip_and_replaces_them_all(tmp_path, capsys):
    root = tmp_path / "camp"
    assert main(["ingest", dip_export(tmp_path), enable_export(tmp_path), "--into", str(root)]) == 0
    assert main(["measure", str(root), "--scheduler", "local:1"]) == 0
    assert "2 capture(s) measured" in capsys.readouterr().err
    with Campaign.open(root) as camp:
        table = camp.measurements()
        assert len(table) == 3
        dips = table[table["capture_kind"] == "dip"]
        assert list(dips["dip_index"]) == [0, 1] and dips["capture_id"].nunique() == 1
        assert list(dips["verdict"]) == ["recovered", "no_recovery"]
        assert table.loc[table["capture_kind"] == "enable", "dip_index"].isna().all()
        # saving fewer rows for a capture under the same limits leaves none of its old ones
        (cid,) = set(dips["capture_id"])
        camp.save_measurements([{"capture_id": cid, "verdict": "recovered", "dip_index": 0}],
                               limits_key=Limits().key(), limits_json=Limits().to_json())
        again = camp.measurements()
        assert len(again) == 2 and list(again.loc[again["capture_id"] == cid, "dip_index"]) == [0]


def test_a_version_1_catalog_is_migrated_with_its_measurements(tmp_path):
    root = tmp_path / "old"
    assert main(["ingest", enable_export(tmp_path), "--into", str(root)]) == 0
    assert main(["measure", str(root), "--scheduler", "local:1"]) == 0
    with sqlite3.connect(root / CATALOG_NAME) as conn:  # rebuild the table as version 1 had it
        conn.executescript("""
            CREATE TABLE m1 (capture_id TEXT NOT NULL REFERENCES captures (capture_id), limits_key TEXT NOT NULL,
                limits_json TEXT NOT NULL, measured_at TEXT NOT NULL, verdict TEXT NOT NULL,
                result_json TEXT NOT NULL, PRIMARY KEY (capture_id, limits_key));
            INSERT INTO m1 SELECT capture_id, limits_key, limits_json, measured_at, verdict, result_json
                FROM measurements;
            DROP TABLE measurements;
            ALTER TABLE m1 RENAME TO measurements;
            CREATE INDEX measurements_limits ON measurements (limits_key);
            UPDATE meta SET value = '1' WHERE key = 'schema_version';""")
    with Campaign.open(root) as camp:
        table = camp.measurements()
        assert list(table["verdict"]) == ["started"] and list(table["capture_kind"]) == ["enable"]
    with sqlite3.connect(root / CATALOG_NAME) as conn:
        assert conn.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone() == ("2",)
        assert conn.execute("SELECT row_index FROM measurements").fetchall() == [(0,)]


def test_roles_by_shape_a_steady_supply_an_enable_edge_and_an_output(tmp_path):
    # generic column names: the flat channel at the top level is the supply, the fast two-level edge the
    # enable, the channel that follows the output (scope noise of 1 mV on every channel)
    rng = np.random.default_rng(5)
    enable = np.interp(T, [30e-6, 30.04e-6], [0.0, VDD])
    output = np.where(T < 32e-6, 0.0, first_order_return(T, 32e-6, 0.0))
    noisy = {name: v + rng.normal(0.0, 1e-3, T.size) for name, v in
             (("CH1", output), ("CH2", np.full_like(T, VDD)), ("CH3", enable))}
    (cap,) = read_path(write_csv(tmp_path / "scope.csv", {"Time": T, **noisy}))
    assert {c.name: (c.role, c.role_source) for c in cap.channels} == {
        "CH1": ("output", "shape"), "CH2": ("supply", "shape"), "CH3": ("enable", "shape")}
    (r,) = measure_capture_rows(cap)
    assert r.delay_ref == "enable" and r.t_enable_s == pytest.approx(30.02e-6, abs=2e-9)


def test_roles_by_shape_of_a_brown_out_record(tmp_path):
    path = dip_export(tmp_path)
    text = open(path).read().replace("Time,VDD,EN,VREF", "Time,CH1,CH2,CH3", 1)
    (tmp_path / "generic_dip.csv").write_text(text)
    (cap,) = read_path(str(tmp_path / "generic_dip.csv"))
    assert {c.name: c.role for c in cap.channels}["CH1"] == "supply"
    assert {c.name: c.role for c in cap.channels}["CH3"] == "output"
    assert [r.verdict for r in measure_capture_rows(cap)] == ["recovered", "no_recovery"]


def test_lot_statistics_count_startups_only(tmp_path, capsys):
    # the dip capture's rows (one recovered, one no_recovery) are not startups: the lot counts the
    # enable-edge capture alone
    root = tmp_path / "camp"
    assert main(["ingest", dip_export(tmp_path), enable_export(tmp_path), "--into", str(root)]) == 0
    assert main(["measure", str(root), "--scheduler", "local:1"]) == 0
    capsys.readouterr()
    assert main(["lot", str(root), "--json"]) == 0
    rows = [json.loads(line) for line in capsys.readouterr().out.splitlines()]
    (group,) = [r for r in rows if r["row"] == "group"]
    assert group["n_captures"] == 1 and group["n_started"] == 1 and group["n_stuck_at_zero"] == 0
