"""The edge of triage: each capture's resolution measured on its stored waveform."""

from __future__ import annotations

from dataclasses import asdict
from typing import Sequence

import pandas as pd

from labtool.errors import LabtoolError
from labtool.stats.triage.metrics import CaptureResolution


def resolution_of_capture(capture) -> CaptureResolution:
    return CaptureResolution.from_arrays(capture.times(), capture.channel("supply").values,
                                         capture.channel("output").values)


def load_resolution(root: str, records: Sequence[dict]) -> pd.DataFrame:
    """Per capture (catalog ``records`` of a campaign at ``root``): the noise and code step of its
    output and supply, and its sample interval. A waveform that cannot be read is left out (its
    capture then gets the assumed 8-bit resolution; ``labtool verify`` names the missing file)."""
    from labtool.store import load_capture_record

    out = []
    for rec in records:
        try:
            res = resolution_of_capture(load_capture_record(root, rec))
        except LabtoolError:
            continue
        out.append({"capture_id": rec["capture_id"], **asdict(res)})
    return pd.DataFrame(out)
