"""Drift track of a floe from the position fixes of its instruments.

The profiler and the thermistor string on one floe both report positions. This module
merges them into one track, rejects fixes that imply an implausible drift speed
(geodesic distances on the WGS 84 ellipsoid, :class:`pyproj.Geod`), and interpolates the
track to any times in a projected working CRS (polar stereographic by hemisphere,
``constants.CRS_WORKING_*``), so interpolation behaves near the pole and across the
antimeridian. Times are ``datetime64[ns]`` UTC; latitudes and longitudes in degrees,
longitudes returned in [-180, 180).
"""

from __future__ import annotations

import threading
from collections.abc import Iterable
from typing import NamedTuple

import numpy as np
import pandas as pd
import xarray as xr
from pyproj import CRS, Geod, Transformer

from floeheat import constants as C

__all__ = [
    "hemisphere",
    "working_crs",
    "merge_fixes",
    "segment_speeds",
    "reject_fast_fixes",
    "to_working_crs",
    "interpolate_track",
    "interpolate_positions",
    "project_track",
    "positions_on",
    "ProjectedTrack",
    "clean_track",
]

_GEOD = Geod(ellps="WGS84")
_NS = 1.0e-9
#: Neighbours on each side whose median position decides, for a fast segment that is
#: not a single spike, which end is the outlier. Common practice, no source.
_MEDIAN_HALF_WINDOW = 3


def _ns(t) -> np.ndarray:
    t = getattr(t, "values", t)
    if isinstance(t, np.ndarray) and t.dtype == "datetime64[ns]":
        return np.atleast_1d(t)  # naive times are UTC already
    return np.asarray(pd.to_datetime(np.atleast_1d(t), utc=True).tz_convert(None),
                      dtype="datetime64[ns]")


_TRANSFORMERS = threading.local()


def _transformer(source, target) -> Transformer:
    """A lon/lat-ordered transformer, kept per thread for CRSs given as strings
    (building one costs far more than transforming a track)."""
    if not (isinstance(source, str) and isinstance(target, str)):
        return Transformer.from_crs(CRS.from_user_input(source), CRS.from_user_input(target),
                                    always_xy=True)
    cache = getattr(_TRANSFORMERS, "cache", None)
    if cache is None:
        cache = _TRANSFORMERS.cache = {}
    key = (source, target)
    if key not in cache:
        cache[key] = Transformer.from_crs(source, target, always_xy=True)
    return cache[key]


def _wrap_lon(lon) -> np.ndarray:
    return (np.asarray(lon, dtype=float) + 180.0) % 360.0 - 180.0


def hemisphere(latitude_deg) -> str:
    """Hemisphere of a set of positions, from the sign of their median latitude.

    Parameters
    ----------
    latitude_deg : array_like of float
        Latitudes [degrees_north]; NaN ignored.

    Returns
    -------
    str
        {"north", "south"}.

    Raises
    ------
    ValueError
        When no latitude is finite.

    Examples
    --------
    >>> hemisphere([78.2, 79.0, np.nan])
    'north'
    >>> hemisphere(-66.5)
    'south'
    """
    lat = np.asarray(latitude_deg, dtype=float).ravel()
    lat = lat[np.isfinite(lat)]
    if lat.size == 0:
        raise ValueError("no finite latitude to decide the hemisphere from")
    return "north" if np.median(lat) >= 0.0 else "south"


def working_crs(hemisphere_name: str) -> str:
    """The working CRS of a hemisphere (``constants.CRS_WORKING_NORTH/SOUTH``).

    Parameters
    ----------
    hemisphere_name : str
        {"north", "south"}.

    Returns
    -------
    str
        An EPSG code string.

    Examples
    --------
    >>> working_crs("north")
    'EPSG:3413'
    """
    if hemisphere_name == "north":
        return C.CRS_WORKING_NORTH
    if hemisphere_name == "south":
        return C.CRS_WORKING_SOUTH
    raise ValueError(f"hemisphere must be 'north' or 'south', got {hemisphere_name!r}")


def _columns(fixes) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    if isinstance(fixes, xr.Dataset):
        t = fixes["time"].values
        lat, lon = fixes["latitude"].values, fixes["longitude"].values
    elif isinstance(fixes, pd.DataFrame | dict):
        t, lat, lon = fixes["time"], fixes["latitude"], fixes["longitude"]
    else:
        t, lat, lon = fixes
    t = _ns(t)
    lat = np.asarray(lat, dtype=float).ravel()
    lon = np.asarray(lon, dtype=float).ravel()
    if not t.size == lat.size == lon.size:
        raise ValueError("time, latitude and longitude must have the same length")
    return t, lat, lon


def merge_fixes(*fixes) -> xr.Dataset:
    """Merge the position fixes of several instruments into one sorted set.

    Fixes with a missing time, latitude or longitude are dropped, as are latitudes
    outside [-90, 90]. Where several fixes share one time stamp, the fix of the
    instrument given first is kept (the order of the arguments is the order of trust).

    Parameters
    ----------
    *fixes : xarray.Dataset, pandas.DataFrame, dict or (time, latitude, longitude)
        Each with ``time`` [datetime64, UTC], ``latitude`` [degrees_north] and
        ``longitude`` [degrees_east, any range] of equal length, e.g. the profiler's
        coords ``(profile)`` and the string's ``(time)``.

    Returns
    -------
    xarray.Dataset
        Dim ``time`` (sorted, unique): ``latitude``, ``longitude`` [degrees, longitude in
        [-180, 180)], ``source`` (int, the argument index each fix came from).

    Examples
    --------
    >>> a = (np.array(["2020-06-01T00", "2020-06-01T02"], "datetime64[ns]"), [80, 80.1], [10, 10])
    >>> b = (np.array(["2020-06-01T01", "2020-06-01T02"], "datetime64[ns]"), [80.05, 9], [370, 9])
    >>> m = merge_fixes(a, b)
    >>> m.longitude.values.tolist(), m.source.values.tolist()
    ([10.0, 10.0, 10.0], [0, 1, 0])
    """
    if not fixes:
        raise ValueError("no fixes given")
    parts = []
    for k, f in enumerate(fixes):
        t, lat, lon = _columns(f)
        parts.append(pd.DataFrame({"time": t, "latitude": lat, "longitude": lon,
                                   "source": np.full(t.size, k)}))
    df = pd.concat(parts, ignore_index=True)
    ok = (df["time"].notna() & np.isfinite(df["latitude"]) & np.isfinite(df["longitude"])
          & (df["latitude"].abs() <= 90.0))
    df = df[ok].sort_values(["time", "source"], kind="stable")
    df = df.drop_duplicates("time", keep="first")
    return xr.Dataset(
        {"latitude": ("time", df["latitude"].to_numpy(float), {"units": "degrees_north"}),
         "longitude": ("time", _wrap_lon(df["longitude"].to_numpy(float)),
                       {"units": "degrees_east"}),
         "source": ("time", df["source"].to_numpy(int))},
        coords={"time": df["time"].to_numpy("datetime64[ns]")})


def segment_speeds(time, latitude_deg, longitude_deg) -> np.ndarray:
    """Drift speed along each segment between consecutive fixes.

    Parameters
    ----------
    time : array_like of datetime64, shape (n,)
        Increasing times (UTC).
    latitude_deg, longitude_deg : array_like of float, shape (n,)
        Positions [degrees].

    Returns
    -------
    numpy.ndarray, shape (n - 1,)
        Geodesic distance on the WGS 84 ellipsoid divided by the time step [m s-1];
        ``inf`` for a zero time step with a nonzero distance.

    Examples
    --------
    >>> t = np.array(["2020-06-01T00", "2020-06-01T01"], "datetime64[ns]")
    >>> round(float(segment_speeds(t, [0.0, 0.0], [0.0, 0.01])[0]), 4)  # 1113.19 m in 1 h
    0.3092
    """
    t = _ns(time).astype(np.int64).astype(float) * _NS
    lat = np.asarray(latitude_deg, dtype=float)
    lon = np.asarray(longitude_deg, dtype=float)
    _, _, dist = _GEOD.inv(lon[:-1], lat[:-1], lon[1:], lat[1:])
    dt = np.diff(t)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(dt > 0, np.asarray(dist) / np.where(dt > 0, dt, 1.0),
                        np.where(np.asarray(dist) > 0, np.inf, 0.0))


def _median_offset(x, y, i_pos):
    """Distance of each kept fix from the median of its neighbours (projected)."""
    n = x.size
    lo, hi = max(i_pos - _MEDIAN_HALF_WINDOW, 0), min(i_pos + _MEDIAN_HALF_WINDOW + 1, n)
    nb = [j for j in range(lo, hi) if j != i_pos]
    return float(np.hypot(x[i_pos] - np.median(x[nb]), y[i_pos] - np.median(y[nb])))


def reject_fast_fixes(time, latitude_deg, longitude_deg,
                      max_speed_m_s: float = C.MAX_DRIFT_SPEED_M_S) -> np.ndarray:
    """Which fixes to keep so that no segment implies a drift faster than a limit.

    Iterative rule. Each interior fix is scored by the slower of its two adjacent
    segments: a single spike makes both of its segments fast, while its neighbours keep
    one slow segment, so the spike scores highest. Every fix whose score exceeds the
    limit and is a local maximum is removed, speeds are recomputed between the remaining
    fixes, and the step repeats. When no interior spike is left, a first or last fix
    whose only segment is fast is removed. A fast segment that remains (e.g. two
    consecutive bad fixes) loses the end lying farther from the median position of its
    neighbours (3 on each side, in the working CRS).

    Parameters
    ----------
    time : array_like of datetime64, shape (n,)
        Strictly increasing times (UTC), e.g. from :func:`merge_fixes`.
    latitude_deg, longitude_deg : array_like of float, shape (n,)
        Positions [degrees].
    max_speed_m_s : float, optional
        Fastest plausible drift [m s-1] (default ``constants.MAX_DRIFT_SPEED_M_S``).

    Returns
    -------
    numpy.ndarray of bool, shape (n,)
        True for fixes kept.

    Examples
    --------
    >>> t = np.arange(5) * np.timedelta64(3600, "s") + np.datetime64("2020-06-01", "ns")
    >>> lat = [80.0, 80.001, 80.5, 80.003, 80.004]   # the middle fix is 55 km off
    >>> reject_fast_fixes(t, lat, [0.0] * 5).tolist()
    [True, True, False, True, True]
    """
    t = _ns(time)
    lat = np.asarray(latitude_deg, dtype=float)
    lon = np.asarray(longitude_deg, dtype=float)
    if np.any(np.diff(t.astype(np.int64)) <= 0):
        raise ValueError("times must be strictly increasing (use merge_fixes first)")
    keep = np.ones(t.size, dtype=bool)
    x = y = None
    while keep.sum() >= 2:
        idx = np.nonzero(keep)[0]
        v = segment_speeds(t[idx], lat[idx], lon[idx])
        if not np.any(v > max_speed_m_s):
            break
        left = np.concatenate([[np.nan], v])
        right = np.concatenate([v, [np.nan]])
        score = np.fmin(left, right)
        score[[0, -1]] = -np.inf  # end fixes are judged after interior spikes
        prev = np.concatenate([[-np.inf], score[:-1]])
        nxt = np.concatenate([score[1:], [-np.inf]])
        drop = (score > max_speed_m_s) & (score > prev) & (score >= nxt)
        if not drop.any():
            drop = np.zeros(idx.size, dtype=bool)
            drop[0] = v[0] > max_speed_m_s
            drop[-1] = v[-1] > max_speed_m_s and idx.size > 2
        if not drop.any():
            if x is None:
                x, y = to_working_crs(lat, lon, working_crs(hemisphere(lat)))
            s = int(np.argmax(v))  # fastest segment between kept fixes idx[s], idx[s+1]
            xs, ys = x[idx], y[idx]
            a, b = _median_offset(xs, ys, s), _median_offset(xs, ys, s + 1)
            drop = np.zeros(idx.size, dtype=bool)
            drop[s if a >= b else s + 1] = True
        keep[idx[drop]] = False
    return keep


def to_working_crs(latitude_deg, longitude_deg, crs=C.CRS_WORKING_NORTH):
    """Project positions to a projected CRS.

    Parameters
    ----------
    latitude_deg, longitude_deg : array_like of float
        Positions [degrees] on WGS 84.
    crs : str or pyproj.CRS, optional
        Target CRS (default ``constants.CRS_WORKING_NORTH``).

    Returns
    -------
    x, y : numpy.ndarray of float
        Projected coordinates [CRS units, metres for the working CRSs], same shape.

    Examples
    --------
    >>> x, y = to_working_crs(75.0, -150.0, "EPSG:3413")
    >>> round(float(x), 3), round(float(y), 3)
    (-1578206.404, 422879.131)
    """
    tr = _transformer("EPSG:4326", crs)
    x, y = tr.transform(np.asarray(longitude_deg, dtype=float),
                        np.asarray(latitude_deg, dtype=float))
    return np.asarray(x, dtype=float), np.asarray(y, dtype=float)


class ProjectedTrack(NamedTuple):
    """A track's valid fixes in a projected CRS (:func:`project_track`): times [s since
    1970], x and y [m] and the CRS, for interpolating it at many sets of times; ``span``
    the first and last time given (fixes with or without a position), or None."""

    t_s: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    crs: object
    span: tuple | None = None


def project_track(time, latitude_deg, longitude_deg, crs=None) -> ProjectedTrack:
    """The valid fixes of a track projected once (the working CRS of its hemisphere
    unless ``crs`` is given), for :func:`positions_on`."""
    given = _ns(time)
    span = (given[0], given[-1]) if given.size else None
    t = given.astype(np.int64).astype(float) * _NS
    lat = np.asarray(latitude_deg, dtype=float).ravel()
    lon = np.asarray(longitude_deg, dtype=float).ravel()
    ok = np.isfinite(lat) & np.isfinite(lon) & np.isfinite(t)
    t, lat, lon = t[ok], lat[ok], lon[ok]
    if crs is None:
        crs = working_crs(hemisphere(lat))
    if t.size == 0:
        return ProjectedTrack(t, t.copy(), t.copy(), crs, span)
    x, y = to_working_crs(lat, lon, crs)
    return ProjectedTrack(t, x, y, crs, span)


def positions_on(track: ProjectedTrack, target_time, max_gap=None):
    """:func:`interpolate_positions` of a track projected by :func:`project_track`."""
    t, x, y, crs, _ = track
    td = _ns(target_time)
    ts = td.astype(np.int64).astype(float) * _NS
    xo = np.full(ts.shape, np.nan)
    yo = np.full(ts.shape, np.nan)
    if t.size >= 1:
        inside = (ts >= t[0]) & (ts <= t[-1])
        xo[inside] = np.interp(ts[inside], t, x)
        yo[inside] = np.interp(ts[inside], t, y)
        if max_gap is not None and t.size >= 2:
            gap_s = pd.Timedelta(max_gap).total_seconds()
            i = np.clip(np.searchsorted(t, ts, side="right") - 1, 0, t.size - 2)
            on_fix = np.isin(ts, t)
            bad = inside & ~on_fix & (t[i + 1] - t[i] > gap_s)
            xo[bad] = yo[bad] = np.nan
    lono, lato = _transformer(crs, "EPSG:4326").transform(xo, yo)
    lono = np.where(np.isfinite(xo), _wrap_lon(lono), np.nan)
    lato = np.where(np.isfinite(yo), lato, np.nan)
    return lato, lono, xo, yo, crs


def interpolate_positions(time, latitude_deg, longitude_deg, target_time, crs=None,
                          max_gap=None):
    """The numbers of :func:`interpolate_track` as plain arrays: ``(latitude,
    longitude, x_m, y_m, crs)`` (no xarray objects, for per-scene loops and small jobs).
    A track interpolated at many sets of times is projected once with
    :func:`project_track` and interpolated with :func:`positions_on`.
    """
    return positions_on(project_track(time, latitude_deg, longitude_deg, crs), target_time,
                        max_gap)


def interpolate_track(time, latitude_deg, longitude_deg, target_time, crs=None,
                      max_gap=None) -> xr.Dataset:
    """Positions at any times, linear in a projected CRS between neighbouring fixes.

    Target times outside the span of the fixes are NaN (no extrapolation); a target
    time falling in a gap between fixes longer than ``max_gap`` is NaN too.

    Parameters
    ----------
    time : array_like of datetime64, shape (n,)
        Increasing fix times (UTC); NaN positions are skipped.
    latitude_deg, longitude_deg : array_like of float, shape (n,)
        Fix positions [degrees].
    target_time : array_like of datetime64, shape (m,)
        Times wanted (UTC).
    crs : str or pyproj.CRS, optional
        The CRS interpolated in; default the working CRS of the fixes' hemisphere.
    max_gap : pandas.Timedelta or numpy.timedelta64, optional
        Longest gap between fixes that is bridged; default None (any gap).

    Returns
    -------
    xarray.Dataset
        Dim ``time`` (the target times): ``latitude``, ``longitude`` [degrees, longitude
        in [-180, 180)], ``x_m``, ``y_m`` [m in ``crs``]; attr ``crs`` (the CRS as
        given or chosen).

    Examples
    --------
    >>> t = np.array(["2020-06-01T00", "2020-06-01T02"], "datetime64[ns]")
    >>> out = interpolate_track(t, [85.0, 85.0], [179.5, -179.5],
    ...                         np.array(["2020-06-01T01"], "datetime64[ns]"))
    >>> round(abs(float(out.longitude[0])), 6), out.attrs["crs"]
    (180.0, 'EPSG:3413')
    """
    td = _ns(target_time)
    lato, lono, xo, yo, crs = interpolate_positions(time, latitude_deg, longitude_deg,
                                                    target_time, crs, max_gap)
    return _track_dataset(td, lato, lono, xo, yo, crs)


def _track_dataset(t, lat, lon, x, y, crs) -> xr.Dataset:
    crs_attr = crs if isinstance(crs, str) else CRS.from_user_input(crs).to_string()
    return xr.Dataset(
        {"latitude": ("time", np.asarray(lat, float), {"units": "degrees_north"}),
         "longitude": ("time", np.asarray(lon, float), {"units": "degrees_east"}),
         "x_m": ("time", np.asarray(x, float), {"units": "m"}),
         "y_m": ("time", np.asarray(y, float), {"units": "m"})},
        coords={"time": np.asarray(t, dtype="datetime64[ns]")},
        attrs={"crs": crs_attr})


def clean_track(fixes: Iterable, max_speed_m_s: float = C.MAX_DRIFT_SPEED_M_S,
                crs=None) -> xr.Dataset:
    """Merge, de-spike and project the fixes of a floe's instruments.

    Parameters
    ----------
    fixes : iterable
        The instruments' fixes, in order of trust (see :func:`merge_fixes`).
    max_speed_m_s : float, optional
        Fastest plausible drift [m s-1] (default ``constants.MAX_DRIFT_SPEED_M_S``).
    crs : str or pyproj.CRS, optional
        Projected CRS of ``x_m``/``y_m``; default the working CRS of the hemisphere.

    Returns
    -------
    xarray.Dataset
        Dim ``time`` (kept fixes only): ``latitude``, ``longitude``, ``x_m``, ``y_m``,
        ``source``; attrs ``crs``, ``n_rejected`` (fixes removed for speed).

    Examples
    --------
    >>> t = np.arange(4) * np.timedelta64(3600, "s") + np.datetime64("2020-06-01", "ns")
    >>> tr = clean_track([(t, [80.0, 80.001, 81.0, 80.003], [0.0] * 4)])
    >>> tr.sizes["time"], tr.attrs["n_rejected"]
    (3, 1)
    """
    m = merge_fixes(*list(fixes))
    lat, lon = m.latitude.values, m.longitude.values
    keep = (reject_fast_fixes(m.time.values, lat, lon, max_speed_m_s)
            if m.sizes["time"] else np.zeros(0, dtype=bool))
    m = m.isel(time=keep)
    if crs is None:
        crs = working_crs(hemisphere(m.latitude.values))
    x, y = to_working_crs(m.latitude.values, m.longitude.values, crs)
    out = _track_dataset(m.time.values, m.latitude.values, m.longitude.values, x, y, crs)
    out["source"] = m["source"]
    out.attrs["n_rejected"] = int((~keep).sum())
    return out
