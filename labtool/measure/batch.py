"""Measure every current capture of a campaign and save the rows in its catalog.

Workers get small catalog records, read their own waveform from the store and send back the rows of
that capture (one, or one per supply dip), so no process ever holds more than one waveform per
worker. The parent saves all rows in one transaction (replacing earlier results under the same
limits). A capture that cannot be measured is listed in the report; the others are still saved.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import partial
from typing import Iterator, Sequence

from labtool.errors import LabtoolError, MeasurementError
from labtool.execute import Scheduler, run_batch
from labtool.ingest import IngestOptions, read_path
from labtool.measure.engine import measure_capture_rows
from labtool.measure.limits import Limits
from labtool.store import Campaign, load_capture_record


@dataclass(frozen=True)
class MeasureReport:
    """What a campaign measurement did: rows saved (in catalog order) and captures that failed."""

    limits_key: str
    rows: list[dict] = field(default_factory=list)
    failed: list[tuple[str, str]] = field(default_factory=list)  # (capture_id, message)

    @property
    def measured(self) -> int:
        """Captures measured (a capture with several dips has several rows)."""
        return len({row["capture_id"] for row in self.rows})


def result_rows(capture, limits: Limits) -> list[dict]:
    """The capture's measurement rows: ``{"capture_id", "file", **result.to_json_dict()}`` each."""
    return [{"capture_id": capture.capture_id, "file": capture.provenance.source_path, **result.to_json_dict()}
            for result in measure_capture_rows(capture, limits)]


def measure_file(options: IngestOptions, limits: Limits, path: str) -> list[tuple[str, dict | str]]:
    """Worker: read one file and measure each of its captures: ("ok", row) or ("error", message).
    A row is one of :func:`result_rows` with ``file`` the path as given."""
    out = []
    for capture in read_path(path, options):
        try:
            out.extend(("ok", {**row, "file": path}) for row in result_rows(capture, limits))
        except MeasurementError as exc:
            out.append(("error", str(exc)))
    return out


def measure_files(paths: Sequence[str], options: IngestOptions = IngestOptions(), limits: Limits = Limits(),
                  scheduler: Scheduler | None = None) -> Iterator[tuple[str, dict | str]]:
    """("ok", row) / ("error", message) for every capture of every file, in input order (files are read
    and measured in the scheduler's workers; nothing is stored). A file that cannot be read is one error."""
    if not paths:
        return
    work = partial(measure_file, options, limits)
    for outcome in run_batch(work, paths, scheduler, what="measure", unit="file"):
        if outcome.ok:
            yield from outcome.value
        else:
            yield "error", outcome.error


def measure_record(root: str, limits: Limits, record: dict) -> list[dict]:
    """Worker: load one capture from the store by its catalog record and measure it."""
    capture = load_capture_record(root, record)
    try:
        return result_rows(capture, limits)
    except LabtoolError:
        raise
    except Exception as exc:  # a defect on one capture must not end the batch; it is reported with the capture
        raise MeasurementError(f"{record['source_path']}: measurement failed ({type(exc).__name__}: {exc})") from None


def measure_campaign(campaign: Campaign, limits: Limits = Limits(), scheduler: Scheduler | None = None
                     ) -> MeasureReport:
    """Measure every current capture of ``campaign`` and save the rows under ``limits.key()``."""
    records = campaign.records()
    work = partial(measure_record, str(campaign.root), limits)
    report = MeasureReport(limits_key=limits.key())
    for outcome in run_batch(work, records, scheduler, what="measure", unit="capture"):
        if outcome.ok:
            report.rows.extend(outcome.value)
        else:
            report.failed.append((outcome.item["capture_id"], outcome.error))
    if report.rows:
        campaign.save_measurements(report.rows, limits_key=limits.key(), limits_json=limits.to_json())
    return report
