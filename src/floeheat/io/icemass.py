"""Ice mass-balance thermistor strings: NetCDF (``time`` x ``sensor``) or CSV.

Depths are positive down from the string's reference (the initial ice or snow
surface). A depth variable with ``positive = "up"`` is a height and is negated.
Times must increase strictly; sensors are returned sorted by depth.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import xarray as xr

from floeheat import constants
from floeheat.errors import ArchiveError
from floeheat.io._csv import numeric_column, read_data_csv, time_column
from floeheat.io.cf import (
    canonical,
    check_increasing,
    decode_time,
    degrees,
    find_variable,
    normalise_longitude,
    open_netcdf,
    units_of,
)
from floeheat.units import parse_units

__all__ = ["read_icemass", "CSV_SENSOR_COLUMN", "UNSPECIFIED_REFERENCE"]

#: CSV sensor columns: ``T_<depth in cm, positive down>``.
CSV_SENSOR_COLUMN = re.compile(r"T_(-?\d+(?:\.\d+)?)")
#: ``reference`` attribute when the file does not say which surface depths start at.
UNSPECIFIED_REFERENCE = "initial surface (not stated in the file)"


def read_icemass(path) -> xr.Dataset:
    """Read an ice mass-balance string record (NetCDF or ``.csv``).

    Returns
    -------
    xarray.Dataset
        Dims ``(time, sensor)``; coords ``time`` [datetime64 UTC], ``depth(sensor)``
        [m, positive down from the reference], ``latitude(time)``,
        ``longitude(time)`` [degrees, -180..180]; vars ``temperature(time, sensor)``
        [degC], optional ``ice_bottom_depth(time)`` [m, same frame], optional
        ``heated_rise(time, sensor)`` [K]; attrs ``reference``, ``source``.
    """
    path = Path(path)
    parts = _csv(path) if path.suffix.lower() == ".csv" else _netcdf(path)
    return _assemble(path, **parts)


def _netcdf(path: Path) -> dict:
    ds = open_netcdf(path)
    with ds:
        tname = find_variable(ds, file=path, standard_name="time")
        time = decode_time(ds, tname, file=path)
        check_increasing(time, file=path, where=f"variable {tname}")
        tdim = ds[tname].dims[0] if ds[tname].ndim == 1 else None
        if tdim is None:
            raise ArchiveError.at(str(path), f"variable {tname}", "time is not 1-D",
                                  "give the string record a time dimension")
        dname = find_variable(ds, file=path, standard_name="depth")
        if ds[dname].ndim != 1:
            raise ArchiveError.at(str(path), f"variable {dname}", "depth is not 1-D",
                                  "give one depth per sensor")
        sdim = ds[dname].dims[0]
        depth = canonical(ds, dname, "m", file=path).values
        positive = str(ds[dname].attrs.get("positive", "down")).strip().lower()
        if positive == "up":
            depth = -depth
        elif positive != "down":
            raise ArchiveError.at(str(path), f"variable {dname}, attribute positive",
                                  f"positive is {positive!r}", "set positive = 'down'")
        reference = str(ds[dname].attrs.get("reference", UNSPECIFIED_REFERENCE))
        temp = find_variable(ds, file=path, role="string_temperature")
        out = {"time": time, "depth": depth, "reference": reference,
               "temperature": _grid(ds, temp, tdim, sdim, "degC", path),
               "latitude": degrees(ds, "latitude", file=path),
               "longitude": degrees(ds, "longitude", file=path),
               "names": {"temperature": temp}}
        bottom = find_variable(ds, file=path, role="ice_bottom_depth", required=False)
        if bottom is not None:
            if ds[bottom].dims != (tdim,):
                raise ArchiveError.at(str(path), f"variable {bottom}",
                                      f"has dims {ds[bottom].dims}, expected ({tdim},)",
                                      "give one ice bottom depth per time")
            out["ice_bottom_depth"] = canonical(ds, bottom, "m", file=path).values
        rise = find_variable(ds, file=path, role="heated_temperature_rise", required=False)
        if rise is not None:
            out["heated_rise"] = _grid(ds, rise, tdim, sdim, "K", path, difference=True)
            out["names"]["heated_rise"] = rise
    for key in ("latitude", "longitude"):
        if out[key].shape != time.shape:
            raise ArchiveError.at(str(path), f"standard_name {key!r}",
                                  f"has shape {out[key].shape}, time has {time.shape}",
                                  "give one position per time")
    return out


def _grid(ds, name, tdim, sdim, units, path, difference=False) -> np.ndarray:
    """A (time, sensor) variable in ``units``; degC differences read as K."""
    if set(ds[name].dims) != {tdim, sdim}:
        raise ArchiveError.at(str(path), f"variable {name}",
                              f"has dims {ds[name].dims}, expected ({tdim}, {sdim})",
                              "store it on the time and sensor dimensions")
    if difference and "degree_Celsius" in str(parse_units(units_of(ds, name, file=path))):
        # A temperature rise in degC is a difference: 1 degC of rise = 1 K.
        sub = ds[[name]]
        sub[name].attrs["units"] = "delta_degC"
        values = canonical(sub, name, units, file=path)
    else:
        values = canonical(ds, name, units, file=path)
    return np.asarray(values.transpose(tdim, sdim).values, dtype="float64")


def _csv(path: Path) -> dict:
    table = read_data_csv(path, ("time", "latitude", "longitude"))
    sensors = [(c, CSV_SENSOR_COLUMN.fullmatch(c)) for c in table.columns if c.startswith("T_")]
    bad = [c for c, m in sensors if m is None]
    if bad:
        raise ArchiveError.at(str(path), f"header (line 1), column {bad[0]}",
                              "a sensor column name is not T_<depth in cm>",
                              "name sensor columns like T_-40 or T_150")
    if not sensors:
        raise ArchiveError.at(str(path), "header (line 1)", "no T_<depth in cm> columns",
                              "add one column per sensor")
    time = time_column(table, "time", file=path)
    check_increasing(time, file=path, where="column time (index = data row, 0 = line 2)")
    depth_cm = np.array([float(m.group(1)) for _, m in sensors])
    return {"time": time,
            "depth": depth_cm * constants.M_PER_CM,  # the contract names them in cm
            "reference": UNSPECIFIED_REFERENCE,
            "temperature": np.column_stack([numeric_column(table, c, file=path)
                                            for c, _ in sensors]),
            "latitude": numeric_column(table, "latitude", file=path),
            "longitude": numeric_column(table, "longitude", file=path),
            "names": {"temperature": "T_<cm> columns", "depth": [c for c, _ in sensors]}}


def _assemble(path, *, time, depth, reference, temperature, latitude, longitude, names,
              ice_bottom_depth=None, heated_rise=None) -> xr.Dataset:
    if np.all(np.isnan(temperature)):
        raise ArchiveError.at(str(path), f"variable {names['temperature']}",
                              "every temperature is missing (NaN or fill value)",
                              "fill in the data or remove the file from the archive")
    if np.any(np.isnan(depth)):
        raise ArchiveError.at(str(path), "depth", "a sensor depth is missing",
                              "give every sensor its depth")
    order = np.argsort(depth, kind="stable")
    depth = depth[order]
    dup = np.flatnonzero(np.diff(depth) == 0)
    if dup.size:
        raise ArchiveError.at(str(path), "depth",
                              f"two sensors share the depth {depth[dup[0]]:g} m",
                              "give each sensor its own depth")
    data = {"temperature": (("time", "sensor"), temperature[:, order],
                            {"units": "degC", "long_name": "string temperature"})}
    if ice_bottom_depth is not None:
        data["ice_bottom_depth"] = ("time", np.asarray(ice_bottom_depth, "float64"),
                                    {"units": "m", "positive": "down",
                                     "long_name": "ice bottom depth from the sounder"})
    if heated_rise is not None:
        data["heated_rise"] = (("time", "sensor"), heated_rise[:, order],
                               {"units": "K", "long_name": "rise after a heating pulse"})
    return xr.Dataset(
        data,
        coords={"time": ("time", np.asarray(time, "datetime64[ns]")),
                "depth": ("sensor", depth, {"standard_name": "depth", "units": "m",
                                            "positive": "down", "reference": reference}),
                "latitude": ("time", np.asarray(latitude, "float64"),
                             {"standard_name": "latitude", "units": "degrees_north"}),
                "longitude": ("time", normalise_longitude(longitude),
                              {"standard_name": "longitude", "units": "degrees_east"})},
        attrs={"reference": reference, "source": str(path)})
