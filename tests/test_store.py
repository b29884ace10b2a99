"""Campaign store: round trips, idempotence, versions, verification."""

import dataclasses

import numpy as np
import pytest

from labtool.capture import Conditions, TimeBase
from labtool.errors import StoreError
from labtool.store import Campaign
from tests.builders import make_capture


def _ramp(n=1000, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(n) * 1e-6
    return np.clip(t / 2e-4, 0, 1) * 1.8, 1.2 * (1 - np.exp(-t / 5e-5)) + rng.normal(0, 1e-3, n)


def test_round_trip_returns_the_written_arrays(tmp_path):
    vdd, vref = _ramp()
    cap = make_capture(vdd, vref, 1e-6, t0_s=-1e-4,
                       conditions=Conditions(lot="L1", part="p7", temperature_c=-40.0, tags={"board": "b2"}))
    with Campaign.open(tmp_path / "c", create=True) as camp:
        res = camp.add_capture(cap)
        assert res.status == "added" and res.version == 1
        back = camp.load_capture(res.capture_id)
        table = camp.captures()
    assert back.capture_id == cap.capture_id
    np.testing.assert_array_equal(back.channel("supply").values, vdd)
    np.testing.assert_array_equal(back.channel("output").values, vref)
    np.testing.assert_array_equal(back.times(), cap.times())
    assert back.conditions == cap.conditions
    assert table.loc[0, "board"] == "b2" and table.loc[0, "temperature_c"] == -40.0


def test_explicit_times_and_clip_flags_survive(tmp_path):
    vdd, vref = _ramp(50)
    cap = make_capture(vdd, vref, 1e-6)
    times = np.cumsum(np.linspace(1e-6, 2e-6, 50))
    clipped = np.zeros(50, bool)
    clipped[3] = True
    chans = (dataclasses.replace(cap.channels[0], clipped=clipped), cap.channels[1])
    cap = dataclasses.replace(cap, time=TimeBase(n=50, t0_s=times[0], times_s=times), channels=chans)
    with Campaign.open(tmp_path / "c", create=True) as camp:
        back = camp.load_capture(camp.add_capture(cap).capture_id)
    np.testing.assert_array_equal(back.times(), times)
    np.testing.assert_array_equal(back.channel("supply").clipped, clipped)


def test_same_capture_twice_is_skipped_and_changed_source_is_a_new_version(tmp_path):
    vdd, vref = _ramp()
    first = make_capture(vdd, vref, 1e-6, source="runs/a.csv")
    changed = make_capture(vdd, vref * 1.01, 1e-6, source="runs/a.csv")
    with Campaign.open(tmp_path / "c", create=True) as camp:
        assert camp.add_capture(first).status == "added"
        assert camp.add_capture(first).status == "skipped"
        second = camp.add_capture(changed)
        assert (second.status, second.version) == ("added", 2)
        assert len(camp.captures()) == 1
        assert len(camp.captures(current_only=False)) == 2
        assert camp.captures().loc[0, "capture_id"] == changed.capture_id
        assert camp.verify() == []


def test_verify_reports_altered_missing_and_orphan_files(tmp_path):
    with Campaign.open(tmp_path / "c", create=True) as camp:
        a = camp.add_capture(make_capture(*_ramp(seed=1), 1e-6, source="a.csv"))
        b = camp.add_capture(make_capture(*_ramp(seed=2), 1e-6, source="b.csv"))
        rows = camp.captures().set_index("capture_id")
        (tmp_path / "c" / rows.loc[a.capture_id, "waveform_path"]).write_bytes(b"junk")
        (tmp_path / "c" / rows.loc[b.capture_id, "waveform_path"]).unlink()
        (tmp_path / "c" / "waveforms" / "_nolot" / "stray.parquet").write_bytes(b"x")
        problems = camp.verify()
    assert len(problems) == 3
    assert any("does not match its recorded hash" in p for p in problems)
    assert any("is missing" in p for p in problems)
    assert any("orphan waveform waveforms/_nolot/stray.parquet" in p for p in problems)


def test_measurements_replace_previous_results_for_the_same_limits(tmp_path):
    with Campaign.open(tmp_path / "c", create=True) as camp:
        cid = camp.add_capture(make_capture(*_ramp(), 1e-6, conditions=Conditions(lot="L9"))).capture_id
        camp.save_measurements([{"capture_id": cid, "verdict": "started", "delay_s": 1e-5}], limits_key="k", limits_json="{}")
        camp.save_measurements([{"capture_id": cid, "verdict": "slow_start", "delay_s": 2e-5}], limits_key="k", limits_json="{}")
        m = camp.measurements()
    assert len(m) == 1
    assert m.loc[0, "verdict"] == "slow_start" and m.loc[0, "delay_s"] == 2e-5 and m.loc[0, "lot"] == "L9"


def test_only_the_current_version_of_a_changed_file_is_measured(tmp_path):
    vdd, vref = _ramp()
    old, new = make_capture(vdd, vref, 1e-6, source="a.csv"), make_capture(vdd, vref * 1.01, 1e-6, source="a.csv")
    other = make_capture(*_ramp(seed=3), 1e-6, source="b.csv")
    with Campaign.open(tmp_path / "c", create=True) as camp:
        for cap in (old, other):
            camp.add_capture(cap)
        camp.save_measurements([{"capture_id": c.capture_id, "verdict": "started"} for c in (old, other)],
                               limits_key="k", limits_json="{}")
        assert sorted(camp.measurements()["capture_id"]) == sorted([old.capture_id, other.capture_id])
        camp.add_capture(new)  # the file changed; not yet measured again: its old result no longer counts
        assert list(camp.measurements()["capture_id"]) == [other.capture_id]
        camp.save_measurements([{"capture_id": new.capture_id, "verdict": "stuck_at_zero"}], limits_key="k",
                               limits_json="{}")
        m = camp.measurements()
        assert list(m["capture_id"]) == [new.capture_id, other.capture_id] and list(m["version"]) == [2, 1]
        assert list(m["verdict"]) == ["stuck_at_zero", "started"]


def test_lot_names_cannot_steer_writes_outside_the_campaign(tmp_path):
    cap = make_capture(*_ramp(), 1e-6, conditions=Conditions(lot="../../etc"))
    with Campaign.open(tmp_path / "c", create=True) as camp:
        camp.add_capture(cap)
        path = camp.captures().loc[0, "waveform_path"]
    assert ".." not in path and path.startswith("waveforms/")


def test_opening_a_missing_campaign_is_a_clear_error(tmp_path):
    with pytest.raises(StoreError, match="not a campaign"):
        Campaign.open(tmp_path / "nothing")


def test_workers_read_waveforms_through_an_fsspec_url(tmp_path):
    # fsspec's "file://" protocol stands for any shared filesystem URL (fsspec.open).
    from labtool.store import load_capture_record

    vdd, vref = _ramp()
    with Campaign.open(tmp_path / "c", create=True) as camp:
        (rec,) = camp.records([camp.add_capture(make_capture(vdd, vref, 1e-6)).capture_id])
    back = load_capture_record(f"file://{tmp_path / 'c'}", rec)
    np.testing.assert_array_equal(back.channel("output").values, vref)


def test_reopening_removes_what_a_killed_writer_left(tmp_path):
    # The three states a kill can leave: a partial file, an intent whose row never committed (with its
    # renamed waveform), and an intent whose row did commit.
    root = tmp_path / "c"
    with Campaign.open(root, create=True) as camp:
        kept = camp.add_capture(make_capture(*_ramp(seed=3), 1e-6, source="kept.csv")).capture_id
        kept_path = camp.captures().loc[0, "waveform_path"]
    (root / "tmp" / "x.parquet.123.part").write_bytes(b"partial")
    (root / "waveforms" / "_nolot" / "deadbeefdeadbeef.parquet").write_bytes(b"uncommitted")
    (root / "tmp" / "deadbeefdeadbeef.intent").write_text("waveforms/_nolot/deadbeefdeadbeef.parquet")
    (root / "tmp" / f"{kept}.intent").write_text(kept_path)
    with Campaign.open(root) as camp:
        assert camp.verify() == []
        assert list(camp.captures()["capture_id"]) == [kept]
    assert list((root / "tmp").iterdir()) == []
    assert (root / kept_path).exists()


def test_limits_of_stored_measurements_are_returned_by_key(tmp_path):
    with Campaign.open(tmp_path / "c", create=True) as camp:
        cid = camp.add_capture(make_capture(*_ramp(), 1e-6)).capture_id
        camp.save_measurements([{"capture_id": cid, "verdict": "started"}], limits_key="k1",
                               limits_json='{"max_delay_s": 5e-05}')
        assert camp.limits("k1") == {"max_delay_s": 5e-05}
        assert camp.limits("other") == {}
