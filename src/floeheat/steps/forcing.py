"""Stage ``forcing_store``: gridded shortwave and concentration, read once per run.

The files are opened lazily through the reader layer and rewritten as Zarr stores
chunked for point series: small spatial chunks and long time chunks, so that each
deployment's extraction reads only the few chunks around its track. Chunk sizes depend
on the data alone, never on the number of threads.
"""

from __future__ import annotations

import json
import logging
from pathlib import Path

import dask
import xarray as xr

from floeheat.io.gridded import open_concentration, open_shortwave
from floeheat.steps.status import atomic_path

__all__ = ["SPATIAL_CHUNK", "TIME_CHUNK", "point_series_chunks", "run_forcing_store",
           "write_store"]

log = logging.getLogger(__name__)

#: Cells per spatial chunk side of the point-series stores.
SPATIAL_CHUNK = 16
#: Longest time chunk (steps); a season of hourly data is about 3,700 steps.
TIME_CHUNK = 8784


def point_series_chunks(ds: xr.Dataset) -> dict[str, int]:
    """Chunk sizes for a point-series store: long in time, small in space.

    Examples
    --------
    >>> import numpy as np
    >>> ds = xr.Dataset({"a": (("time", "y", "x"), np.zeros((100, 40, 3)))})
    >>> point_series_chunks(ds)
    {'time': 100, 'y': 16, 'x': 3}
    """
    chunks = {}
    for dim, size in ds.sizes.items():
        if dim == "time":
            chunks[dim] = min(size, TIME_CHUNK)
        elif dim in ("nv", "bnds"):
            chunks[dim] = size
        else:
            chunks[dim] = min(size, SPATIAL_CHUNK)
    return chunks


def write_store(ds: xr.Dataset | None, path: Path, threads: int) -> None:
    """Write ``ds`` as a consolidated Zarr (format 3) store, atomically.

    ``None`` writes an empty store whose attribute ``absent`` says the archive has no
    such gridded files.
    """
    with atomic_path(Path(path)) as tmp:
        if ds is None:
            xr.Dataset(attrs={"absent": 1}).to_zarr(tmp, zarr_format=3, consolidated=True)
            return
        ds = ds.chunk(point_series_chunks(ds))
        for var in ds.variables.values():
            var.encoding.pop("chunks", None)
            var.encoding.pop("preferred_chunks", None)
        with dask.config.set(scheduler="threads", num_workers=max(1, int(threads))):
            ds.to_zarr(tmp, zarr_format=3, consolidated=True, mode="w")


def run_forcing_store(archive: str, listing_json: str, shortwave_store: str,
                      concentration_store: str, threads: int = 1) -> None:
    """Read the gridded forcing files named in the index and write both stores."""
    listing = json.loads(Path(listing_json).read_text())
    root = Path(archive)
    sw_files = [root / p for p in listing.get("shortwave", [])]
    ci_files = [root / p for p in listing.get("concentration", [])]
    sw = open_shortwave(sw_files) if sw_files else None
    ci = open_concentration(ci_files) if ci_files else None
    write_store(sw, Path(shortwave_store), threads)
    write_store(ci, Path(concentration_store), threads)
    log.info("forcing stores: %d shortwave files, %d concentration files",
             len(sw_files), len(ci_files))
