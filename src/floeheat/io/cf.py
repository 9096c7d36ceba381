"""CF building blocks shared by the readers.

Finding variables by CF ``standard_name`` (or the archive's ``role`` attribute),
opening NetCDF files safely, converting to canonical units through
:mod:`floeheat.units`, decoding times to ``datetime64[ns]`` UTC and reading a CRS
from a CF ``grid_mapping``. Every failure is an :class:`~floeheat.errors.ArchiveError`
naming the file, the variable, the problem and the fix.
"""

from __future__ import annotations

import warnings
from collections.abc import Iterable
from pathlib import Path

import numpy as np
import pandas as pd
import pyproj
import xarray as xr

from floeheat.errors import ArchiveError
from floeheat.units import conversion, parse_units

__all__ = [
    "open_netcdf",
    "open_netcdf_windowed",
    "find_variable",
    "find_first",
    "units_of",
    "canonical",
    "linear_conversion",
    "decode_time",
    "check_increasing",
    "bounds_of",
    "crs_of",
    "crs_from_attrs",
    "normalise_longitude",
    "is_degrees",
    "degrees",
]

#: Errors the NetCDF libraries raise for unreadable, truncated or corrupt files.
_OPEN_ERRORS = (OSError, RuntimeError, ValueError, IndexError, KeyError, TypeError)


def open_netcdf(path, *, chunks=None, mask_and_scale: bool = True,
                probe: bool = True) -> xr.Dataset:
    """Open a NetCDF file without decoding times, turning bad files into ArchiveError.

    Times are left as numbers (see :func:`decode_time`), so that every time variable
    is decoded the same way and its failures name the variable.

    Parameters
    ----------
    path : str or Path
        The file.
    chunks : dict, optional
        Passed to :func:`xarray.open_dataset`; ``{}`` gives dask arrays with the
        file's own chunks (lazy reading).
    mask_and_scale : bool
        Apply ``_FillValue``/``missing_value``/``scale_factor``/``add_offset``.
    probe : bool
        Read the last element of every variable, so that a truncated file fails here
        (naming the file) rather than later inside a computation.

    Returns
    -------
    xarray.Dataset

    Raises
    ------
    ArchiveError
        When the file is missing, not NetCDF, truncated or corrupt.
    """
    path = _existing(path)
    try:
        if probe:
            _check_classic_size(path)
        kwargs = {"engine": "netcdf4", "decode_times": False, "decode_timedelta": False,
                  "mask_and_scale": mask_and_scale}
        ds = xr.open_dataset(path, **kwargs)
        if probe:  # through the lazily indexed backend arrays, before any dask
            for var in ds.variables.values():
                if var.size:
                    np.asarray(var[(-1,) * var.ndim].values)
        if chunks is not None:
            ds.close()
            ds = xr.open_dataset(path, chunks=chunks, **kwargs)
    except ArchiveError:
        raise
    except _OPEN_ERRORS as exc:
        raise _unreadable(path, exc) from exc
    return ds


def open_netcdf_windowed(path, *, mask_and_scale: bool = True) -> xr.Dataset:
    """Open a NetCDF file for reading windows: the header now, then only what is indexed.

    NetCDF-4 (HDF5) files are read through h5py (:mod:`floeheat.io._hdf5`), which
    reads the file's metadata and then only the chunks a selection touches; the NetCDF
    library would first read the file's first 4 MiB to identify its format. Classic
    files (their size checked against their header, no data read), and NetCDF-4 files
    using features that reader leaves to the NetCDF library, open as
    ``open_netcdf(path, probe=False)``. Both give the same Dataset; times are left as
    numbers (see :func:`decode_time`).

    Parameters
    ----------
    path : str or Path
        The file.
    mask_and_scale : bool
        Apply ``_FillValue``/``missing_value``/``scale_factor``/``add_offset``.

    Returns
    -------
    xarray.Dataset
        Lazy: variables other than dimension coordinates are read when indexed.

    Raises
    ------
    ArchiveError
        When the file is missing, not NetCDF, truncated or corrupt (a damaged chunk
        fails only when it is read).
    """
    from floeheat.io import _hdf5

    path = _existing(path)
    ds = None
    try:
        if _hdf5.is_hdf5(path):
            ds = _hdf5.open_dataset(path, mask_and_scale=mask_and_scale)
        else:
            _check_classic_size(path)
    except _OPEN_ERRORS as exc:
        raise _unreadable(path, exc) from exc
    return ds if ds is not None else open_netcdf(path, probe=False,
                                                 mask_and_scale=mask_and_scale)


def _existing(path) -> Path:
    """``path`` as a Path; ArchiveError when there is no such file."""
    path = Path(path)
    if not path.is_file():
        raise ArchiveError.at(str(path), "", "the file does not exist",
                              "check the path in the archive's tables or folders")
    return path


def _unreadable(path: Path, exc: Exception) -> ArchiveError:
    """The error for a file the NetCDF (or HDF5) library cannot read."""
    return ArchiveError.at(
        str(path), "", f"cannot be read as NetCDF, it may be truncated or corrupt ({exc})",
        "copy the file again from its source, or remove it from the archive")


def _check_classic_size(path: Path) -> None:
    """Raise ValueError when a classic-format (CDF-1/2) file is shorter than its header
    says: the NetCDF library itself reads missing bytes of such files as fill values."""
    with path.open("rb") as f:
        magic = f.read(4)
    if magic not in (b"CDF\x01", b"CDF\x02"):
        return
    from scipy.io import netcdf_file

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        with netcdf_file(path, mmap=True) as nc:
            # Mapping each variable's data checks that the file holds its extent.
            _ = [v.data.shape for v in nc.variables.values()]


def find_variable(ds: xr.Dataset, *, file, standard_name: str | None = None,
                  role: str | None = None, required: bool = True,
                  allow_many: bool = False) -> str | list[str] | None:
    """Name of the variable carrying a CF ``standard_name`` or an archive ``role``.

    Variables named in another variable's ``bounds`` attribute are skipped (CF lets
    bounds repeat their parent's attributes).

    Parameters
    ----------
    ds : xarray.Dataset
    file : str or Path
        The file, for messages.
    standard_name, role : str
        Exactly one of them: the value looked for in the attribute of that name.
    required : bool
        Raise when absent (else return None).
    allow_many : bool
        Return a list of all matches instead of raising when there are several.

    Examples
    --------
    >>> ds = xr.Dataset({"t": ("n", [1.0], {"standard_name": "sea_water_temperature"})})
    >>> find_variable(ds, file="a.nc", standard_name="sea_water_temperature")
    't'
    """
    if (standard_name is None) == (role is None):
        raise TypeError("give exactly one of standard_name and role")
    key, value = ("standard_name", standard_name) if role is None else ("role", role)
    bounds = {str(v.attrs["bounds"]) for v in ds.variables.values() if "bounds" in v.attrs}
    found = [str(name) for name, var in ds.variables.items()
             if str(var.attrs.get(key, "")).strip() == value and name not in bounds]
    if allow_many:
        return found
    if len(found) > 1:
        raise ArchiveError.at(
            str(file), f"variables {', '.join(found)}",
            f"{len(found)} variables claim {key} {value!r}, the format expects one",
            f"keep the {key} on one variable only")
    if not found:
        if not required:
            return None
        raise ArchiveError.at(
            str(file), f"{key} {value!r}", f"no variable has {key} = {value!r}",
            f"add the attribute {key} = {value!r} to the variable holding it")
    return found[0]


def find_first(ds: xr.Dataset, standard_names: Iterable[str], *, file) -> str:
    """Name of the variable with the first of ``standard_names`` present.

    Raises naming all the names looked for when none is present.
    """
    standard_names = list(standard_names)
    for name in standard_names:
        found = find_variable(ds, file=file, standard_name=name, required=False)
        if found is not None:
            return found
    raise ArchiveError.at(
        str(file), "standard_name " + " or ".join(repr(n) for n in standard_names),
        "no variable has any of these standard names",
        "add the standard_name attribute to the variable holding the quantity")


def units_of(ds: xr.Dataset, name: str, *, file) -> str:
    """The ``units`` attribute of a variable; ArchiveError when it has none."""
    units = ds[name].attrs.get("units")
    if units is None or str(units).strip() == "":
        raise ArchiveError.at(str(file), f"variable {name}", "has no units attribute",
                              "add a CF units attribute (e.g. 'degC', 'dbar', 'm')")
    return str(units).strip()


def linear_conversion(from_units: str, to_units: str, *, file, variable: str):
    """Scale and offset ``(a, b)`` so that ``to = a * from + b``, from the units library.

    All conversions the archive needs (multiplicative and offset units) are affine;
    the factor is taken from :func:`floeheat.units.conversion`, never from a table.
    The affine form lets lazy (dask) arrays be converted without computing them.

    Examples
    --------
    >>> linear_conversion("K", "degC", file="a.nc", variable="t")
    (1.0, -273.15)
    >>> linear_conversion("%", "1", file="a.nc", variable="c")
    (0.01, 0.0)
    """
    try:
        f = conversion(from_units, to_units)
    except ValueError as exc:
        raise ArchiveError.at(
            str(file), f"variable {variable}",
            f"units {from_units!r} cannot be converted to {to_units!r} ({exc})",
            f"give the variable units of the same kind as {to_units!r}") from exc
    b, one, two = (float(v) for v in f(np.array([0.0, 1.0, 2.0])))
    a = one - b
    if not np.isclose(two, 2 * a + b, rtol=1e-12, atol=1e-12):  # pragma: no cover
        raise ArchiveError.at(str(file), f"variable {variable}",
                              f"units {from_units!r} do not convert linearly to {to_units!r}",
                              f"store the variable in {to_units!r}")
    return round(a, 15), round(b, 12)


def canonical(ds: xr.Dataset, name: str, to_units: str, *, file) -> xr.DataArray:
    """The variable converted to ``to_units``, lazily when it is a dask array.

    The result carries ``units = to_units`` and keeps the variable's dims, coords and
    other attributes.

    Examples
    --------
    >>> ds = xr.Dataset({"p": ("n", [10000.0], {"units": "Pa"})})
    >>> float(canonical(ds, "p", "dbar", file="a.nc")[0])
    1.0
    """
    da = ds[name]
    a, b = linear_conversion(units_of(ds, name, file=file), to_units, file=file,
                             variable=name)
    out = da.astype("float64")
    if (a, b) != (1.0, 0.0):
        out = out * a + b
    out.attrs = dict(da.attrs)
    out.attrs["units"] = to_units
    out.name = name
    return out


def _to_datetime64(values: np.ndarray) -> np.ndarray:
    """cftime objects or datetime64 -> datetime64[ns]."""
    if values.dtype.kind == "M":
        return values.astype("datetime64[ns]")
    flat = [pd.NaT if v is None else pd.Timestamp(v.isoformat()) for v in values.ravel()]
    return np.asarray(pd.DatetimeIndex(flat).values, dtype="datetime64[ns]").reshape(values.shape)


def decode_time(ds: xr.Dataset, name: str, *, file, units: str | None = None,
                calendar: str | None = None) -> np.ndarray:
    """Decode a CF time variable to ``datetime64[ns]`` UTC (NaT where missing).

    Reference dates with a UTC offset are converted to UTC. Non-standard calendars
    are accepted while every date exists in the standard calendar.

    Parameters
    ----------
    ds : xarray.Dataset
        Opened with ``decode_times=False`` (see :func:`open_netcdf`).
    name : str
        The time variable (or its bounds variable).
    units, calendar : str, optional
        Override the variable's own attributes (bounds inherit their parent's).

    Examples
    --------
    >>> ds = xr.Dataset({"t": ("n", [0, 6], {"units": "hours since 2020-05-01 00:00"})})
    >>> decode_time(ds, "t", file="a.nc")
    array(['2020-05-01T00:00:00.000000000', '2020-05-01T06:00:00.000000000'],
          dtype='datetime64[ns]')
    """
    var = ds[name].variable
    attrs = {"units": units or var.attrs.get("units"),
             "calendar": calendar or var.attrs.get("calendar", "standard")}
    if var.dtype.kind == "M":
        return np.asarray(var.values, dtype="datetime64[ns]")
    if attrs["units"] is None or " since " not in str(attrs["units"]):
        raise ArchiveError.at(
            str(file), f"variable {name}",
            f"units {attrs['units']!r} are not CF time units",
            "give the time variable units like 'seconds since 1970-01-01 00:00:00'")
    raw = xr.Variable(var.dims, np.asarray(var.values), attrs)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            decoded = xr.coders.CFDatetimeCoder(time_unit="ns").decode(raw, name=name)
        return _to_datetime64(np.asarray(decoded.values))
    except (ValueError, OverflowError, TypeError) as exc:
        raise ArchiveError.at(
            str(file), f"variable {name}",
            f"times cannot be decoded with units {attrs['units']!r} and calendar "
            f"{attrs['calendar']!r} ({exc})",
            "use CF time units and a calendar whose dates exist in the standard one") from exc


def check_increasing(times: np.ndarray, *, file, where: str, strict: bool = True) -> None:
    """Raise naming the first index where ``times`` stop increasing (or are missing).

    Examples
    --------
    >>> t = np.array(["2020-01-01", "2020-01-01"], dtype="datetime64[ns]")
    >>> check_increasing(t, file="a.nc", where="variable time", strict=False)
    """
    times = np.asarray(times)
    missing = np.flatnonzero(pd.isna(times))
    if missing.size:
        raise ArchiveError.at(str(file), f"{where}, index {missing[0]}",
                              "a time is missing (NaN or fill value)",
                              "fill in the time or remove that record")
    diff = np.diff(times)
    bad = diff <= np.zeros_like(diff) if strict else diff < np.zeros_like(diff)
    if np.any(bad):
        i = int(np.flatnonzero(bad)[0]) + 1
        raise ArchiveError.at(
            str(file), f"{where}, index {i}",
            f"times are not {'strictly ' if strict else ''}increasing "
            f"({times[i - 1]} then {times[i]})",
            "store the records in time order without repeats")


def bounds_of(ds: xr.Dataset, name: str) -> str | None:
    """The bounds variable named by ``name``'s CF ``bounds`` attribute, if present."""
    bnds = ds[name].attrs.get("bounds")
    return str(bnds) if bnds is not None and str(bnds) in ds.variables else None


def crs_from_attrs(attrs: dict) -> pyproj.CRS:
    """A CRS from CF grid-mapping attributes, preferring ``crs_wkt``/``spatial_ref``.

    Examples
    --------
    >>> crs_from_attrs({"grid_mapping_name": "polar_stereographic",
    ...     "straight_vertical_longitude_from_pole": -45.0,
    ...     "standard_parallel": 70.0, "latitude_of_projection_origin": 90.0,
    ...     "false_easting": 0.0, "false_northing": 0.0,
    ...     "semi_major_axis": 6378137.0, "inverse_flattening": 298.257223563}).is_projected
    True
    """
    for key in ("crs_wkt", "spatial_ref"):
        if attrs.get(key):
            return pyproj.CRS.from_wkt(str(attrs[key]))
    return pyproj.CRS.from_cf(dict(attrs))


def _grid_mapping_names(text: str) -> list[str]:
    """Variable names in a ``grid_mapping`` attribute (short or extended form)."""
    return [tok.rstrip(":") for tok in str(text).split() if tok.endswith(":")] or [
        str(text).strip()]


def crs_of(ds: xr.Dataset, name: str | None, *, file, required: bool = True):
    """The CRS of variable ``name`` from its CF ``grid_mapping`` (or the file's).

    Looks at, in order: the variable's ``grid_mapping`` attribute, any variable with a
    ``grid_mapping_name``/``crs_wkt``/``spatial_ref`` attribute, and the global
    ``crs_wkt``/``spatial_ref`` attributes.

    Returns
    -------
    pyproj.CRS or None
        None only when ``required`` is False and no CRS is found.
    """
    candidates = []
    if name is not None and "grid_mapping" in ds[name].attrs:
        gm = _grid_mapping_names(ds[name].attrs["grid_mapping"])[0]
        if gm not in ds.variables:
            raise ArchiveError.at(str(file), f"variable {name}",
                                  f"its grid_mapping names {gm!r}, which is not in the file",
                                  "add the grid mapping variable or correct the attribute")
        candidates.append((gm, ds[gm].attrs))
    for vname, var in ds.variables.items():
        if any(k in var.attrs for k in ("grid_mapping_name", "crs_wkt", "spatial_ref")):
            candidates.append((str(vname), var.attrs))
    if any(k in ds.attrs for k in ("crs_wkt", "spatial_ref")):
        candidates.append(("global attributes", ds.attrs))
    for where, attrs in candidates:
        try:
            return crs_from_attrs(dict(attrs))
        except pyproj.exceptions.CRSError as exc:
            raise ArchiveError.at(str(file), f"variable {where}",
                                  f"the grid mapping does not describe a CRS ({exc})",
                                  "give CF grid_mapping attributes or a crs_wkt attribute"
                                  ) from exc
    if required:
        raise ArchiveError.at(str(file), f"variable {name}" if name else "",
                              "no CRS: no grid_mapping variable and no crs_wkt attribute",
                              "add a CF grid_mapping variable with a crs_wkt attribute")
    return None


def normalise_longitude(lon):
    """Longitudes to [-180, 180) degrees east.

    Examples
    --------
    >>> normalise_longitude(np.array([350.0, 10.0, 180.0]))
    array([ -10.,   10., -180.])
    """
    return (np.asarray(lon, dtype="float64") + 180.0) % 360.0 - 180.0


#: The spellings CF Conventions 1.11 (sections 4.1 and 4.2) recommend for latitude and
#: longitude units: recognised without loading the units registry.
_CF_DEGREES = {axis: {f"{d}{sep}{a}" for d in ("degree", "degrees")
                      for sep, a in (("_", axis), ("_", axis[0].upper()), ("", axis[0].upper()))}
               for axis in ("north", "east")}


def is_degrees(units: str, axis: str) -> bool:
    """Whether ``units`` are CF degrees for ``axis`` in {'north', 'east'}.

    Examples
    --------
    >>> is_degrees("degrees_north", "north"), is_degrees("degreeE", "east")
    (True, True)
    >>> is_degrees("m", "north")
    False
    """
    if str(units).strip() in _CF_DEGREES[axis]:
        return True
    try:
        parsed = str(parse_units(units))
    except ValueError:
        return False
    return parsed in {f"degrees_{axis}", "degree", "degrees", "arc_degree"}


def degrees(ds: xr.Dataset, standard_name: str, *, file) -> np.ndarray:
    """Values of the ``latitude``/``longitude`` variable, checking its units.

    Examples
    --------
    >>> ds = xr.Dataset({"la": ("n", [75.0], {"standard_name": "latitude",
    ...                                        "units": "degrees_north"})})
    >>> degrees(ds, "latitude", file="a.nc")
    array([75.])
    """
    name = find_variable(ds, file=file, standard_name=standard_name)
    axis = "north" if standard_name == "latitude" else "east"
    units = units_of(ds, name, file=file)
    if not is_degrees(units, axis):
        raise ArchiveError.at(str(file), f"variable {name}",
                              f"units {units!r} are not degrees_{axis}",
                              f"store {standard_name} in degrees_{axis}")
    return np.asarray(ds[name].values, dtype="float64")
