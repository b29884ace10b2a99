"""The generated lot every statistics test reads: waveforms written, ingested and measured by labtool."""

from pathlib import Path

import numpy as np
import pytest

from tests.stats.lots import build_campaign, scenario


@pytest.fixture(scope="session")
def lot(tmp_path_factory):
    """(campaign path, measured table joined with the generated truth, the truth table)."""
    from labtool.store import Campaign

    first, changed = scenario()
    path, truth = build_campaign(Path(tmp_path_factory.mktemp("lot")), first, changed)
    with Campaign.open(path) as camp:
        measured = camp.measurements()
    names = measured["source_path"].map(lambda p: Path(p).name)
    joined = measured.assign(file=names.to_numpy()).merge(truth, on="file", suffixes=("", "_generated"))
    assert len(joined) == len(truth) == len(measured)
    # The engine found every generated verdict, and every delay of a start within one sample interval of
    # the generated one (linear interpolation of the crossings, IEEE Std 181 §5.3.4, from memory).
    assert (joined["verdict"] == joined["verdict_generated"]).all()
    up = joined["verdict"].isin(["started", "slow_start", "ringing"]).to_numpy()
    err = np.abs(joined["delay_s"] - joined["true_delay_s"]).to_numpy()[up]
    assert np.all(err < joined["sample_interval_s"].to_numpy()[up])
    return path, joined, truth
