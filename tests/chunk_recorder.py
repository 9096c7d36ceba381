"""A test array that records which blocks dask reads from it (shared by the forcing
sampling tests)."""

from __future__ import annotations

import numpy as np


class ChunkRecorder:
    """An array for dask.array.from_array that records the (start, stop) of every
    non-empty block it serves."""

    def __init__(self, values):
        self.values = np.asarray(values)
        self.shape, self.dtype, self.ndim = self.values.shape, self.values.dtype, self.values.ndim
        self.blocks = []

    def __getitem__(self, key):
        out = self.values[key]
        if out.size:
            self.blocks.append(tuple((k.start, k.stop) for k in key))
        return out
