"""Under-ice CTD profiles: CF DSG ``featureType = profile`` NetCDF in its three
layouts (orthogonal, incomplete, contiguous ragged) and the archive's CSV layout.

Pressure order: within each profile, samples must be stored in monotonic pressure
order. Downcasts (pressure not decreasing) are kept; upcasts (pressure not
increasing from first to last sample) are reversed; a profile whose pressure goes
both up and down is an error naming the profile, since such an order usually means
samples of different profiles were mixed. Samples without pressure, or with neither
temperature nor salinity (conductivity), are dropped.
"""

from __future__ import annotations

from pathlib import Path

import gsw
import numpy as np
import xarray as xr

from floeheat.errors import ArchiveError
from floeheat.io._csv import numeric_column, read_data_csv, time_column
from floeheat.io.cf import (
    canonical,
    decode_time,
    degrees,
    find_variable,
    linear_conversion,
    normalise_longitude,
    open_netcdf,
    units_of,
)

__all__ = ["read_profiles", "CSV_COLUMNS", "salinity_from_conductivity"]

#: Required columns of the CSV layout (plus salinity_psu or conductivity_mS_cm).
CSV_COLUMNS = ("profile_id", "time", "latitude", "longitude", "pressure_dbar",
               "temperature_degC")

_P, _T = "sea_water_pressure", "sea_water_temperature"
_S, _C = "sea_water_practical_salinity", "sea_water_electrical_conductivity"


def salinity_from_conductivity(c_mS_cm, t_degC, p_dbar):
    """Practical salinity (PSS-78) from conductivity [mS cm-1], in situ temperature
    [degC, ITS-90] and sea pressure [dbar], through ``gsw.SP_from_C``.

    The PSS-78 reference point C(35, 15 degC IPTS-68, 0) = 42.914 mS cm-1 gives
    SP = 35 at t90 = 15 / 1.00024 degC (UNESCO 1983, PSS-78 definition).

    Examples
    --------
    >>> round(float(salinity_from_conductivity(42.914, 15.0 / 1.00024, 0.0)), 4)
    35.0
    """
    return gsw.SP_from_C(c_mS_cm, t_degC, p_dbar)


def read_profiles(path) -> xr.Dataset:
    """Read a profile file (NetCDF in any CF DSG profile layout, or CSV).

    Parameters
    ----------
    path : str or Path
        ``.csv`` files are read as the CSV layout, everything else as NetCDF.

    Returns
    -------
    xarray.Dataset
        Dims ``(profile, level)``; coords ``time(profile)`` [datetime64 UTC],
        ``latitude(profile)`` [degrees_north], ``longitude(profile)`` [degrees_east,
        -180..180], ``profile_id(profile)`` [str]; vars ``pressure`` [dbar],
        ``temperature`` [degC, in situ], ``salinity`` [1, practical], NaN-padded,
        levels by increasing pressure, profiles by time; attrs ``layout`` in
        {orthogonal, incomplete, ragged, csv}, ``salinity_from`` in {salinity,
        conductivity}, ``source``.
    """
    path = Path(path)
    if path.suffix.lower() == ".csv":
        parts = _csv_profiles(path)
    else:
        parts = _netcdf_profiles(path)
    return _assemble(path, **parts)


# ---------------------------------------------------------------- NetCDF layouts


def _netcdf_profiles(path: Path) -> dict:
    ds = open_netcdf(path)
    with ds:
        feature = str(ds.attrs.get("featureType", "")).strip()
        if feature.lower() != "profile":
            raise ArchiveError.at(str(path), "global attribute featureType",
                                  f"featureType is {feature or 'missing'!r}, not 'profile'",
                                  "set the global attribute featureType = 'profile'")
        tname = find_variable(ds, file=path, standard_name="time")
        pname = find_variable(ds, file=path, standard_name=_P)
        tempname = find_variable(ds, file=path, standard_name=_T)
        sname = find_variable(ds, file=path, standard_name=_S, required=False)
        cname = None
        if sname is None:
            cname = find_variable(ds, file=path, standard_name=_C, required=False)
            if cname is None:
                raise ArchiveError.at(str(path), f"standard_name {_S!r}",
                                      f"neither {_S} nor {_C} is present",
                                      "add practical salinity or conductivity with its "
                                      "standard_name")
        sample = {"pressure": canonical(ds, pname, "dbar", file=path),
                  "temperature": canonical(ds, tempname, "degC", file=path)}
        if sname is not None:
            sample["salinity"] = _salinity(ds, sname, path)
        else:
            sample["conductivity"] = canonical(ds, cname, "mS cm-1", file=path)
        names = {"pressure": pname, "temperature": tempname, "salinity": sname,
                 "conductivity": cname}
        time_var = ds[tname]
        if time_var.ndim > 1:
            raise ArchiveError.at(str(path), f"variable {tname}",
                                  "time has more than one dimension",
                                  "give one time per profile")
        per_profile = {"time": decode_time(ds, tname, file=path),
                       "latitude": degrees(ds, "latitude", file=path),
                       "longitude": degrees(ds, "longitude", file=path),
                       "profile_id": _profile_ids(ds, time_var.dims)}
        ragged = [n for n, v in ds.variables.items() if "sample_dimension" in v.attrs]
        if ragged:
            arrays = _ragged(ds, str(ragged[0]), sample, names, path)
            layout = "ragged"
        else:
            arrays, layout = _multidimensional(time_var.dims, sample, names, path)
    n = arrays["pressure"].shape[0]
    for key in ("time", "latitude", "longitude"):
        value = np.atleast_1d(per_profile[key])
        if value.shape != (n,):
            raise ArchiveError.at(str(path), f"standard_name {key!r}",
                                  f"has {value.size} values for {n} profiles",
                                  "give one value per profile")
        per_profile[key] = value
    if per_profile["profile_id"] is None:
        per_profile["profile_id"] = np.array([str(i) for i in range(n)])
    return {**arrays, **per_profile, "layout": layout, "names": names}


def _salinity(ds, name, path) -> xr.DataArray:
    """Practical salinity; only units meaning the PSS-78 number itself (1, psu)."""
    units = units_of(ds, name, file=path)
    if linear_conversion(units, "1", file=path, variable=name) != (1.0, 0.0):
        raise ArchiveError.at(str(path), f"variable {name}",
                              f"units {units!r} are not those of practical salinity",
                              "give practical salinity units '1' or 'psu'")
    return canonical(ds, name, "1", file=path)


def _profile_ids(ds, profile_dims):
    for var in ds.variables.values():
        if var.attrs.get("cf_role") == "profile_id" and var.dims == profile_dims:
            values = np.atleast_1d(var.values)
            return np.array([v.decode() if isinstance(v, bytes) else str(v) for v in values])
    return None


def _ragged(ds, rs_name, sample, names, path) -> dict:
    rs = ds[rs_name]
    sdim = str(rs.attrs["sample_dimension"])
    if rs.ndim != 1 or sdim not in ds.dims:
        raise ArchiveError.at(str(path), f"variable {rs_name}",
                              f"sample_dimension {sdim!r} is not a dimension of the file",
                              "name the sample dimension in sample_dimension")
    counts = np.asarray(rs.values)
    if np.any(~np.isfinite(counts.astype("float64"))) or np.any(counts < 0):
        raise ArchiveError.at(str(path), f"variable {rs_name}",
                              "row sizes are missing or negative",
                              "give the number of samples of each profile")
    counts = counts.astype("int64")
    if counts.sum() != ds.sizes[sdim]:
        raise ArchiveError.at(str(path), f"variable {rs_name}",
                              f"row sizes add up to {counts.sum()}, the sample dimension "
                              f"{sdim!r} has {ds.sizes[sdim]}",
                              "make the row sizes add up to the number of samples")
    width = max(int(counts.max(initial=0)), 1)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    out = {}
    for key, da in sample.items():
        if da.dims != (sdim,):
            raise ArchiveError.at(str(path), f"variable {names[key]}",
                                  f"has dims {da.dims}, expected ({sdim},)",
                                  "store sample variables along the sample dimension")
        flat = np.asarray(da.values, dtype="float64")
        grid = np.full((counts.size, width), np.nan)
        for k, (s, c) in enumerate(zip(starts, counts, strict=True)):
            grid[k, :c] = flat[s:s + c]
        out[key] = grid
    return out


def _multidimensional(profile_dims, sample, names, path):
    pressure = sample["pressure"]
    temp = sample["temperature"]
    if len(profile_dims) == 0:  # a single profile: every sample variable is 1-D
        out = {k: np.asarray(v.values, dtype="float64")[None, :] for k, v in sample.items()}
        return _same_shape(out, names, path), "orthogonal"
    pdim = profile_dims[0]
    if temp.ndim != 2 or pdim not in temp.dims:
        raise ArchiveError.at(str(path), f"variable {names['temperature']}",
                              f"has dims {temp.dims}, expected ({pdim}, <vertical>)",
                              "store samples on (profile, level) or use the ragged layout")
    vdim = next(d for d in temp.dims if d != pdim)
    layout = "orthogonal" if pressure.dims == (vdim,) else "incomplete"
    out = {}
    for key, da in sample.items():
        if set(da.dims) not in ({pdim, vdim}, {vdim}):
            raise ArchiveError.at(str(path), f"variable {names[key]}",
                                  f"has dims {da.dims}, expected ({pdim}, {vdim})",
                                  "store all sample variables on the same dimensions")
        da = da.broadcast_like(temp) if da.dims == (vdim,) else da
        out[key] = np.asarray(da.transpose(pdim, vdim).values, dtype="float64")
    return _same_shape(out, names, path), layout


def _same_shape(out, names, path):
    shape = out["temperature"].shape
    for key, arr in out.items():
        if arr.shape != shape:
            raise ArchiveError.at(str(path), f"variable {names[key]}",
                                  f"has shape {arr.shape}, temperature has {shape}",
                                  "store all sample variables on the same dimensions")
    return out


# ---------------------------------------------------------------- CSV layout


def _csv_profiles(path: Path) -> dict:
    table = read_data_csv(path, CSV_COLUMNS)
    if "salinity_psu" in table.columns:
        skey, scol = "salinity", "salinity_psu"
    elif "conductivity_mS_cm" in table.columns:
        skey, scol = "conductivity", "conductivity_mS_cm"
    else:
        raise ArchiveError.at(str(path), "header (line 1)",
                              "neither salinity_psu nor conductivity_mS_cm is a column",
                              "add one of the two columns")
    ids = table["profile_id"].str.strip().to_numpy()
    empty = np.flatnonzero(ids == "")
    if empty.size:
        raise ArchiveError.at(str(path), f"line {empty[0] + 2}, column profile_id",
                              "the profile ID is empty", "give every sample its profile ID")
    time = time_column(table, "time", file=path)
    columns = {"pressure": numeric_column(table, "pressure_dbar", file=path),
               "temperature": numeric_column(table, "temperature_degC", file=path),
               skey: numeric_column(table, scol, file=path)}
    lat = numeric_column(table, "latitude", file=path)
    lon = numeric_column(table, "longitude", file=path)
    unique, first, inverse = np.unique(ids, return_index=True, return_inverse=True)
    rank = np.argsort(first)  # profiles in order of first appearance
    order = unique[rank]
    position = np.empty_like(rank)
    position[rank] = np.arange(rank.size)
    by_profile = position[inverse.ravel()]
    # each profile's samples in file order (a stable sort keeps it)
    samples = np.argsort(by_profile, kind="stable")
    rows = np.split(samples, np.cumsum(np.bincount(by_profile, minlength=rank.size))[:-1])
    width = max(len(r) for r in rows)
    arrays = {k: np.full((len(rows), width), np.nan) for k in columns}
    for k, r in enumerate(rows):
        for key, values in columns.items():
            arrays[key][k, :len(r)] = values[r]
    heads = np.array([r[0] for r in rows])
    names = {"pressure": "pressure_dbar", "temperature": "temperature_degC", skey: scol}
    # A profile's time and position are those of its first sample in file order.
    return {**arrays, "time": time[heads], "latitude": lat[heads], "longitude": lon[heads],
            "profile_id": order.astype(str), "layout": "csv", "names": names}


# ---------------------------------------------------------------- common


def _assemble(path, *, pressure, temperature, time, latitude, longitude, profile_id,
              layout, names, salinity=None, conductivity=None) -> xr.Dataset:
    salinity_from = "salinity" if salinity is not None else "conductivity"
    third = salinity if salinity is not None else conductivity
    for key, arr in (("pressure", pressure), ("temperature", temperature),
                     (salinity_from, third)):
        if np.all(np.isnan(arr)):
            raise ArchiveError.at(str(path), f"variable {names[key]}",
                                  "every value is missing (NaN or fill value)",
                                  "fill in the data or remove the variable's profiles")
    bad_t = np.flatnonzero(np.isnat(time))
    if bad_t.size:
        raise ArchiveError.at(str(path), f"time of profile {profile_id[bad_t[0]]!r}",
                              "the profile time is missing", "give every profile a time")
    n = pressure.shape[0]
    cols = [_ordered(path, profile_id[k], pressure[k], temperature[k], third[k])
            for k in range(n)]
    width = max(max(len(c[0]) for c in cols), 1)
    out = np.full((3, n, width), np.nan)
    for k, c in enumerate(cols):
        out[:, k, :len(c[0])] = c
    p, t, s = out
    if conductivity is not None:
        s = salinity_from_conductivity(s, t, p)
    order = np.argsort(time, kind="stable")
    dims = ("profile", "level")
    ds = xr.Dataset(
        {"pressure": (dims, p[order], {"standard_name": _P, "units": "dbar"}),
         "temperature": (dims, t[order], {"standard_name": _T, "units": "degC",
                                          "comment": "in situ, ITS-90"}),
         "salinity": (dims, np.asarray(s)[order], {"standard_name": _S, "units": "1"})},
        coords={"time": ("profile", np.asarray(time, "datetime64[ns]")[order]),
                "latitude": ("profile", np.asarray(latitude, "float64")[order],
                             {"standard_name": "latitude", "units": "degrees_north"}),
                "longitude": ("profile", normalise_longitude(longitude)[order],
                              {"standard_name": "longitude", "units": "degrees_east"}),
                "profile_id": ("profile", np.asarray(profile_id, dtype=str)[order])},
        attrs={"layout": layout, "salinity_from": salinity_from, "source": str(path)})
    return ds


def _ordered(path, pid, p, t, s) -> np.ndarray:
    """One profile's valid samples (3, n) by increasing pressure (see module doc).

    Valid: pressure present and temperature or salinity/conductivity present (the
    orthogonal layout stores every level for every profile)."""
    keep = ~np.isnan(p) & ~(np.isnan(t) & np.isnan(s))
    p, t, s = p[keep], t[keep], s[keep]
    step = np.diff(p)
    if np.any(step < 0):
        if np.all(step <= 0):
            p, t, s = p[::-1], t[::-1], s[::-1]
        else:
            i = int(np.flatnonzero(step < 0)[0]) + 1
            raise ArchiveError.at(
                str(path), f"profile {str(pid)!r}, sample index {i} (0-based, among its "
                "valid samples)",
                f"pressure decreases from {p[i - 1]:g} to {p[i]:g} dbar in a profile whose "
                "pressure also increases",
                "store each profile's samples in pressure order (down- or upcast)")
    return np.vstack([p, t, s])
