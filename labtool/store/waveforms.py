"""Capture waveforms <-> Parquet bytes. Pure conversion; the campaign decides where files go."""

from __future__ import annotations

import json

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from labtool.capture import Channel, TimeBase

TIME_COLUMN = "__t_s"
CLIP_PREFIX = "__clip__"


def waveform_to_parquet(time: TimeBase, channels: tuple[Channel, ...]) -> bytes:
    """Serialise the samples (explicit times only when not uniform) to Parquet bytes."""
    arrays, names = [], []
    if not time.uniform:
        arrays.append(pa.array(time.times_s, type=pa.float64()))
        names.append(TIME_COLUMN)
    for ch in channels:
        arrays.append(pa.array(np.asarray(ch.values, dtype=np.float64), type=pa.float64()))
        names.append(ch.name)
        if ch.clipped is not None and ch.n_clipped:
            arrays.append(pa.array(np.asarray(ch.clipped, dtype=bool)))
            names.append(CLIP_PREFIX + ch.name)
    meta = {"channels": [{"name": c.name, "unit": c.unit, "role": c.role, "role_source": c.role_source}
                         for c in channels],
            "t0_s": time.t0_s, "dt_s": time.dt_s, "n": time.n}
    table = pa.Table.from_arrays(arrays, names=names)
    table = table.replace_schema_metadata({b"labtool": json.dumps(meta).encode()})
    sink = pa.BufferOutputStream()
    pq.write_table(table, sink, compression="zstd")
    return sink.getvalue().to_pybytes()


def waveform_from_parquet(source) -> tuple[TimeBase, tuple[Channel, ...]]:
    """Read what :func:`waveform_to_parquet` wrote (a path or a file-like object)."""
    table = pq.read_table(source)
    meta = json.loads(table.schema.metadata[b"labtool"])
    cols = set(table.column_names)
    if TIME_COLUMN in cols:
        times = table.column(TIME_COLUMN).to_numpy()
        time = TimeBase(n=len(times), t0_s=float(times[0]) if len(times) else 0.0, times_s=times)
    else:
        time = TimeBase(n=meta["n"], t0_s=meta["t0_s"], dt_s=meta["dt_s"])
    channels = []
    for c in meta["channels"]:
        values = table.column(c["name"]).to_numpy()
        clip_name = CLIP_PREFIX + c["name"]
        clipped = table.column(clip_name).to_numpy(zero_copy_only=False) if clip_name in cols else None
        channels.append(Channel(name=c["name"], unit=c["unit"], role=c["role"], values=values, clipped=clipped,
                                role_source=c.get("role_source", "")))
    return time, tuple(channels)
