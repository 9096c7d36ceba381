"""Downwelling shortwave at drifting positions, conservative in time.

The canonical shortwave Dataset of the reader layer holds ``sw_down`` [W m-2] as the
mean over each interval of ``time_bnds``, on a regular ``latitude``/``longitude`` grid
(any longitude convention, -180..180 or 0..360, global grids periodic) or on projected
``x``/``y`` axes with attr ``crs_wkt``. This module

- samples it bilinearly in space at the positions of several tracks at once, reading
  each chunk of the grid that holds a needed corner once (:func:`sample_at_tracks`,
  through :func:`values_at_indices`, which :mod:`floeheat.microwave` shares);
- resamples interval means to any other intervals so that the energy of every target
  interval equals the source's (:func:`resample_means`, :func:`resample_shortwave`);
- gives interval energies [J m-2] and, for sanity checks, the solar zenith angle and the
  daily-mean top-of-atmosphere insolation from the NOAA / Spencer (1971) formulas.
"""

from __future__ import annotations

import dask
import numpy as np
import pandas as pd
import xarray as xr
from pyproj import CRS, Transformer

from floeheat import constants as C

__all__ = [
    "sample_at_tracks",
    "values_at_indices",
    "resample_means",
    "resample_shortwave",
    "interval_energy",
    "energy_between",
    "solar_zenith_deg",
    "toa_daily_mean_W_m2",
]

_NS = 1.0e-9
#: Relative shortfall of covered time below which a target interval still counts as
#: fully covered (rounding of float seconds only).
_COVER_TOL = 1.0e-9
#: Time steps read at once from a variable without chunks of its own (in memory or
#: lazily indexed); chunked (dask) variables are read chunk by chunk instead.
TIME_BLOCK_UNCHUNKED = 240


# --- reading ------------------------------------------------------------------------


def _block_ids(index: np.ndarray, chunks: tuple[int, ...]) -> tuple[np.ndarray, np.ndarray]:
    """Block number along one axis of each index, and the index within its block."""
    edges = np.cumsum((0,) + tuple(chunks))
    block = np.searchsorted(edges, index, side="right") - 1
    return block, index - edges[block]


def _pick(block, local: tuple[np.ndarray, ...]) -> np.ndarray:
    """Values of one loaded block at block-local integer indices."""
    return np.asarray(block)[local]


def _gather_chunked(arr, index: tuple[np.ndarray, ...]) -> np.ndarray:
    """Values of a dask array at integer indices, each block holding one read once.

    The indices are grouped by the block they fall in; one task per touched block
    loads it and picks its points, and all tasks run in one ``dask.compute`` on the
    array's graph, optimised once (``to_delayed``), so untouched blocks are never read.
    """
    ids, local = zip(*(_block_ids(i, ch) for i, ch in zip(index, arr.chunks, strict=True)),
                     strict=True)
    key = np.ravel_multi_index(ids, arr.numblocks)
    # the smallest integer type lets numpy's stable sort use radix sort
    order = np.argsort(key.astype(np.min_scalar_type(max(key.max(), 0))), kind="stable")
    counts = np.bincount(key)
    keys = np.flatnonzero(counts)
    stops = np.cumsum(counts)[keys]
    starts = stops - counts[keys]
    blocks = arr.to_delayed().ravel()
    tasks = [dask.delayed(_pick, pure=False)(blocks[k], tuple(loc[order[a:b]] for loc in local))
             for k, a, b in zip(keys, starts, stops, strict=True)]
    out = np.empty(key.size, dtype=float)
    for a, b, vals in zip(starts, stops, dask.compute(*tasks), strict=True):
        out[order[a:b]] = vals
    return out


def _gather_unchunked(da: xr.DataArray, index: tuple[np.ndarray, ...],
                      time_block: int) -> np.ndarray:
    """Values of a variable without chunks (in memory or lazily indexed) at indices.

    Along every dim but the first (time) only the indices used are read; along time
    ``time_block`` steps at a time, skipping blocks no index falls in.
    """
    t = index[0]
    rest = [np.unique(i) for i in index[1:]]
    sub = da.isel({d: u for d, u in zip(da.dims[1:], rest, strict=True)})
    local = tuple(np.searchsorted(u, i) for u, i in zip(rest, index[1:], strict=True))
    out = np.empty(t.size, dtype=float)
    step = max(int(time_block), 1)
    for s in np.unique(t // step) * step:
        sel = np.flatnonzero((t >= s) & (t < s + step))
        block = np.asarray(sub.isel({da.dims[0]: slice(s, s + step)}).values, dtype=float)
        out[sel] = block[(t[sel] - s,) + tuple(loc[sel] for loc in local)]
    return out


def values_at_indices(da: xr.DataArray, index: dict[str, np.ndarray], *,
                      time_chunk: int | None = None) -> np.ndarray:
    """Values of a gridded variable at integer grid indices, each needed chunk read once.

    A chunked (dask) variable, such as a Zarr store opened lazily, is read block by
    block along its own chunks: only the blocks holding some index are loaded, each
    once, whatever the number of indices in it. A variable without chunks is read
    ``time_chunk`` steps at a time, only the indices used along the other dims.

    Parameters
    ----------
    da : xarray.DataArray
        The variable, any number of dims; may be lazy (dask or lazily indexed).
    index : dict of str to array_like of int
        One integer index array per dim of ``da`` (all of the same length); the first
        key is the time dim for variables without chunks.
    time_chunk : int, optional
        Time steps read at once from a variable without chunks (default
        :data:`TIME_BLOCK_UNCHUNKED`); ignored for chunked variables.

    Returns
    -------
    numpy.ndarray of float
        ``da`` at the given indices (units of ``da``).

    Examples
    --------
    >>> da = xr.DataArray(np.arange(24.0).reshape(2, 3, 4), dims=("time", "y", "x"))
    >>> ix = {"time": np.array([0, 1]), "y": np.array([2, 0]), "x": np.array([1, 3])}
    >>> values_at_indices(da, ix).tolist(), values_at_indices(da.chunk(2), ix).tolist()
    ([9.0, 15.0], [9.0, 15.0])
    """
    dims = tuple(index)
    if set(dims) != set(da.dims) or len(dims) != da.ndim:
        raise ValueError(f"need one index per dim of {da.dims}, got {dims}")
    idx = tuple(np.asarray(index[d], dtype=np.int64).ravel() for d in dims)
    if idx[0].size == 0:
        return np.empty(0, dtype=float)
    da = da.transpose(*dims)
    if da.chunks is not None:
        return _gather_chunked(da.data, idx)
    return _gather_unchunked(da, idx, TIME_BLOCK_UNCHUNKED if time_chunk is None
                             else time_chunk)


# --- space --------------------------------------------------------------------------


def _axis_weights(axis, v, periodic: bool):
    """Lower/upper indices into ``axis`` and the weight of the upper one, for values v."""
    axis = np.asarray(axis, dtype=float)
    order = np.argsort(axis, kind="stable")
    a = axis[order]
    if periodic:
        v = a[0] + np.mod(v - a[0], 360.0)
        a = np.concatenate([a, [a[0] + 360.0]])
        order = np.concatenate([order, order[:1]])
    ok = np.isfinite(v) & (v >= a[0]) & (v <= a[-1])
    vv = np.where(ok, v, a[0])
    j = np.clip(np.searchsorted(a, vv, side="right") - 1, 0, a.size - 2)
    w = (vv - a[j]) / (a[j + 1] - a[j])
    return order[j], order[j + 1], np.where(ok, w, 0.0), ok


def _grid_axes(sw: xr.Dataset, var: str, lat, lon):
    """Grid dims and the track positions in the grid's own coordinates."""
    da = sw[var]
    if "latitude" in da.dims and "longitude" in da.dims:
        glon = np.asarray(sw["longitude"].values, dtype=float)
        step = np.median(np.abs(np.diff(np.sort(glon)))) if glon.size > 1 else 0.0
        periodic = glon.size > 1 and abs(glon.max() - glon.min() + step - 360.0) < 1e-6
        if not periodic:
            lon = np.mod(lon, 360.0) if glon.max() > 180.0 else (lon + 180.0) % 360.0 - 180.0
        return ("latitude", "longitude"), (lat, lon), periodic
    if "y" in da.dims and "x" in da.dims:
        wkt = da.attrs.get("crs_wkt", sw.attrs.get("crs_wkt"))
        if wkt is None:
            raise ValueError("a projected shortwave grid needs attr crs_wkt")
        tr = Transformer.from_crs("EPSG:4326", CRS.from_wkt(wkt), always_xy=True)
        x, y = tr.transform(lon, lat)
        return ("y", "x"), (np.asarray(y), np.asarray(x)), False
    raise ValueError(f"{var} needs dims (time, latitude, longitude) or (time, y, x), "
                     f"got {da.dims}")


def _corner_values(da: xr.DataArray, tpos, rows, cols, time_chunk) -> np.ndarray:
    """Values at the four grid corners (r0 c0, r0 c1, r1 c0, r1 c1) of each point.

    ``rows`` and ``cols`` are (dim, lower indices, upper indices); ``tpos`` the time
    index of each point. Returns shape (4, n_points), in the units of ``da``.
    """
    (dy, r0, r1), (dx, c0, c1) = rows, cols
    n = tpos.size
    index = {"time": np.tile(tpos, 4),
             dy: np.concatenate([r0, r0, r1, r1]),
             dx: np.concatenate([c0, c1, c0, c1])}
    return values_at_indices(da, index, time_chunk=time_chunk).reshape(4, n)


def _bilinear_corners(v: np.ndarray, wy, wx) -> np.ndarray:
    """Bilinear value from corners v (4, n) as in :func:`_corner_values` and the upper
    corners' weights wy, wx (n,) [1]; a NaN corner gives NaN."""
    return ((1 - wy) * (1 - wx) * v[0] + (1 - wy) * wx * v[1]
            + wy * (1 - wx) * v[2] + wy * wx * v[3])


def sample_at_tracks(sw: xr.Dataset, latitude: xr.DataArray, longitude: xr.DataArray,
                     *, var: str = "sw_down", time_chunk: int | None = None) -> xr.Dataset:
    """Bilinear shortwave at the moving positions of several tracks, in one pass.

    The four grid corners of every position of every track are read together
    (:func:`values_at_indices`): from a chunked (dask, e.g. Zarr) store only the chunks
    holding some corner, each once, along the store's own chunks in time and space;
    from a variable without chunks the grid rows and columns some track needs,
    ``time_chunk`` source intervals at a time. No track is read on its own. A position
    outside the grid is NaN; a NaN corner gives NaN.

    Parameters
    ----------
    sw : xarray.Dataset
        Canonical shortwave: ``sw_down(time, latitude, longitude)`` or ``(time, y, x)``
        [W m-2, mean over each interval], ``time_bnds(time, nv)``; projected grids carry
        attr ``crs_wkt`` (on the variable or the Dataset). May be lazy (dask).
    latitude, longitude : xarray.DataArray
        Track positions [degrees], dims ``(track, time)`` or ``(time,)``, one per source
        interval: the position at the interval's midpoint. Their ``time`` coordinate
        (if any) must hold values of ``sw.time``; without one the length must match.
    var : str, optional
        Variable to sample (default ``"sw_down"``).
    time_chunk : int, optional
        Source intervals read per pass from a variable without chunks (default
        :data:`TIME_BLOCK_UNCHUNKED`); ignored for chunked variables, which are read
        along their own chunks.

    Returns
    -------
    xarray.Dataset
        ``sw_down(track, time)`` [W m-2, mean over each interval] and
        ``time_bnds(time, nv)`` of the sampled source intervals.

    Examples
    --------
    >>> t = np.array(["2020-06-01T01", "2020-06-01T02"], "datetime64[ns]")
    >>> sw = xr.Dataset(
    ...     {"sw_down": (("time", "latitude", "longitude"),
    ...                  np.array([[[0.0, 100.0], [200.0, 300.0]]] * 2)),
    ...      "time_bnds": (("time", "nv"), np.stack([t - np.timedelta64(1, "h"), t], 1))},
    ...     coords={"time": t, "latitude": [80.0, 81.0], "longitude": [350.0, 351.0]})
    >>> lat = xr.DataArray([[80.5, 80.5]], dims=("track", "time"), coords={"time": t})
    >>> lon = xr.DataArray([[-9.5, -9.75]], dims=("track", "time"), coords={"time": t})
    >>> sample_at_tracks(sw, lat, lon).sw_down.values.tolist()
    [[150.0, 125.0]]
    """
    if latitude.dims != longitude.dims:
        raise ValueError("latitude and longitude must have the same dims")
    if latitude.ndim == 1:
        latitude, longitude = latitude.expand_dims(track=1), longitude.expand_dims(track=1)
    latitude = latitude.transpose("track", "time")
    longitude = longitude.transpose("track", "time")
    if "time" in latitude.coords:
        tpos = sw.indexes["time"].get_indexer(
            np.asarray(latitude["time"].values, dtype="datetime64[ns]"))
        if np.any(tpos < 0):
            raise ValueError("track times must be times of the shortwave source")
    else:
        if latitude.sizes["time"] != sw.sizes["time"]:
            raise ValueError("track length differs from the shortwave time axis")
        tpos = np.arange(sw.sizes["time"])
    lat = np.asarray(latitude.values, dtype=float)
    lon = np.asarray(longitude.values, dtype=float)
    (dy, dx), (vy, vx), periodic = _grid_axes(sw, var, lat, lon)
    r0, r1, wy, oky = _axis_weights(sw[dy].values, vy, periodic=False)
    c0, c1, wx, okx = _axis_weights(sw[dx].values, vx, periodic=periodic)
    ok = oky & okx
    out = np.full(lat.shape, np.nan)
    if ok.any():
        corners = _corner_values(sw[var], np.broadcast_to(tpos, lat.shape)[ok],
                                 (dy, r0[ok], r1[ok]), (dx, c0[ok], c1[ok]), time_chunk)
        out[ok] = _bilinear_corners(corners, wy[ok], wx[ok])
    time = sw["time"].values[tpos]
    coords = {"time": time}
    if "track" in latitude.coords:
        coords["track"] = latitude["track"].values
    res = xr.Dataset({var: (("track", "time"), out,
                            {"units": "W m-2", "cell_methods": "time: mean",
                             "standard_name": "surface_downwelling_shortwave_flux_in_air"})},
                     coords=coords)
    if "time_bnds" in sw:
        res["time_bnds"] = (("time", "nv"),
                            np.asarray(sw["time_bnds"].values, "datetime64[ns]")[tpos])
    return res


# --- time ---------------------------------------------------------------------------


def _seconds(t, ref) -> np.ndarray:
    t = np.asarray(getattr(t, "values", t), dtype="datetime64[ns]")
    return (t - ref).astype(np.int64).astype(float) * _NS


def _cumulative(a, b, cum_end, rate, t):
    """Integral of a piecewise-constant rate from -inf to t (rate (..., n); t (m,))."""
    i = np.searchsorted(a, t, side="right") - 1
    ic = np.clip(i, 0, a.size - 1)
    before = np.where(ic > 0, cum_end[..., np.maximum(ic - 1, 0)], 0.0)
    part = rate[..., ic] * np.clip(t - a[ic], 0.0, (b - a)[ic])
    return np.where(i >= 0, before + part, 0.0)


def resample_means(source_bnds, source_mean, target_bnds, axis: int = -1):
    """Means over target intervals that keep the energy of the source intervals.

    The source is piecewise constant: each value is the mean over its interval. The
    energy over a target interval is the overlap-weighted sum of source energies
    (partial overlaps allowed), and the target mean is that energy over the target's
    length. A target interval not fully covered by source intervals with finite values
    (a gap, a NaN value, or beyond the source's ends) gets NaN; its covered fraction is
    returned as well.

    Parameters
    ----------
    source_bnds : array_like of datetime64, shape (n, 2)
        Start and end of each source interval; intervals must not overlap.
    source_mean : array_like of float, shape (..., n, ...)
        Interval means (e.g. [W m-2]) with time along ``axis``; NaN = missing.
    target_bnds : array_like of datetime64, shape (m, 2)
        Start and end of each target interval (any length > 0, any order, may overlap).
    axis : int, optional
        Time axis of ``source_mean`` (default -1).

    Returns
    -------
    mean : numpy.ndarray of float
        Target means, time along ``axis`` with length m (same units as the source);
        NaN where ``coverage < 1``.
    coverage : numpy.ndarray of float in [0, 1]
        Fraction of each target interval covered by valid source data.

    Examples
    --------
    >>> src = np.array([["2020-06-01T00", "2020-06-01T03"], ["2020-06-01T03", "2020-06-01T06"]],
    ...                dtype="datetime64[ns]")
    >>> tgt = np.array([["2020-06-01T02", "2020-06-01T04"], ["2020-06-01T05", "2020-06-01T07"]],
    ...                dtype="datetime64[ns]")
    >>> m, cov = resample_means(src, [100.0, 400.0], tgt)
    >>> m.tolist(), cov.tolist()
    ([250.0, nan], [1.0, 0.5])
    """
    sb = np.asarray(getattr(source_bnds, "values", source_bnds), dtype="datetime64[ns]")
    tb = np.asarray(getattr(target_bnds, "values", target_bnds), dtype="datetime64[ns]")
    sb, tb = sb.reshape(-1, 2), tb.reshape(-1, 2)
    vals = np.moveaxis(np.asarray(source_mean, dtype=float), axis, -1)
    if vals.shape[-1] != sb.shape[0]:
        raise ValueError("source_mean and source_bnds differ in length along the time axis")
    ref = min(sb.min(), tb.min()) if sb.size and tb.size else np.datetime64(0, "ns")
    a, b = _seconds(sb[:, 0], ref), _seconds(sb[:, 1], ref)
    s, e = _seconds(tb[:, 0], ref), _seconds(tb[:, 1], ref)
    if np.any(b <= a) or np.any(e <= s):
        raise ValueError("every interval must have an end after its start")
    o = np.argsort(a, kind="stable")
    a, b, vals = a[o], b[o], vals[..., o]
    if np.any(a[1:] < b[:-1]):
        raise ValueError("source intervals overlap")
    valid = np.isfinite(vals)
    rate = np.where(valid, vals, 0.0)
    dur = b - a
    cum_e = np.cumsum(rate * dur, axis=-1)
    cum_d = np.cumsum(valid * dur, axis=-1)
    energy = _cumulative(a, b, cum_e, rate, e) - _cumulative(a, b, cum_e, rate, s)
    cover = (_cumulative(a, b, cum_d, valid.astype(float), e)
             - _cumulative(a, b, cum_d, valid.astype(float), s)) / (e - s)
    cover = np.clip(cover, 0.0, 1.0)
    mean = np.where(cover >= 1.0 - _COVER_TOL, energy / (e - s), np.nan)
    cover = np.where(cover >= 1.0 - _COVER_TOL, 1.0, cover)
    return np.moveaxis(mean, -1, axis), np.moveaxis(cover, -1, axis)


def resample_shortwave(sw: xr.Dataset, target_bnds, *, var: str = "sw_down",
                       label: str = "end") -> xr.Dataset:
    """:func:`resample_means` on a shortwave Dataset.

    Parameters
    ----------
    sw : xarray.Dataset
        ``sw_down`` [W m-2, interval means] with a ``time`` dim and ``time_bnds(time, nv)``.
    target_bnds : array_like of datetime64, shape (m, 2)
        Target intervals.
    var : str, optional
        Variable to resample (default ``"sw_down"``).
    label : str, optional
        {"end", "start", "middle"}: which instant of each target interval labels it in
        the ``time`` coordinate (default "end", the archive's "interval ending at time").

    Returns
    -------
    xarray.Dataset
        ``sw_down`` (other dims kept, ``time`` last as in the input order) [W m-2],
        ``coverage`` [1], ``time_bnds(time, nv)``.

    Examples
    --------
    >>> b = np.array(["2020-06-01T00", "2020-06-01T01", "2020-06-01T02"], "datetime64[ns]")
    >>> sw = xr.Dataset({"sw_down": ("time", [100.0, 300.0]),
    ...                  "time_bnds": (("time", "nv"), np.stack([b[:-1], b[1:]], 1))},
    ...                 coords={"time": b[1:]})
    >>> float(resample_shortwave(sw, [[b[0], b[2]]]).sw_down[0])
    200.0
    """
    tb = np.asarray(target_bnds, dtype="datetime64[ns]").reshape(-1, 2)
    da = sw[var]
    ax = da.dims.index("time")
    mean, cov = resample_means(sw["time_bnds"].values, da.values, tb, axis=ax)
    if label == "end":
        t = tb[:, 1]
    elif label == "start":
        t = tb[:, 0]
    elif label == "middle":
        t = tb[:, 0] + (tb[:, 1] - tb[:, 0]) // 2
    else:
        raise ValueError("label must be one of 'end', 'start', 'middle'")
    coords = {k: v for k, v in da.coords.items() if "time" not in v.dims}
    coords["time"] = t
    attrs = dict(da.attrs, units="W m-2")
    return xr.Dataset({var: (da.dims, mean, attrs),
                       "coverage": (da.dims, cov, {"units": "1"}),
                       "time_bnds": (("time", "nv"), tb)}, coords=coords)


def interval_energy(time_bnds, mean_W_m2) -> np.ndarray:
    """Energy of each interval from its mean flux [J m-2].

    Parameters
    ----------
    time_bnds : array_like of datetime64, shape (n, 2)
        Interval bounds.
    mean_W_m2 : array_like of float, shape (..., n)
        Mean flux over each interval [W m-2].

    Returns
    -------
    numpy.ndarray of float, shape (..., n)
        mean x length [J m-2].

    Examples
    --------
    >>> b = np.array([["2020-06-01T00", "2020-06-01T01"]], "datetime64[ns]")
    >>> interval_energy(b, [100.0]).tolist()
    [360000.0]
    """
    b = np.asarray(getattr(time_bnds, "values", time_bnds), dtype="datetime64[ns]")
    dt = (b[:, 1] - b[:, 0]).astype(np.int64).astype(float) * _NS
    return np.asarray(mean_W_m2, dtype=float) * dt


def energy_between(time_bnds, mean_W_m2, start, end) -> np.ndarray:
    """Energy over [start, end] from interval means [J m-2]; NaN where not covered.

    Parameters
    ----------
    time_bnds : array_like of datetime64, shape (n, 2)
        Source interval bounds.
    mean_W_m2 : array_like of float, shape (..., n)
        Interval means [W m-2], time last.
    start, end : datetime-like
        The interval wanted (UTC).

    Returns
    -------
    numpy.ndarray of float, shape (...)
        Energy [J m-2].

    Examples
    --------
    >>> b = np.array([["2020-06-01T00", "2020-06-01T01"], ["2020-06-01T01", "2020-06-01T02"]],
    ...              "datetime64[ns]")
    >>> float(energy_between(b, [100.0, 300.0], "2020-06-01T00:30", "2020-06-01T01:30"))
    720000.0
    """
    t0 = np.datetime64(pd.Timestamp(start), "ns")
    t1 = np.datetime64(pd.Timestamp(end), "ns")
    mean, _ = resample_means(time_bnds, mean_W_m2, np.array([[t0, t1]]))
    return mean[..., 0] * (t1 - t0).astype(np.int64) * _NS


# --- sun ----------------------------------------------------------------------------


def _fractional_year(t):
    """NOAA fractional year gamma [rad] and the day of year of UTC times."""
    ts = pd.DatetimeIndex(np.asarray(t, dtype="datetime64[ns]").ravel())
    days = np.where(ts.is_leap_year, 366.0, 365.0)
    hour = (ts.hour + ts.minute / 60.0 + (ts.second + ts.microsecond * 1e-6) / 3600.0).values
    gamma = 2.0 * np.pi / days * (ts.day_of_year.values - 1 + (hour - 12.0) / 24.0)
    return gamma.reshape(np.shape(t)), hour.reshape(np.shape(t))


def _declination_rad(g):
    # Spencer (1971), as given by the NOAA GML solar calculation notes.
    return (0.006918 - 0.399912 * np.cos(g) + 0.070257 * np.sin(g)
            - 0.006758 * np.cos(2 * g) + 0.000907 * np.sin(2 * g)
            - 0.002697 * np.cos(3 * g) + 0.00148 * np.sin(3 * g))


def solar_zenith_deg(time, latitude_deg, longitude_deg) -> np.ndarray:
    """Solar zenith angle from the NOAA general solar position formulas.

    No refraction. Accuracy about 0.3 degrees against a full ephemeris.

    Parameters
    ----------
    time : array_like of datetime64
        UTC times.
    latitude_deg, longitude_deg : array_like of float
        Position [degrees, east positive]; broadcast against ``time``.

    Returns
    -------
    numpy.ndarray of float
        Zenith angle [degrees], in [0, 180].

    Examples
    --------
    >>> round(float(solar_zenith_deg(np.datetime64("2019-06-21T12:00"), 75.0, -150.0)), 2)
    79.74
    """
    t = np.asarray(time, dtype="datetime64[ns]")
    g, hour = _fractional_year(t)
    eqtime = 229.18 * (0.000075 + 0.001868 * np.cos(g) - 0.032077 * np.sin(g)
                       - 0.014615 * np.cos(2 * g) - 0.040849 * np.sin(2 * g))
    decl = _declination_rad(g)
    lon = np.asarray(longitude_deg, dtype=float)
    lat = np.radians(np.asarray(latitude_deg, dtype=float))
    true_solar_min = hour * 60.0 + eqtime + 4.0 * lon
    ha = np.radians(true_solar_min / 4.0 - 180.0)
    cosz = np.sin(lat) * np.sin(decl) + np.cos(lat) * np.cos(decl) * np.cos(ha)
    return np.degrees(np.arccos(np.clip(cosz, -1.0, 1.0)))


def toa_daily_mean_W_m2(time, latitude_deg,
                        solar_constant_W_m2: float = C.SOLAR_CONSTANT_W_M2) -> np.ndarray:
    """Daily-mean insolation at the top of the atmosphere.

    Q = (S0 / pi) (r0/r)^2 (h0 sin(phi) sin(delta) + cos(phi) cos(delta) sin(h0)), with
    cos(h0) = -tan(phi) tan(delta) clipped to [-1, 1] (polar day and night); declination
    and (r0/r)^2 from Spencer (1971) at 12:00 UTC of the day containing ``time``.

    Parameters
    ----------
    time : array_like of datetime64
        Any instant of the UTC day(s) wanted.
    latitude_deg : array_like of float
        Latitude [degrees_north]; broadcast against ``time``.
    solar_constant_W_m2 : float, optional
        S0 [W m-2] (default ``constants.SOLAR_CONSTANT_W_M2``).

    Returns
    -------
    numpy.ndarray of float
        Daily mean [W m-2], >= 0.

    Examples
    --------
    >>> round(float(toa_daily_mean_W_m2(np.datetime64("2019-06-21"), 75.0, 1361.0)), 1)
    506.2
    """
    day = np.asarray(time, dtype="datetime64[D]").astype("datetime64[ns]")
    g, _ = _fractional_year(day + np.timedelta64(12, "h"))
    decl = _declination_rad(g)
    e0 = (1.000110 + 0.034221 * np.cos(g) + 0.001280 * np.sin(g)
          + 0.000719 * np.cos(2 * g) + 0.000077 * np.sin(2 * g))
    phi = np.radians(np.asarray(latitude_deg, dtype=float))
    with np.errstate(invalid="ignore"):
        h0 = np.arccos(np.clip(-np.tan(phi) * np.tan(decl), -1.0, 1.0))
    q = solar_constant_W_m2 / np.pi * e0 * (h0 * np.sin(phi) * np.sin(decl)
                                            + np.cos(phi) * np.cos(decl) * np.sin(h0))
    return np.maximum(q, 0.0)
