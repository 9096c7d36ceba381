"""Gridded inputs: shortwave, sea-ice concentration and bathymetry.

Files are opened lazily (dask arrays with the files' own chunks); unit conversion is
affine and stays lazy. Horizontal axes get canonical names: ``latitude``/``longitude``
(1-D, regular grids), ``y``/``x`` [m] (projected, with attribute ``crs_wkt``), or dims
``y``/``x`` with 2-D ``latitude``/``longitude`` coordinates. 1-D axes are sorted
ascending.

Interval rule without ``time_bnds``: shortwave values are means (or accumulations)
over the interval that ends at the stamp, of the length of the file's time step. The
step is the most common spacing of the file's stamps; every spacing must be a whole
multiple of it (gaps are allowed, other irregular spacing is an error). A file with
a single stamp takes the step of the other files when they all agree.
"""

from __future__ import annotations

from pathlib import Path

import dask.array
import numpy as np
import pandas as pd
import pyproj
import xarray as xr

from floeheat.errors import ArchiveError
from floeheat.io._csv import numeric_column, read_data_csv, time_column
from floeheat.io.archive import parse_iso_time
from floeheat.io.cf import (
    bounds_of,
    canonical,
    check_increasing,
    crs_of,
    decode_time,
    find_first,
    find_variable,
    is_degrees,
    linear_conversion,
    open_netcdf,
    units_of,
)

__all__ = [
    "SW_FLUX",
    "SW_INTEGRAL",
    "open_shortwave",
    "read_shortwave_csv",
    "open_concentration",
    "open_bathymetry",
]

SW_FLUX = "surface_downwelling_shortwave_flux_in_air"
SW_INTEGRAL = "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air"
SIC = "sea_ice_area_fraction"
DEPTH = "sea_floor_depth_below_geoid"
ELEVATION = "height_above_mean_sea_level"
_ONE_DAY = np.timedelta64(1, "D")


# ---------------------------------------------------------------- horizontal axes


def _axis_variable(ds, dim, standard_names):
    """The 1-D variable along ``dim`` with one of ``standard_names``, else None."""
    for name, var in ds.variables.items():
        if var.dims == (dim,) and var.attrs.get("standard_name") in standard_names:
            return str(name)
    return None


def _horizontal(ds, da, tdim, path, *, aux_2d: bool):
    """``da`` with canonical horizontal dims/coords, sorted; and attrs to record."""
    dims = [d for d in da.dims if d != tdim]
    if len(dims) != 2:
        raise ArchiveError.at(str(path), f"variable {da.name}",
                              f"has horizontal dims {dims}, expected two",
                              "store the field on (time, y, x) or (time, lat, lon)")
    found = {}
    for d in dims:
        for key, names in (("latitude", ("latitude",)), ("longitude", ("longitude",)),
                           ("y", ("projection_y_coordinate", "grid_latitude")),
                           ("x", ("projection_x_coordinate", "grid_longitude"))):
            name = _axis_variable(ds, d, names)
            if name is not None:
                found[key] = (d, name)
    attrs = {}
    if {"latitude", "longitude"} <= found.keys():
        (ydim, yname), (xdim, xname) = found["latitude"], found["longitude"]
        for axis, name in (("north", yname), ("east", xname)):
            if not is_degrees(units_of(ds, name, file=path), axis):
                raise ArchiveError.at(str(path), f"variable {name}",
                                      f"units are not degrees_{axis}",
                                      f"store the axis in degrees_{axis}")
        lat, lon = (np.asarray(ds[n].values, "float64") for n in (yname, xname))
        da = da.drop_vars([c for c in da.coords if c != tdim]).rename(
            {ydim: "latitude", xdim: "longitude"})
        da = da.assign_coords(latitude=("latitude", lat, {"units": "degrees_north",
                                                          "standard_name": "latitude"}),
                              longitude=("longitude", lon, {"units": "degrees_east",
                                                            "standard_name": "longitude"}))
        da = da.sortby(["latitude", "longitude"])
        attrs["longitude_range"] = "0..360" if np.nanmax(lon) > 180 else "-180..180"
        attrs["crs_wkt"] = pyproj.CRS.from_epsg(4326).to_wkt()
        return da.transpose(*_order(tdim, "latitude", "longitude")), attrs
    if {"x", "y"} <= found.keys():
        (ydim, yname), (xdim, xname) = found["y"], found["x"]
        y = canonical(ds, yname, "m", file=path).values
        x = canonical(ds, xname, "m", file=path).values
        crs = crs_of(ds, str(da.name), file=path)
        da = da.drop_vars([c for c in da.coords if c != tdim]).rename({ydim: "y", xdim: "x"})
        da = da.assign_coords(y=("y", y, {"units": "m",
                                          "standard_name": "projection_y_coordinate"}),
                              x=("x", x, {"units": "m",
                                          "standard_name": "projection_x_coordinate"}))
        attrs["crs_wkt"] = crs.to_wkt()
        return da.sortby(["y", "x"]).transpose(*_order(tdim, "y", "x")), attrs
    if aux_2d:
        lats = [n for n in find_variable(ds, file=path, standard_name="latitude",
                                         allow_many=True) if set(ds[n].dims) == set(dims)]
        lons = [n for n in find_variable(ds, file=path, standard_name="longitude",
                                         allow_many=True) if set(ds[n].dims) == set(dims)]
        if lats and lons:
            ydim, xdim = dims
            lat = ds[lats[0]].transpose(ydim, xdim).values.astype("float64")
            lon = ds[lons[0]].transpose(ydim, xdim).values.astype("float64")
            da = da.drop_vars([c for c in da.coords if c != tdim]).rename(
                {ydim: "y", xdim: "x"})
            da = da.assign_coords(latitude=(("y", "x"), lat, {"units": "degrees_north"}),
                                  longitude=(("y", "x"), lon, {"units": "degrees_east"}))
            attrs["longitude_range"] = "0..360" if np.nanmax(lon) > 180 else "-180..180"
            attrs["crs_wkt"] = pyproj.CRS.from_epsg(4326).to_wkt()
            return da.transpose(*_order(tdim, "y", "x")), attrs
    raise ArchiveError.at(
        str(path), f"variable {da.name}",
        "no horizontal coordinates: no 1-D latitude/longitude, no 1-D projection_x/y "
        "coordinates" + (" and no 2-D latitude/longitude" if aux_2d else ""),
        "give the axes their CF standard_name (latitude/longitude or "
        "projection_x_coordinate/projection_y_coordinate)")


def _order(*dims):
    return [d for d in dims if d is not None]


def _same_grid(parts, paths):
    first = parts[0][0]
    for (da, _), path in zip(parts[1:], paths[1:], strict=True):
        for name in set(first.coords) - {"time"}:
            a, b = first[name].values, da[name].values if name in da.coords else None
            if b is None or a.shape != b.shape or not np.allclose(a, b, equal_nan=True):
                raise ArchiveError.at(str(path), f"coordinate {name}",
                                      f"the grid differs from that of {paths[0]}",
                                      "put every file of the series on the same grid")


# ---------------------------------------------------------------- time


def _time_of(ds, path, da):
    """(time name or None, decoded stamps as 1-D array, bounds (n, 2) or None)."""
    tname = find_variable(ds, file=path, standard_name="time", required=False)
    if tname is None:
        start = ds.attrs.get("time_coverage_start")
        if start is None:
            raise ArchiveError.at(str(path), "standard_name 'time'",
                                  "no time variable and no time_coverage_start attribute",
                                  "add a CF time coordinate")
        try:
            return None, np.array([parse_iso_time(start)]), None
        except ValueError as exc:
            raise ArchiveError.at(str(path), "global attribute time_coverage_start",
                                  f"{start!r} is not ISO 8601", "write an ISO 8601 time"
                                  ) from exc
    time = np.atleast_1d(decode_time(ds, tname, file=path))
    check_increasing(time, file=path, where=f"variable {tname}")
    bname = bounds_of(ds, tname)
    bnds = None
    if bname is not None:
        bnds = decode_time(ds, bname, file=path, units=ds[tname].attrs.get("units"),
                           calendar=ds[tname].attrs.get("calendar")).reshape(-1, 2)
        if bnds.shape[0] != time.size or np.any(np.isnat(bnds)) or np.any(
                bnds[:, 1] <= bnds[:, 0]):
            raise ArchiveError.at(str(path), f"variable {bname}",
                                  "bounds are missing, of the wrong shape or not increasing",
                                  "give each time a (start, end) pair with start < end")
    return tname, time, bnds


def _step(time, path, where) -> np.timedelta64 | None:
    """The file's time step (see module doc); None for a single stamp."""
    if time.size < 2:
        return None
    diffs = np.diff(time)
    values, counts = np.unique(diffs, return_counts=True)
    step = values[np.argmax(counts)]
    bad = np.flatnonzero(diffs % step != np.timedelta64(0, "ns"))
    if bad.size:
        i = int(bad[0]) + 1
        raise ArchiveError.at(
            str(path), f"{where}, index {i}",
            f"irregular time stamps ({time[i - 1]} then {time[i]}, the step is "
            f"{pd.Timedelta(step)}) and no time bounds",
            "add a time_bnds variable (CF bounds) or store regular stamps")
    return step


def _series(parts, paths, *, what: str) -> xr.Dataset:
    """Concatenate per-file datasets along time, sorted; reject duplicates/overlaps."""
    source = np.concatenate([np.full(p.sizes["time"], i) for i, p in enumerate(parts)])
    ds = xr.concat(parts, dim="time", data_vars="all", coords="minimal",
                   compat="override", join="override", combine_attrs="drop_conflicts")
    order = np.argsort(ds["time"].values, kind="stable")
    ds = ds.isel(time=order)
    source = source[order]
    t = ds["time"].values
    b = ds["time_bnds"].values
    for i in range(1, t.size):
        if t[i] == t[i - 1] or b[i, 0] < b[i - 1, 1]:
            kind = "the same time" if t[i] == t[i - 1] else "overlapping intervals"
            a_, b_ = paths[source[i - 1]], paths[source[i]]
            place = f"{a_} and {b_}" if a_ != b_ else str(a_)
            raise ArchiveError.at(
                place, f"time {t[i]}",
                f"{what} files give {kind} ({b[i - 1, 0]}..{b[i - 1, 1]} and "
                f"{b[i, 0]}..{b[i, 1]})",
                "keep one file per period (remove duplicates or overlapping files)")
    ds["time_bnds"].attrs = {}
    ds["time"].attrs = {"standard_name": "time", "bounds": "time_bnds"}
    ds.attrs["source_files"] = " ".join(str(p) for p in paths)
    return ds


def _as_list(paths):
    if isinstance(paths, (str, Path)):
        paths = [paths]
    paths = [Path(p) for p in paths]
    if not paths:
        raise ValueError("no files given")
    return paths


# ---------------------------------------------------------------- shortwave


def open_shortwave(paths) -> xr.Dataset:
    """Open gridded downwelling shortwave files as one lazy series.

    Parameters
    ----------
    paths : path or list of paths
        NetCDF files (e.g. one per month) on the same grid.

    Returns
    -------
    xarray.Dataset
        ``sw_down(time, latitude, longitude)`` or ``(time, y, x)`` [W m-2, mean over
        each interval]; ``time_bnds(time, nv)``; attrs ``crs_wkt``, ``shortwave_input``
        in {flux, accumulation}, ``longitude_range`` on latitude/longitude grids.
    """
    paths = _as_list(paths)
    files = []
    for path in paths:
        ds = open_netcdf(path, chunks={})
        name = find_first(ds, (SW_FLUX, SW_INTEGRAL), file=path)
        kind = "flux" if ds[name].attrs.get("standard_name") == SW_FLUX else "accumulation"
        tname, time, bnds = _time_of(ds, path, ds[name])
        da = canonical(ds, name, "W m-2" if kind == "flux" else "J m-2", file=path)
        tdim = _time_dim(ds, tname, da, path)
        if tdim is None:
            tdim = "time"
            da = da.expand_dims(time=1)
        da, attrs = _horizontal(ds, da, tdim, path, aux_2d=False)
        files.append((da.rename({tdim: "time"}) if tdim != "time" else da, time, bnds,
                      kind, attrs))
    steps = {i: _step(t, p, "variable time") for i, ((_, t, b, _, _), p)
             in enumerate(zip(files, paths, strict=True)) if b is None}
    known = {s for s in steps.values() if s is not None}
    parts = []
    for i, ((da, time, bnds, kind, attrs), path) in enumerate(zip(files, paths, strict=True)):
        if bnds is None:
            step = steps[i]
            if step is None:
                if len(known) != 1:
                    raise ArchiveError.at(str(path), "variable time",
                                          "a single time stamp without bounds, and no "
                                          "common step in the other files",
                                          "add a time_bnds variable (CF bounds)")
                step = next(iter(known))
            bnds = np.stack([time - step, time], axis=1)
        seconds = (bnds[:, 1] - bnds[:, 0]) / np.timedelta64(1, "s")
        sw = da if kind == "flux" else da / xr.DataArray(seconds, dims="time")
        sw = sw.assign_coords(time=("time", time)).rename("sw_down")
        sw.attrs = {"standard_name": SW_FLUX, "units": "W m-2",
                    "cell_methods": "time: mean"}
        part = sw.to_dataset()
        part["time_bnds"] = (("time", "nv"), bnds)
        part.attrs = {**attrs, "shortwave_input": kind}
        parts.append(part)
    _same_grid([(p["sw_down"], None) for p in parts], paths)
    return _series(parts, paths, what="shortwave")


def _time_dim(ds, tname, da, path):
    if tname is None or ds[tname].ndim == 0:
        return None
    tdim = ds[tname].dims[0]
    if tdim not in da.dims:
        raise ArchiveError.at(str(path), f"variable {da.name}",
                              f"does not have the time dimension {tdim!r}",
                              "store the field on (time, y, x)")
    return tdim


def read_shortwave_csv(path) -> xr.Dataset:
    """Read a per-deployment shortwave CSV (``time, sw_down_W_m2``).

    Each value is the mean over the interval ending at its stamp, of the series' step
    (the module's rule for files without bounds).

    Returns
    -------
    xarray.Dataset
        ``sw_down(time)`` [W m-2] and ``time_bnds(time, nv)``.
    """
    path = Path(path)
    table = read_data_csv(path, ("time", "sw_down_W_m2"))
    time = time_column(table, "time", file=path)
    check_increasing(time, file=path, where="column time (index = data row, 0 = line 2)")
    step = _step(time, path, "column time (index = data row, 0 = line 2)")
    if step is None:
        raise ArchiveError.at(str(path), "column time", "a single row gives no time step",
                              "give at least two rows")
    sw = numeric_column(table, "sw_down_W_m2", file=path)
    return xr.Dataset(
        {"sw_down": ("time", sw, {"standard_name": SW_FLUX, "units": "W m-2",
                                  "cell_methods": "time: mean"}),
         "time_bnds": (("time", "nv"), np.stack([time - step, time], axis=1))},
        coords={"time": ("time", time, {"standard_name": "time", "bounds": "time_bnds"})},
        attrs={"source": str(path), "shortwave_input": "flux"})


# ---------------------------------------------------------------- concentration


def _decoded_fraction(ds, name, path) -> xr.DataArray:
    """Raw -> fraction [1]: fills, flags and the valid range become NaN (lazily)."""
    raw = ds[name]
    attrs = raw.attrs
    bad = []
    for key in ("_FillValue", "missing_value", "flag_values"):
        if key in attrs:
            bad.extend(np.atleast_1d(attrs[key]).tolist())
    if "_FillValue" in raw.encoding:
        bad.append(raw.encoding["_FillValue"])
    invalid = raw.isin(bad) if bad else xr.zeros_like(raw, dtype=bool)
    vmin, vmax = attrs.get("valid_min"), attrs.get("valid_max")
    if "valid_range" in attrs:
        vmin, vmax = np.atleast_1d(attrs["valid_range"])[:2]
    if vmin is not None:
        invalid = invalid | (raw < vmin)
    if vmax is not None:
        invalid = invalid | (raw > vmax)
    value = raw.astype("float64") * float(attrs.get("scale_factor", 1.0)) + float(
        attrs.get("add_offset", 0.0))
    a, b = linear_conversion(units_of(ds, name, file=path), "1", file=path, variable=name)
    value = value * a + b
    tol = 1e-6
    invalid = invalid | (value < -tol) | (value > 1 + tol) | value.isnull()
    out = value.clip(0.0, 1.0).where(~invalid)
    out.name = name
    return out


def open_concentration(paths) -> xr.Dataset:
    """Open passive-microwave sea-ice concentration files as one lazy daily series.

    Parameters
    ----------
    paths : path or list of paths
        NetCDF files, one per day or with a time axis, on the same grid.

    Returns
    -------
    xarray.Dataset
        ``sea_ice_area_fraction(time, y, x)`` [1, 0-1, NaN where no data: fill values,
        ``flag_values``, outside the valid range or outside [0, 1]]; with ``x``/``y``
        [m] and attr ``crs_wkt``, or 2-D ``latitude``/``longitude`` coords (or a
        regular latitude/longitude grid); ``time_bnds`` from the file or the UTC day
        containing each stamp.
    """
    paths = _as_list(paths)
    parts = []
    for path in paths:
        ds = open_netcdf(path, chunks={}, mask_and_scale=False)
        name = find_variable(ds, file=path, standard_name=SIC)
        da = _decoded_fraction(ds, name, path)
        tname, time, bnds = _time_of(ds, path, da)
        tdim = _time_dim(ds, tname, da, path)
        if tdim is None:
            tdim = "time"
            da = da.expand_dims(time=1)
        da, attrs = _horizontal(ds, da, tdim, path, aux_2d=True)
        if tdim != "time":
            da = da.rename({tdim: "time"})
        if bnds is None:
            day = time.astype("datetime64[D]").astype("datetime64[ns]")
            bnds = np.stack([day, day + _ONE_DAY], axis=1)
        da = da.assign_coords(time=("time", time)).rename("sea_ice_area_fraction")
        da.attrs = {"standard_name": SIC, "units": "1"}
        part = da.to_dataset()
        part["time_bnds"] = (("time", "nv"), bnds)
        part.attrs = attrs
        parts.append(part)
    _same_grid([(p["sea_ice_area_fraction"], None) for p in parts], paths)
    return _series(parts, paths, what="concentration")


# ---------------------------------------------------------------- bathymetry


def open_bathymetry(path) -> xr.DataArray:
    """Open a sea-floor depth grid (NetCDF or GeoTIFF) as depth positive down.

    NetCDF: ``sea_floor_depth_below_geoid`` (positive down) or
    ``height_above_mean_sea_level`` (negated). GeoTIFF: the same standard names in a
    ``standard_name`` metadata tag (band or dataset), units from the band's unit or a
    ``units`` tag.

    Returns
    -------
    xarray.DataArray
        ``sea_floor_depth`` [m, positive down], lazy, dims ``(latitude, longitude)``
        or ``(y, x)`` (sorted ascending); attrs ``units``, ``positive``, ``crs_wkt``.
    """
    path = Path(path)
    if path.suffix.lower() in (".tif", ".tiff"):
        da, crs_wkt, standard_name = _bathymetry_tiff(path)
    else:
        ds = open_netcdf(path, chunks={})
        name = find_first(ds, (DEPTH, ELEVATION), file=path)
        standard_name = ds[name].attrs["standard_name"]
        da = canonical(ds, name, "m", file=path)
        da, attrs = _horizontal(ds, da, None, path, aux_2d=False)
        crs_wkt = attrs["crs_wkt"]
    if standard_name == ELEVATION:
        da = -da
    da = da.rename("sea_floor_depth")
    da.attrs = {"standard_name": DEPTH, "units": "m", "positive": "down",
                "crs_wkt": crs_wkt, "source": str(path)}
    return da


def _bathymetry_tiff(path: Path):
    import rasterio

    from floeheat.io._raster import WindowedBand

    try:
        with rasterio.open(path) as src:
            tags = {**src.tags(), **src.tags(1)}
            crs, transform, nodata = src.crs, src.transform, src.nodata
            units = src.units[0] or tags.get("units")
            shape = (src.height, src.width)
    except rasterio.errors.RasterioIOError as exc:
        raise ArchiveError.at(str(path), "", f"cannot be read as GeoTIFF ({exc})",
                              "copy the file again from its source") from exc
    standard_name = tags.get("standard_name")
    if standard_name not in (DEPTH, ELEVATION):
        raise ArchiveError.at(str(path), "band 1, tag standard_name",
                              f"standard_name is {standard_name!r}",
                              f"tag the band with standard_name {DEPTH} or {ELEVATION}")
    if not units:
        raise ArchiveError.at(str(path), "band 1", "no units (band unit or units tag)",
                              "set the band unit, e.g. 'm'")
    if crs is None:
        raise ArchiveError.at(str(path), "", "the GeoTIFF has no CRS",
                              "write the file with its CRS")
    if transform.b != 0 or transform.d != 0:
        raise ArchiveError.at(str(path), "geotransform", "the grid is rotated",
                              "warp the grid to a north-up grid")
    a, b = linear_conversion(units, "m", file=path, variable="band 1")
    data = dask.array.from_array(WindowedBand(path, 1), chunks=(512, 512),
                                 meta=np.empty((0, 0), np.float64)).astype("float64")
    if nodata is not None:
        data = dask.array.where(data == nodata, np.nan, data)
    data = data * a + b
    rows, cols = np.arange(shape[0]) + 0.5, np.arange(shape[1]) + 0.5
    xs = transform.c + transform.a * cols
    ys = transform.f + transform.e * rows
    crs = pyproj.CRS.from_user_input(crs.to_wkt())
    ydim, xdim = ("latitude", "longitude") if crs.is_geographic else ("y", "x")
    da = xr.DataArray(data, dims=(ydim, xdim), coords={ydim: ys, xdim: xs})
    return da.sortby([ydim, xdim]), crs.to_wkt(), standard_name
