"""Scale: results are identical whichever executor runs them (in-process, process pool, Dask)."""

import json
from pathlib import Path

import pytest

from labtool.execute import Scheduler, parse_scheduler
from labtool.ingest import IngestOptions, ingest_paths, load_manifest
from labtool.measure import Limits
from labtool.measure.batch import measure_campaign
from labtool.store import Campaign

SAMPLES = Path(__file__).resolve().parent.parent / "sample_runs"
LIMITS = Limits(expect_v=1.2, max_delay_s=100e-6)


def _ingest(root, scheduler):
    manifest = SAMPLES / "manifest.csv"
    opts = IngestOptions(manifest=load_manifest(str(manifest)))
    with Campaign.open(root, create=True) as camp:
        report = ingest_paths([str(SAMPLES)], camp, opts, scheduler, exclude=[str(manifest)])
        table = camp.captures().drop(columns=["imported_at"])
    return report, table


def _rows(report):
    return [json.dumps(r, sort_keys=True) for r in report.rows]


@pytest.fixture(scope="module")
def serial_campaign(tmp_path_factory):
    root = tmp_path_factory.mktemp("serial") / "camp"
    report, table = _ingest(root, Scheduler("local", 1))
    assert report.failed == [] and len(report.added) == 36
    return root, table


def test_ingest_on_two_processes_stores_the_same_catalog(tmp_path, serial_campaign):
    _, serial_table = serial_campaign
    report, table = _ingest(tmp_path / "camp", parse_scheduler("local:2"))
    assert report.failed == []
    assert table.equals(serial_table)


def test_measure_gives_identical_rows_in_process_on_a_pool_and_on_a_dask_cluster(serial_campaign):
    distributed = pytest.importorskip("distributed")
    root, _ = serial_campaign
    with Campaign.open(root) as camp:
        serial = measure_campaign(camp, LIMITS, Scheduler("local", 1))
        pooled = measure_campaign(camp, LIMITS, parse_scheduler("local:2"))
        # Separate worker processes behind a real TCP scheduler: the distributed path end to end.
        with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                      dashboard_address=None) as cluster:
            on_dask = measure_campaign(camp, LIMITS, parse_scheduler(cluster.scheduler_address))
        stored = camp.measurements(limits_key=LIMITS.key())
    assert serial.failed == pooled.failed == on_dask.failed == []
    assert _rows(serial) == _rows(pooled) == _rows(on_dask)
    assert len(stored) == 36
    assert sorted(stored["verdict"].value_counts().items()) == sorted(
        {"started": 32, "stuck_at_zero": 1, "slow_start": 1, "ringing": 1, "recollapse": 1}.items())
