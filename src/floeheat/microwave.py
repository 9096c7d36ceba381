"""Open-water fraction at buoys from passive-microwave concentration (science.md,
"Open-water fraction", passive microwave).

f_ow = 1 - C, with C the sea-ice area fraction [1]. Three ways to read it at a buoy:

- ``"mean"``: the mean over valid cells whose centres lie within the ground radius
  (projected radius = radius_m x the local scale factor at the buoy), or the nearest
  valid cell where none does;
- ``"bilinear"``: bilinear at the buoy on 1-D ``x``/``y`` axes, the weights renormalised
  over the valid corners;
- ``"nearest"``: the nearest valid cell.

The nearest valid cell is accepted only within ``nearest_max_m`` on the ground (default
:data:`NEAREST_MAX_M`); farther (deep in a land mask or a pole hole) f_ow is NaN.

In time, a daily value stands at the middle of its interval (``time_bnds``); f_ow is
linear between those instants and held for half a day beyond the first and last
(:func:`interpolate_daily`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr
from pyproj import CRS, Transformer
from scipy.spatial import cKDTree

from floeheat import constants as C
from floeheat.openwater import scale_factor
from floeheat.shortwave import values_at_indices
from floeheat.track import hemisphere, working_crs

__all__ = [
    "NEAREST_MAX_M",
    "DAILY_HOLD",
    "DAILY_MAX_GAP",
    "fraction_at_buoys",
    "interpolate_daily",
]

#: Farthest ground distance at which the nearest valid cell stands in for the buoy:
#: two cells of a 25 km grid. Common practice, no source.
NEAREST_MAX_M = 50_000.0
#: Hold beyond the first and last daily instant: half a day. Common practice, no source.
DAILY_HOLD = pd.Timedelta(hours=12)
#: Longest gap between daily instants bridged linearly: 1.5 days, so consecutive days are
#: joined and a missing day leaves a gap. Common practice, no source.
DAILY_MAX_GAP = pd.Timedelta(hours=36)

_VAR = "sea_ice_area_fraction"
_METHODS = ("mean", "bilinear", "nearest")
#: Relative and absolute [projection units] widening of the search distance when
#: selecting candidate cells, so that rounding in the tree search never drops a cell
#: the exact distance test would keep (floating-point slack only).
_REACH_RTOL, _REACH_ATOL = 1.0e-9, 1.0e-3


def _grid(da: xr.DataArray, attrs: dict, lat_b, crs):
    """Cell-centre coordinates X, Y (ny, nx) in a projected CRS, the CRS, and 1-D axes."""
    ydim, xdim = da.dims[-2], da.dims[-1]
    if "latitude" in da.coords and da["latitude"].ndim == 2:
        if crs is None:
            crs = working_crs(hemisphere(lat_b))
        tr = Transformer.from_crs("EPSG:4326", CRS.from_user_input(crs), always_xy=True)
        lon2 = da["longitude"].transpose(ydim, xdim).values
        lat2 = da["latitude"].transpose(ydim, xdim).values
        X, Y = tr.transform(np.asarray(lon2, float), np.asarray(lat2, float))
        return np.asarray(X), np.asarray(Y), CRS.from_user_input(crs), None
    wkt = da.attrs.get("crs_wkt", attrs.get("crs_wkt"))
    if wkt is None:
        raise ValueError("a projected concentration grid needs attr crs_wkt")
    xa = np.asarray(da[xdim].values, dtype=float)
    ya = np.asarray(da[ydim].values, dtype=float)
    X, Y = np.meshgrid(xa, ya)
    return X, Y, CRS.from_wkt(wkt), (ya, xa)


def _axis_corners(a, v):
    """Lower/upper indices into axis ``a`` around values v, the upper one's weight, and
    whether v lies on the axis (NaN-safe; any axis order)."""
    o = np.argsort(a)
    s = a[o]
    ok = np.isfinite(v) & (v >= s[0]) & (v <= s[-1])
    vv = np.where(ok, v, s[0])
    j = np.clip(np.searchsorted(s, vv, side="right") - 1, 0, max(s.size - 2, 0))
    j1 = np.minimum(j + 1, s.size - 1)
    w = np.where(s[j1] > s[j], (vv - s[j]) / np.where(s[j1] > s[j], s[j1] - s[j], 1.0),
                 0.0)
    return o[j], o[j1], w, ok


def _bilinear_valid(vals, wy, wx):
    """Bilinear from corners vals (4, n) (r0 c0, r0 c1, r1 c0, r1 c1) with the upper
    corners' weights wy, wx (n,) [1], renormalised over the finite corners."""
    wts = np.stack([(1 - wy) * (1 - wx), (1 - wy) * wx, wy * (1 - wx), wy * wx])
    good = np.isfinite(vals)
    wsum = np.where(good, wts, 0.0).sum(axis=0)
    num = np.where(good, wts * np.where(good, vals, 0.0), 0.0).sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(wsum > 0, num / wsum, np.nan)


def _bilinear_at(da, axes, day, xb, yb, time_chunk) -> np.ndarray:
    """Concentration [1] bilinear at points (xb, yb) [projection units] on day index
    ``day`` (all (n,)), reading only the four corners of each; NaN off the grid."""
    ydim, xdim = da.dims[1], da.dims[2]
    r0, r1, wy, oky = _axis_corners(axes[0], yb)
    c0, c1, wx, okx = _axis_corners(axes[1], xb)
    ok = oky & okx
    out = np.full(xb.shape, np.nan)
    if ok.any():
        n = int(ok.sum())
        index = {"time": np.tile(day[ok], 4),
                 ydim: np.concatenate([r0[ok], r0[ok], r1[ok], r1[ok]]),
                 xdim: np.concatenate([c0[ok], c1[ok], c0[ok], c1[ok]])}
        vals = values_at_indices(da, index, time_chunk=time_chunk).reshape(4, n)
        out[ok] = _bilinear_valid(vals, wy[ok], wx[ok])
    return out


def _cells_within(X, Y, xb, yb, reach):
    """Cells whose centres lie within ``reach`` of each point, by a KD-tree.

    X, Y (ny, nx) are cell centres and xb, yb, reach (n,) the points and distances, all
    in projection units. Only cells in the points' bounding box widened by the largest
    reach enter the tree. Returns (point, cell) index pairs, cell a flat index into X,
    ordered by point then cell.
    """
    near = (np.isfinite(X) & np.isfinite(Y)
            & (X >= np.min(xb - reach)) & (X <= np.max(xb + reach))
            & (Y >= np.min(yb - reach)) & (Y <= np.max(yb + reach)))
    cells = np.flatnonzero(near.ravel())
    if cells.size == 0:
        return np.empty(0, np.int64), np.empty(0, np.int64)
    tree = cKDTree(np.column_stack([X.ravel()[cells], Y.ravel()[cells]]))
    hits = tree.query_ball_point(np.column_stack([xb, yb]), r=reach, return_sorted=True)
    counts = np.fromiter(map(len, hits), dtype=np.int64, count=len(hits))
    point = np.repeat(np.arange(xb.size), counts)
    found = np.concatenate([np.asarray(h, dtype=np.int64) for h in hits])
    return point, cells[found]


def _disc_means(point, d2, f, n_points, kb, radii, nearest_max_m):
    """Mean f over valid cells within each radius of each point, or the nearest one.

    ``point``, ``d2`` [projection units squared] and ``f`` [1] describe the valid
    (point, cell) pairs, ordered by point then cell (row-major); ``kb`` (n_points,) is
    the scale factor at each point. Returns the nearest-cell value (n_points,) [1],
    NaN beyond ``nearest_max_m`` [m], and the means and cell counts
    (n_points, n_radius); the mean falls back to the nearest value where no cell lies
    within the radius.
    """
    fn = np.full(n_points, np.nan)
    if point.size:
        order = np.lexsort((d2, point))  # nearest first; equal d2: first cell in row-major
        first = order[np.unique(point[order], return_index=True)[1]]
        p = point[first]
        dn = np.sqrt(d2[first]) / kb[p]
        fn[p] = np.where(dn <= nearest_max_m, f[first], np.nan)
    means = np.empty((n_points, radii.size))
    counts = np.zeros((n_points, radii.size), dtype=np.int64)
    for r, radius in enumerate(radii):
        inside = d2 <= (radius * kb[point]) ** 2
        n = np.bincount(point[inside], minlength=n_points)
        total = np.bincount(point[inside], weights=f[inside], minlength=n_points)
        with np.errstate(invalid="ignore", divide="ignore"):
            means[:, r] = np.where(n > 0, total / np.maximum(n, 1), fn)
        counts[:, r] = n
    return fn, means, counts


def fraction_at_buoys(concentration, latitude, longitude, radii_m=(C.RADIUS_DEFAULT_M,),
                      method: str = "mean", *, nearest_max_m: float = NEAREST_MAX_M,
                      time_bnds=None, crs=None, time_chunk: int = 31) -> xr.DataArray:
    """Open-water fraction 1 - C at buoy positions, per day and radius.

    Each position reads only the cells within its own search distance (a KD-tree of the
    cell centres selects them), all positions of all tracks together: from a chunked
    (dask, e.g. Zarr) store only the chunks holding such cells, each once; from a
    variable without chunks the rows and columns used, ``time_chunk`` days at a time.

    Parameters
    ----------
    concentration : xarray.Dataset or xarray.DataArray
        Canonical concentration: ``sea_ice_area_fraction(time, y, x)`` [1, 0-1, NaN =
        no data] on 1-D ``x``/``y`` [m] with attr ``crs_wkt``, or with 2-D ``latitude``/
        ``longitude`` coords (then cells are placed in ``crs``); ``time_bnds(time, nv)``
        in the Dataset or given as ``time_bnds``. May be lazy (dask).
    latitude, longitude : array_like or xarray.DataArray, shape (n_time,) or (n_track, n_time)
        Buoy positions [degrees], one per concentration day: the position at the
        middle of its interval.
    radii_m : array_like of float, optional
        Ground radii [m] (default ``(constants.RADIUS_DEFAULT_M,)``); ignored by
        "bilinear" and "nearest" apart from labelling the ``radius`` dim.
    method : str, optional
        {"mean", "bilinear", "nearest"} (default "mean").
    nearest_max_m : float, optional
        Farthest ground distance of an accepted nearest valid cell [m]
        (default :data:`NEAREST_MAX_M`).
    time_bnds : array_like of datetime64, shape (n_time, 2), optional
        Interval bounds when ``concentration`` carries none.
    crs : str or pyproj.CRS, optional
        CRS for grids given by 2-D latitude/longitude (default: the working CRS of the
        buoys' hemisphere). Ignored for projected grids.
    time_chunk : int, optional
        Days read per pass from a variable without chunks (default 31); ignored for
        chunked variables, which are read along their own chunks.

    Returns
    -------
    xarray.DataArray
        ``f_ow`` [1] with dims ``(time, radius)``, or ``(track, time, radius)`` for 2-D
        positions; ``time`` = interval midpoints; coords ``radius`` [m] and ``n_cells``
        (cells averaged; 0 where the nearest cell served or the value is NaN).

    Examples
    --------
    >>> t = np.array(["2020-06-01", "2020-06-02"], "datetime64[ns]")
    >>> x = y = np.arange(5) * 25_000.0
    >>> c = xr.Dataset(
    ...     {"sea_ice_area_fraction": (("time", "y", "x"), np.full((1, 5, 5), 0.8),
    ...                                {"crs_wkt": CRS("EPSG:3413").to_wkt()}),
    ...      "time_bnds": (("time", "nv"), t[None, :])},
    ...     coords={"time": t[:1], "x": x, "y": y})
    >>> lon, lat = Transformer.from_crs("EPSG:3413", "EPSG:4326", always_xy=True).transform(
    ...     50_000.0, 50_000.0)
    >>> f = fraction_at_buoys(c, [lat], [lon], [30_000.0])
    >>> round(float(f[0, 0]), 6), int(f.n_cells[0, 0]), str(f.time.values[0])[:13]
    (0.2, 5, '2020-06-01T12')
    """
    if method not in _METHODS:
        raise ValueError(f"method must be one of {_METHODS}, got {method!r}")
    if isinstance(concentration, xr.Dataset):
        ds_attrs = concentration.attrs
        da = concentration[_VAR]
        if time_bnds is None and "time_bnds" in concentration:
            time_bnds = concentration["time_bnds"].values
    else:
        da, ds_attrs = concentration, {}
    if da.dims[0] != "time" or da.ndim != 3:
        raise ValueError(f"concentration must have dims (time, y, x), got {da.dims}")
    lat = np.atleast_2d(np.asarray(getattr(latitude, "values", latitude), dtype=float))
    lon = np.atleast_2d(np.asarray(getattr(longitude, "values", longitude), dtype=float))
    one_track = np.ndim(getattr(latitude, "values", latitude)) == 1
    nt = da.sizes["time"]
    if lat.shape != lon.shape or lat.shape[1] != nt:
        raise ValueError(f"positions must have shape (n_track, {nt}) or ({nt},)")
    radii = np.atleast_1d(np.asarray(radii_m, dtype=float))

    X, Y, gcrs, axes = _grid(da, ds_attrs, lat, crs)
    if method == "bilinear" and axes is None:
        raise ValueError("bilinear needs 1-D x/y axes (a projected grid)")
    ok_pos = np.isfinite(lat) & np.isfinite(lon)
    tr = Transformer.from_crs("EPSG:4326", gcrs, always_xy=True)
    xb, yb = (np.asarray(v) for v in tr.transform(np.where(ok_pos, lon, 0.0),
                                                   np.where(ok_pos, lat, 0.0)))
    k = np.asarray(scale_factor(gcrs, np.where(ok_pos, lon, 0.0), np.where(ok_pos, lat, 0.0)),
                   dtype=float).reshape(lat.shape)
    xb, yb = np.where(ok_pos, xb, np.nan), np.where(ok_pos, yb, np.nan)

    out = np.full(lat.shape + (radii.size,), np.nan)
    ncell = np.zeros(lat.shape + (radii.size,), dtype=np.int64)
    pos = np.flatnonzero(ok_pos.ravel())
    if pos.size:
        day = np.unravel_index(pos, lat.shape)[1]
        px, py, pk = xb.ravel()[pos], yb.ravel()[pos], k.ravel()[pos]
        flat_out, flat_n = out.reshape(-1, radii.size), ncell.reshape(-1, radii.size)
        if method == "bilinear":
            f = 1.0 - _bilinear_at(da, axes, day, px, py, time_chunk)
            flat_out[pos] = f[:, None]
        else:
            flat_out[pos], flat_n[pos] = _fraction_in_discs(
                da, X, Y, day, px, py, pk, radii, method, nearest_max_m, time_chunk)

    mid = _midpoints(da["time"].values, time_bnds)
    coords = {"time": mid, "radius": ("radius", radii, {"units": "m"})}
    dims = ("track", "time", "radius")
    if one_track:
        out, ncell, dims = out[0], ncell[0], dims[1:]
    elif isinstance(latitude, xr.DataArray) and "track" in latitude.coords:
        coords["track"] = latitude["track"].values
    coords["n_cells"] = (dims, ncell)
    return xr.DataArray(out, dims=dims, coords=coords, name="f_ow",
                        attrs={"units": "1", "method": method,
                               "long_name": "open-water fraction 1 - sea_ice_area_fraction"})


def _fraction_in_discs(da, X, Y, day, xb, yb, kb, radii, method, nearest_max_m,
                       time_chunk):
    """f_ow (n, n_radius) [1] and cell counts for "mean" and "nearest" at n points.

    ``day`` is each point's time index into ``da``, xb, yb its position [projection
    units], kb the scale factor there. The cells within the farthest distance any
    answer may use (largest radius for "mean", ``nearest_max_m``) are read for the
    point's own day only.
    """
    ground = max(float(radii.max()) if method == "mean" else 0.0, nearest_max_m)
    reach = kb * ground * (1.0 + _REACH_RTOL) + _REACH_ATOL
    point, cell = _cells_within(X, Y, xb, yb, reach)
    row, col = np.unravel_index(cell, X.shape)
    vals = values_at_indices(da, {"time": day[point], da.dims[1]: row, da.dims[2]: col},
                             time_chunk=time_chunk)
    good = np.isfinite(vals)
    point, cell, f = point[good], cell[good], 1.0 - vals[good]
    d2 = (xb[point] - X.ravel()[cell]) ** 2 + (yb[point] - Y.ravel()[cell]) ** 2
    fn, means, counts = _disc_means(point, d2, f, xb.size, kb, radii, nearest_max_m)
    if method == "nearest":
        return np.repeat(fn[:, None], radii.size, axis=1), np.zeros_like(counts)
    return means, counts


def _midpoints(time, time_bnds) -> np.ndarray:
    t = np.asarray(time, dtype="datetime64[ns]")
    if time_bnds is None:
        return t
    b = np.asarray(time_bnds, dtype="datetime64[ns]").reshape(-1, 2)
    return b[:, 0] + (b[:, 1] - b[:, 0]) // 2


def interpolate_daily(f_ow: xr.DataArray, target_time, *, hold=DAILY_HOLD,
                      max_gap=DAILY_MAX_GAP) -> xr.DataArray:
    """Daily f_ow (standing at interval midpoints) at any times, linear between days.

    NaN values are skipped. Between two valid instants no more than ``max_gap`` apart
    f_ow is linear; it is held for up to ``hold`` before the first and after the last
    valid instant; elsewhere NaN.

    Parameters
    ----------
    f_ow : xarray.DataArray
        From :func:`fraction_at_buoys`, with a ``time`` dim (interval midpoints).
    target_time : array_like of datetime64
        Times wanted (UTC).
    hold : pandas.Timedelta, optional
        Hold beyond the ends (default :data:`DAILY_HOLD`, half a day).
    max_gap : pandas.Timedelta, optional
        Longest gap bridged (default :data:`DAILY_MAX_GAP`, 1.5 days).

    Returns
    -------
    xarray.DataArray
        Same dims with ``time`` replaced by the target times [1].

    Examples
    --------
    >>> f = xr.DataArray([0.1, 0.3], dims="time", coords={"time": np.array(
    ...     ["2020-06-01T12", "2020-06-02T12"], "datetime64[ns]")})
    >>> tt = np.array(["2020-06-01T00", "2020-06-02", "2020-06-03T01"], "datetime64[ns]")
    >>> interpolate_daily(f, tt).values.round(3).tolist()
    [0.1, 0.2, nan]
    """
    td = np.asarray(target_time, dtype="datetime64[ns]").ravel().astype(np.int64)
    ts = np.asarray(f_ow["time"].values, dtype="datetime64[ns]").astype(np.int64)
    hold_ns, gap_ns = int(pd.Timedelta(hold).value), int(pd.Timedelta(max_gap).value)
    ax = f_ow.dims.index("time")
    vals = np.moveaxis(np.asarray(f_ow.values, dtype=float), ax, -1)
    flat = vals.reshape(-1, ts.size)
    res = np.full((flat.shape[0], td.size), np.nan)
    for m in range(flat.shape[0]):
        ok = np.isfinite(flat[m])
        xs, ys = ts[ok], flat[m, ok]
        if xs.size == 0:
            continue
        o = np.argsort(xs, kind="stable")
        xs, ys = xs[o], ys[o]
        i = np.searchsorted(xs, td, side="right") - 1
        v = np.full(td.size, np.nan)
        inside = (i >= 0) & (i < xs.size - 1)
        ii = i[inside]
        w = (td[inside] - xs[ii]) / (xs[ii + 1] - xs[ii])
        vi = np.where(w == 0, ys[ii], ys[ii] * (1 - w) + ys[ii + 1] * w)
        v[inside] = np.where((xs[ii + 1] - xs[ii] > gap_ns) & (w != 0), np.nan, vi)
        v[(td < xs[0]) & (xs[0] - td <= hold_ns)] = ys[0]
        v[(td >= xs[-1]) & (td - xs[-1] <= hold_ns)] = ys[-1]
        res[m] = v
    res = np.moveaxis(res.reshape(vals.shape[:-1] + (td.size,)), -1, ax)
    coords = {kk: vv for kk, vv in f_ow.coords.items() if "time" not in vv.dims}
    coords["time"] = td.astype("datetime64[ns]")
    return xr.DataArray(res, dims=f_ow.dims, coords=coords, name=f_ow.name,
                        attrs=dict(f_ow.attrs))
