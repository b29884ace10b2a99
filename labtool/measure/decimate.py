"""Block-mean decimation of a window of a record (uniform or not).

Averaging blocks of L samples lowers white noise by √L and keeps everything slower than a block;
the fit and the overshoot peak are taken on this short series instead of the whole record.
"""

from __future__ import annotations

import numpy as np

MAX_POINTS = 2000


def block_means(t: np.ndarray, v: np.ndarray, i0: int, i1: int, max_points: int = MAX_POINTS
                ) -> tuple[np.ndarray, np.ndarray]:
    """Means of consecutive blocks of samples ``i0 … i1-1``: at most ``max_points`` (t, v) pairs.

    A block's instant is the mean of its sample instants, so non-uniform time bases work too.
    """
    i0, i1 = max(0, int(i0)), min(v.size, int(i1))
    n = i1 - i0
    if n <= max_points:
        return t[i0:i1].astype(np.float64, copy=True), v[i0:i1].astype(np.float64, copy=True)
    length = -(-n // max_points)
    blocks = n // length
    end = i0 + blocks * length
    return (t[i0:end].reshape(blocks, length).mean(axis=1),
            v[i0:end].reshape(blocks, length).mean(axis=1))
