"""Low-level, byte-deterministic writers: NetCDF-4, GeoTIFF and CSV.

No file carries a creation time or software-dependent history, NetCDF-4 files are
written with fixed chunking and compression through netCDF4, GeoTIFFs through rasterio
with fixed creation options, CSV through the standard library with fixed formatting.
"""

from __future__ import annotations

import csv
import threading
from pathlib import Path

import numpy as np

__all__ = ["TIME_UNITS", "encode_time", "iso", "write_netcdf", "write_geotiff", "write_csv",
           "write_csv_table",
           "cf_grid_mapping"]

#: HDF5 is not thread-safe: every NetCDF write holds this lock.
_NC_LOCK = threading.Lock()

#: CF time units used in every synthetic NetCDF file.
TIME_UNITS = "seconds since 1970-01-01 00:00:00"


def encode_time(t) -> np.ndarray:
    """datetime64 -> seconds since 1970-01-01 (float64).

    Examples
    --------
    >>> float(encode_time(np.datetime64("1970-01-02T00:00"))[()])
    86400.0
    """
    return (np.asarray(t, "datetime64[ns]") - np.datetime64("1970-01-01T00:00", "ns")) \
        / np.timedelta64(1, "s")


def iso(t) -> str:
    """ISO 8601 UTC text of a time, seconds resolution.

    Examples
    --------
    >>> iso(np.datetime64("2025-06-01T12:00"))
    '2025-06-01T12:00:00Z'
    """
    return str(np.datetime64(t, "s")) + "Z"


def write_netcdf(path: Path, dims: dict, variables: list, attrs: dict | None = None,
                 complevel: int = 4) -> None:
    """Write a NetCDF-4 file.

    Parameters
    ----------
    path : Path
        Output file.
    dims : dict
        Dimension name -> length.
    variables : list of tuple
        ``(name, dims, data, attrs)`` or ``(name, dims, data, attrs, options)`` where
        options may hold ``dtype``, ``fill_value`` and ``chunks``.
    attrs : dict
        Global attributes.
    """
    import netCDF4

    path.parent.mkdir(parents=True, exist_ok=True)
    with _NC_LOCK, netCDF4.Dataset(path, "w", format="NETCDF4") as ds:
        for k, v in (attrs or {}).items():
            ds.setncattr(k, v)
        for name, n in dims.items():
            ds.createDimension(name, n)
        for item in variables:
            name, vdims, data, vattrs = item[:4]
            opts = item[4] if len(item) > 4 else {}
            data = np.asarray(data)
            dtype = opts.get("dtype", data.dtype)
            if np.dtype(dtype).kind == "U":
                var = ds.createVariable(name, str, vdims)
                for i, s in enumerate(data.ravel()):
                    var[i] = s
            else:
                fill = opts.get("fill_value", None)
                compress = data.ndim > 0 and data.size > 16
                var = ds.createVariable(
                    name, dtype, vdims, zlib=compress, complevel=complevel if compress else 4,
                    shuffle=compress, fill_value=fill if fill is not None else False,
                    chunksizes=opts.get("chunks") if compress else None)
                var.set_auto_maskandscale(False)
                if vdims:
                    var[...] = data.astype(dtype)
                else:
                    var.assignValue(data.astype(dtype))
            for k, v in vattrs.items():
                var.setncattr(k, v)


def cf_grid_mapping(crs_text: str) -> dict:
    """CF grid-mapping attributes of a projected CRS (pyproj ``to_cf`` plus the origin).

    pyproj omits ``latitude_of_projection_origin`` for polar stereographic; CF requires
    it, so it is added (+90 or -90).

    Examples
    --------
    >>> gm = cf_grid_mapping("EPSG:3413")
    >>> gm["grid_mapping_name"], gm["latitude_of_projection_origin"]
    ('polar_stereographic', 90.0)
    """
    import pyproj

    crs = pyproj.CRS(crs_text)
    cf = {k: v for k, v in crs.to_cf().items() if not isinstance(v, (list, dict))}
    if cf.get("grid_mapping_name") == "polar_stereographic":
        lat_ts = float(cf.get("standard_parallel", 90.0))
        cf.setdefault("latitude_of_projection_origin", 90.0 if lat_ts > 0 else -90.0)
    cf["crs_wkt"] = crs.to_wkt()
    return cf


def write_geotiff(path: Path, bands: list, crs: str, x0_m: float, y0_m: float, res_m: float,
                  descriptions: list[str], tags: dict, nodata=None, units: list | None = None
                  ) -> None:
    """Write a tiled, deflate-compressed GeoTIFF (north-up, square pixels).

    ``x0_m``/``y0_m`` are the upper-left corner of the upper-left pixel.
    """
    import rasterio
    from affine import Affine

    path.parent.mkdir(parents=True, exist_ok=True)
    arr = np.stack(bands)
    h, w = arr.shape[1:]
    block = 256 if min(h, w) >= 256 else 128
    is_float = arr.dtype.kind == "f"
    profile = dict(driver="GTiff", width=w, height=h, count=arr.shape[0], dtype=arr.dtype,
                   crs=crs, transform=Affine(res_m, 0.0, x0_m, 0.0, -res_m, y0_m), tiled=True,
                   blockxsize=block, blockysize=block, compress="deflate",
                   zlevel=1 if is_float else 6,
                   interleave="band", nodata=nodata)
    if is_float:
        profile["predictor"] = 3
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(arr)
        for i, d in enumerate(descriptions, start=1):
            dst.set_band_description(i, d)
            if units:
                dst.set_band_unit(i, units[i - 1])
        dst.update_tags(**tags)


def write_csv_table(path: Path, columns: dict, float_format: str = "%.4f") -> None:
    """Write a large table of columns fast: floats formatted with ``float_format``, NaN
    as empty cells, other columns as given (strings or integers)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    cols = []
    for v in columns.values():
        v = np.asarray(v)
        if v.dtype.kind == "f":
            text = np.char.mod(float_format, v)
            text[np.isnan(v)] = ""
        else:
            text = v.astype(str)
        cols.append(text)
    body = np.stack(cols, axis=1)
    with open(path, "w", newline="", encoding="utf-8") as fh:
        fh.write(",".join(columns) + "\n")
        fh.write("\n".join(",".join(row) for row in body.tolist()))
        fh.write("\n")


def write_csv(path: Path, header: list[str], rows) -> None:
    """Write an RFC 4180 CSV (UTF-8, header row, ``\\n`` line ends)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(header)
        w.writerows(rows)
