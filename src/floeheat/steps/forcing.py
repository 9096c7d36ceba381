"""Stage ``forcing_store``: gridded shortwave and concentration, read once per run.

The files are opened lazily through the reader layer and rewritten as Zarr stores
chunked for one pass in time: each chunk holds the whole grid (or, for a grid too large
for one chunk, a large tile of it) over a run of time steps, so that sampling every
track of a part reads each chunk of the tracks' period once, whatever the number of
tracks and wherever they drift (:func:`floeheat.steps.budget.sample_part_forcing`).
Chunk sizes depend on the data alone, never on the number of threads.
"""

from __future__ import annotations

import json
import logging
import math
from pathlib import Path

import dask
import numpy as np
import xarray as xr

from floeheat.io.gridded import open_concentration, open_shortwave
from floeheat.steps.status import atomic_path

__all__ = ["CHUNK_BYTES", "pass_chunks", "run_forcing_store", "write_store"]

log = logging.getLogger(__name__)

#: Largest (uncompressed) chunk of a forcing store [bytes]: a few MB, the size Zarr
#: and dask read efficiently (common practice, no source), small enough that a job
#: holding a chunk per thread stays far below its memory request.
CHUNK_BYTES = 8 * 2**20
#: Dims that are not grid dims (interval bounds).
_BOUNDS_DIMS = ("nv", "bnds")


def pass_chunks(ds: xr.Dataset, chunk_bytes: int = CHUNK_BYTES) -> dict[str, int]:
    """Chunk sizes for a store read in one pass along time.

    The grid dims stay whole while one time step of the largest variable fits in
    ``chunk_bytes``; time then takes as many steps as fit. A larger grid is cut into
    tiles of about ``chunk_bytes``, one time step each.

    Examples
    --------
    >>> ds = xr.Dataset({"a": (("time", "y", "x"), np.zeros((100, 40, 30), "float32"))})
    >>> pass_chunks(ds, chunk_bytes=48_000)
    {'time': 10, 'y': 40, 'x': 30}
    >>> pass_chunks(ds, chunk_bytes=1_200)
    {'time': 1, 'y': 20, 'x': 15}
    """
    grid = [d for d in ds.dims if d != "time" and d not in _BOUNDS_DIMS]
    step = max((int(np.prod([v.sizes[d] for d in v.dims if d != "time"])) * v.dtype.itemsize
                for v in ds.data_vars.values() if "time" in v.dims
                and not set(v.dims) & set(_BOUNDS_DIMS)), default=0)
    chunks = {d: ds.sizes[d] for d in ds.dims}
    if "time" in chunks and step:
        chunks["time"] = max(1, min(ds.sizes["time"], chunk_bytes // step))
    if step > chunk_bytes and grid:
        cut = math.ceil(math.sqrt(step / chunk_bytes))
        for d in grid:
            chunks[d] = math.ceil(ds.sizes[d] / cut)
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
        ds = ds.chunk(pass_chunks(ds))
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
