"""A GeoTIFF band as a lazy array: every read opens the file and reads one window."""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["WindowedBand"]


class WindowedBand:
    """Array-like view of one band, for :func:`dask.array.from_array`.

    Indexing with slices reads only that window (a rasterio ``Window``).

    Parameters
    ----------
    path : str or Path
    band : int
        1-based band index.
    """

    def __init__(self, path, band: int = 1):
        import rasterio

        self.path, self.band = Path(path), int(band)
        with rasterio.open(self.path) as src:
            self.shape = (src.height, src.width)
            self.dtype = np.dtype(src.dtypes[self.band - 1])
        self.ndim = 2

    def __getitem__(self, key):
        import rasterio
        from rasterio.windows import Window

        if not isinstance(key, tuple):
            key = (key,)
        key = key + (slice(None),) * (2 - len(key))
        rows, cols = (k.indices(n) if isinstance(k, slice) else slice(k, k + 1).indices(n)
                      for k, n in zip(key, self.shape, strict=True))
        r0, r1, rs = rows
        c0, c1, cs = cols
        if rs < 0 or cs < 0:
            raise IndexError("negative steps are not supported")
        window = Window(c0, r0, max(c1 - c0, 0), max(r1 - r0, 0))
        if window.width == 0 or window.height == 0:
            data = np.empty((int(window.height), int(window.width)), dtype=self.dtype)
        else:
            with rasterio.open(self.path) as src:
                data = src.read(self.band, window=window)
        data = data[::rs, ::cs]
        squeeze = tuple(i for i, k in enumerate(key) if not isinstance(k, slice))
        return data.squeeze(axis=squeeze) if squeeze else data
