"""Campaigns from Python: ``labtool.open_campaign`` and the :class:`Campaign` it returns."""

from __future__ import annotations

import os
import warnings
from pathlib import Path
from typing import TYPE_CHECKING, Any, Sequence

from labtool._api.files import LimitsArg, PathArg, as_limits, ingest_options
from labtool.capture import Capture
from labtool.store import Campaign as Store

if TYPE_CHECKING:
    import pandas as pd

    from labtool.ingest import IngestReport


class Campaign:
    """A campaign directory (SQLite catalog + Parquet waveforms) opened for reading and adding.

    Close it with :meth:`close` or use it in a ``with`` block. The tables are pandas DataFrames with
    one row per capture (the current version of each file and place), conditions and tags as columns.
    """

    def __init__(self, store: Store):
        self._store = store

    @property
    def path(self) -> Path:
        return self._store.root

    def __repr__(self) -> str:
        return f"labtool.Campaign({str(self.path)!r})"

    def close(self) -> None:
        self._store.close()

    def __enter__(self) -> "Campaign":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def ingest(self, paths: PathArg | Sequence[PathArg], *, manifest: PathArg | None = None,
               name_pattern: str | None = None, pair_channels: str = "auto", update_conditions: bool = False,
               scheduler: str | None = None, **picks: Any) -> "IngestReport":
        """Read capture files and folders (recursive) into the campaign, as ``labtool ingest`` does.

        ``manifest``: a run sheet (CSV/XLSX) of conditions per file; ``name_pattern``: conditions from
        file names (``"{lot}_{part}_{temp_c}C.csv"``); column picks and ``conditions`` as for
        :func:`labtool.read_all`. Returns the report (``added``, ``skipped``, ``updated``, ``failed``,
        ``warnings``); files that fail are warned about, the others stored.
        """
        from labtool.execute import parse_scheduler
        from labtool.ingest import ingest_paths, load_manifest
        from labtool.ingest.conditions import compile_name_pattern
        from labtool.ingest.pairing import token_pattern

        if name_pattern:
            compile_name_pattern(name_pattern)
        token_pattern(pair_channels)
        listed = [paths] if isinstance(paths, (str, os.PathLike)) else list(paths)
        options = ingest_options(name_pattern=name_pattern, pair_channels=pair_channels,
                                 update_conditions=update_conditions,
                                 manifest=load_manifest(os.fspath(manifest)) if manifest is not None else None,
                                 **picks)
        report = ingest_paths([os.fspath(p) for p in listed], self._store, options,
                              parse_scheduler(scheduler) if scheduler is not None else None,
                              exclude=[os.fspath(manifest)] if manifest is not None else ())
        for _, message in report.failed:
            warnings.warn(message, stacklevel=2)
        return report

    def measure(self, limits: LimitsArg = None, *, scheduler: str | None = None) -> "pd.DataFrame":
        """Measure every current capture and save the results under these limits (replacing earlier
        results for the same limits), as ``labtool measure CAMPAIGN`` does; returns :meth:`measurements`
        for these limits. Captures that fail are warned about and listed in ``attrs["failed"]``."""
        from labtool.execute import parse_scheduler
        from labtool.measure.batch import measure_campaign

        chosen = as_limits(limits)
        report = measure_campaign(self._store, chosen, parse_scheduler(scheduler) if scheduler is not None else None)
        failed = [f"{self.path}: capture {cid}: {message}" for cid, message in report.failed]
        for message in failed:
            warnings.warn(message, stacklevel=2)
        table = self.measurements(chosen)
        table.attrs["failed"] = failed
        return table

    def measurements(self, limits: LimitsArg = None) -> "pd.DataFrame":
        """The measurement table: one row per current capture, its conditions, tags and result columns
        (the ``measure --json`` fields), under these limits, or those measured last. Empty before
        :meth:`measure`. The statistics functions take this table as it is."""
        return self._store.measurements(limits_key=None if limits is None else as_limits(limits).key())

    def captures(self) -> "pd.DataFrame":
        """The catalog: one row per current capture, its conditions, tags, source and sample count."""
        return self._store.captures()

    def capture(self, capture_id: str) -> Capture:
        """One capture with its waveform, read from the store (``.to_pandas()`` for a DataFrame)."""
        return self._store.load_capture(capture_id)

    def waveform(self, capture_id: str) -> "pd.DataFrame":
        """One capture's samples: ``capture(capture_id).to_pandas()``."""
        return self.capture(capture_id).to_pandas()


def open_campaign(path: PathArg, *, create: bool = False) -> Campaign:
    """Open a campaign directory; ``create=True`` makes a new one when there is none. Raises a
    :class:`labtool.LabtoolError` (``StoreError``) for a directory that is not a campaign."""
    return Campaign(Store.open(path, create=create))


def store_of(campaign: Campaign) -> Store:
    """The store behind a public Campaign (for the other API modules)."""
    return campaign._store
