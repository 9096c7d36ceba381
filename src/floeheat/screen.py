"""Where a one-dimensional budget holds: screens of the budget windows.

Four checks flag the budget windows of a deployment (science.md, "What the 1-D budget
leaves out"):

- **near shelf**: the sea-floor depth along the track and the ground distance to a
  chosen isobath (default 1000 m) from a bathymetry grid; lateral advection of heat is
  large near shelves and slopes, so windows that come within a distance of the isobath
  are flagged (and by default left out of the climatology);
- **fast drift**: a daily-mean drift speed above a limit;
- **shear**: diverging drift of the deployments of one array (their separation changes
  by more than a limit within the window);
- **residual outlier**: a transmitted flux (-dR/dt over the window) far from those of
  the array's other deployments over the same period (robust z-score on the median and
  the scaled median absolute deviation).

All functions are pure (numpy/pandas/xarray in and out).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from floeheat import constants as C

__all__ = [
    "SCREEN_FLAGS",
    "grid_cells_lonlat",
    "depth_and_distance_to_isobath",
    "daily_drift_speed",
    "separation_change",
    "separation_change_projected",
    "residual_outliers",
    "window_time_flags",
]

#: Flag names, as written in the ``excluded_by`` column and accepted in
#: ``screen.exclude`` of the config.
SCREEN_FLAGS = ("near_shelf", "fast_drift", "shear", "residual_outlier")

_DAY_S = C.SECONDS_PER_DAY


def grid_cells_lonlat(depth: xr.DataArray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cell centres (longitude, latitude) and depths of a bathymetry grid, flattened.

    Parameters
    ----------
    depth : xarray.DataArray
        ``sea_floor_depth`` [m, positive down] on ``(latitude, longitude)`` or on
        projected ``(y, x)`` [m] with attribute ``crs_wkt`` (as
        :func:`floeheat.io.gridded.open_bathymetry` returns it).

    Returns
    -------
    lon, lat, depth_m : numpy.ndarray
        One value per cell [degrees_east, degrees_north, m].

    Examples
    --------
    >>> da = xr.DataArray([[10.0, 2000.0]], dims=("latitude", "longitude"),
    ...                   coords={"latitude": [80.0], "longitude": [0.0, 1.0]})
    >>> [a.tolist() for a in grid_cells_lonlat(da)]
    [[0.0, 1.0], [80.0, 80.0], [10.0, 2000.0]]
    """
    values = np.asarray(depth.values, dtype=float)
    if "latitude" in depth.dims and "longitude" in depth.dims:
        d = depth.transpose("latitude", "longitude")
        lon, lat = np.meshgrid(d["longitude"].values.astype(float),
                               d["latitude"].values.astype(float))
        values = np.asarray(d.values, dtype=float)
        lon = ((lon + 180.0) % 360.0) - 180.0
        return lon.ravel(), lat.ravel(), values.ravel()
    from pyproj import CRS, Transformer

    d = depth.transpose("y", "x")
    X, Y = np.meshgrid(d["x"].values.astype(float), d["y"].values.astype(float))
    tr = Transformer.from_crs(CRS.from_wkt(depth.attrs["crs_wkt"]), "EPSG:4326",
                              always_xy=True)
    lon, lat = tr.transform(X.ravel(), Y.ravel())
    return np.asarray(lon), np.asarray(lat), np.asarray(d.values, dtype=float).ravel()


def depth_and_distance_to_isobath(latitude_deg, longitude_deg, depth: xr.DataArray,
                                  isobath_m: float = C.SCREEN_ISOBATH_M,
                                  hemisphere: str = "north"
                                  ) -> tuple[np.ndarray, np.ndarray]:
    """Sea-floor depth at points and their ground distance to water shallower than an isobath.

    The depth is that of the nearest grid cell. The distance is to the nearest centre
    of a cell shallower than ``isobath_m`` (0 where the point's own cell is
    shallower), measured in the hemisphere's working CRS and divided by the local
    scale factor, so it is a distance on the ground to within half a grid cell.
    Cells without data (NaN) are ignored; land (negative depth) counts as shallow.
    Points farther than two cell spacings from every cell with data are outside the
    grid: both values NaN.

    Parameters
    ----------
    latitude_deg, longitude_deg : array_like
        Positions [degrees].
    depth : xarray.DataArray
        The bathymetry grid (see :func:`grid_cells_lonlat`).
    isobath_m : float
        Depth of the isobath [m, positive down].
    hemisphere : {"north", "south"}
        Selects the working CRS (EPSG:3413 or EPSG:3976).

    Returns
    -------
    depth_m, distance_m : numpy.ndarray
        [m], [m].

    Examples
    --------
    A 1 km grid, shallow (500 m) west of x = 0 and deep (3000 m) east of it:

    >>> x = np.arange(-20_500.0, 20_000.0, 1000.0)
    >>> y = np.arange(-2_000_000.5, -1_980_000.0, 1000.0)
    >>> z = np.where(x[None, :] < 0, 500.0, 3000.0) * np.ones((y.size, 1))
    >>> from pyproj import CRS, Transformer
    >>> da = xr.DataArray(z, dims=("y", "x"), coords={"y": y, "x": x},
    ...                   attrs={"crs_wkt": CRS("EPSG:3413").to_wkt()})
    >>> lon, lat = Transformer.from_crs("EPSG:3413", "EPSG:4326", always_xy=True
    ...                                 ).transform([10_000.0], [-1_990_000.0])
    >>> d, dist = depth_and_distance_to_isobath(lat, lon, da, 1000.0)
    >>> float(d[0]), bool(10_000 < dist[0] < 11_200)
    (3000.0, True)
    """
    from pyproj import Proj
    from scipy.spatial import cKDTree

    lat = np.atleast_1d(np.asarray(latitude_deg, dtype=float))
    lon = np.atleast_1d(np.asarray(longitude_deg, dtype=float))
    depth_out = np.full(lat.shape, np.nan)
    dist_out = np.full(lat.shape, np.nan)
    glon, glat, gdepth = grid_cells_lonlat(depth)
    crs = C.CRS_WORKING_NORTH if hemisphere == "north" else C.CRS_WORKING_SOUTH
    proj = Proj(crs)
    valid = np.isfinite(gdepth)
    ok = np.isfinite(lat) & np.isfinite(lon)
    if not valid.any() or not ok.any():
        return depth_out, dist_out
    gx, gy = proj(glon[valid], glat[valid])
    gxy = np.column_stack([gx, gy])
    gd = gdepth[valid]
    px, py = proj(lon[ok], lat[ok])
    pxy = np.column_stack([px, py])
    k = np.asarray(proj.get_factors(lon[ok], lat[ok]).parallel_scale, dtype=float)
    tree = cKDTree(gxy)
    near, idx = tree.query(pxy)
    # grid spacing (projected): median nearest-neighbour distance between cells
    spacing = float(np.median(tree.query(gxy, k=2)[0][:, 1])) if gxy.shape[0] > 1 else np.inf
    inside = near <= 2.0 * spacing
    d_pt = np.where(inside, gd[idx], np.nan)
    shallow = gd < isobath_m
    if shallow.any():
        dist = cKDTree(gxy[shallow]).query(pxy)[0] / k
        dist = np.where(d_pt < isobath_m, 0.0, dist)
    else:
        dist = np.full(d_pt.shape, np.inf)
    dist = np.where(inside, dist, np.nan)
    depth_out[ok], dist_out[ok] = d_pt, dist
    return depth_out, dist_out


def daily_drift_speed(time, latitude_deg, longitude_deg) -> pd.Series:
    """Daily-mean drift speed: the ground path length in each UTC day over its duration.

    Parameters
    ----------
    time : array_like of datetime64
        Fix times, increasing.
    latitude_deg, longitude_deg : array_like
        Positions [degrees].

    Returns
    -------
    pandas.Series
        [m s-1], indexed by the day (midnight UTC); segments are split at midnight in
        proportion to their duration.

    Examples
    --------
    Due north at 0.1 m s-1 for two days (hourly fixes):

    >>> t = pd.date_range("2025-07-01", periods=49, freq="h").values
    >>> lat = 80.0 + 0.1 * 3600.0 * np.arange(49) / 111_700.0
    >>> s = daily_drift_speed(t, lat, np.zeros(49))
    >>> [round(float(v), 2) for v in s.values]
    [0.1, 0.1]
    """
    from pyproj import Geod

    t = np.asarray(time, dtype="datetime64[ns]")
    lat = np.asarray(latitude_deg, dtype=float)
    lon = np.asarray(longitude_deg, dtype=float)
    if t.size < 2:
        return pd.Series(dtype=float)
    _, _, dist = Geod(ellps="WGS84").inv(lon[:-1], lat[:-1], lon[1:], lat[1:])
    # an hourly grid spreads every segment over the hours it spans
    t0 = pd.Timestamp(t[0]).floor("h")
    t1 = pd.Timestamp(t[-1]).ceil("h")
    hours = pd.date_range(t0, t1, freq="h").values
    s = (t - t[0]).astype(np.int64) / 1e9
    path = np.concatenate([[0.0], np.cumsum(np.nan_to_num(np.asarray(dist)))])
    sh = (hours - t[0]).astype(np.int64) / 1e9
    cum = np.interp(sh, s, path)
    inside = (sh >= s[0]) & (sh <= s[-1])
    step = pd.Series(np.diff(cum), index=pd.DatetimeIndex(hours[:-1]))
    covered = pd.Series((inside[1:] & inside[:-1]).astype(float) * 3600.0,
                        index=step.index)
    day = step.index.floor("D")
    length = step.groupby(day).sum()
    seconds = covered.groupby(day).sum()
    return (length / seconds.where(seconds > 0)).rename("speed_m_s")


def separation_change(time_a, lat_a, lon_a, time_b, lat_b, lon_b, start, end) -> float:
    """Change of the ground distance between two deployments within a period.

    The distance is evaluated hourly over the period both tracks cover; the result is
    its range (largest minus smallest), NaN when the tracks share less than two hours.

    Parameters
    ----------
    time_a, lat_a, lon_a, time_b, lat_b, lon_b : array_like
        The two tracks (times increasing, positions in degrees).
    start, end : datetime-like
        The period.

    Returns
    -------
    float
        [m].

    Examples
    --------
    Two buoys about 1 km apart, the second moving east at about 0.01 m s-1 for a day
    (about 864 m farther; degrees of longitude on the ellipsoid are a little longer
    than on the sphere used here):

    >>> t = pd.date_range("2025-07-01", periods=25, freq="h").values
    >>> lat = np.full(25, 80.0)
    >>> dlon = 1 / (111_320.0 * np.cos(np.radians(80.0)) / 1000.0)
    >>> lon_b = dlon * (1 + 0.036 * np.arange(25))
    >>> d = separation_change(t, lat, np.zeros(25), t, lat, lon_b, t[0], t[-1])
    >>> bool(855 < d < 880)
    True
    """
    from floeheat.track import project_track

    return separation_change_projected(project_track(time_a, lat_a, lon_a),
                                       project_track(time_b, lat_b, lon_b), start, end)


def separation_change_projected(track_a, track_b, start, end) -> float:
    """:func:`separation_change` of two tracks projected once by
    :func:`floeheat.track.project_track` (for many periods of the same pair)."""
    from pyproj import Geod

    from floeheat.track import positions_on

    if track_a.span is None or track_b.span is None:
        return float("nan")
    t0 = max(pd.Timestamp(start), pd.Timestamp(track_a.span[0]), pd.Timestamp(track_b.span[0]))
    t1 = min(pd.Timestamp(end), pd.Timestamp(track_a.span[1]), pd.Timestamp(track_b.span[1]))
    if t1 - t0 < pd.Timedelta(hours=1):
        return float("nan")
    grid = pd.date_range(t0, t1, freq="h").values
    lat_pa, lon_pa, *_ = positions_on(track_a, grid)
    lat_pb, lon_pb, *_ = positions_on(track_b, grid)
    _, _, d = Geod(ellps="WGS84").inv(lon_pa, lat_pa, lon_pb, lat_pb)
    d = np.asarray(d, dtype=float)
    d = d[np.isfinite(d)]
    return float(d.max() - d.min()) if d.size >= 2 else float("nan")


def residual_outliers(windows: pd.DataFrame, mad_factor: float = C.SCREEN_OUTLIER_MAD,
                      floor_W_m2: float = C.SCREEN_OUTLIER_FLOOR_W_M2) -> pd.DataFrame:
    """Flag window transmitted fluxes that are outliers against the array's others.

    For each window record, the other deployments of its array (same source and
    radius) whose windows contain the record's mid-time are its peers; with at least
    two peers, the record is an outlier when its transmitted flux
    ``F_tr = q_tr / duration`` lies farther from the peers' median than ``mad_factor``
    scaled median absolute deviations (1.4826 MAD) or ``floor_W_m2``, whichever is
    larger (the floor keeps near-identical peers from flagging noise).

    Parameters
    ----------
    windows : pandas.DataFrame
        Window records with ``deployment_id, array_id, source, radius_m,
        window_start, window_end, q_tr_MJ``.
    mad_factor : float
        [1].
    floor_W_m2 : float
        [W m-2].

    Returns
    -------
    pandas.DataFrame
        Same index: ``f_tr_W_m2``, ``f_tr_peer_median_W_m2``, ``n_peers``,
        ``flag_residual_outlier`` (bool).

    Examples
    --------
    >>> w = pd.DataFrame({"deployment_id": list("abcd"), "array_id": ["A"] * 4,
    ...     "source": ["radar"] * 4, "radius_m": [15000.0] * 4,
    ...     "window_start": pd.to_datetime(["2025-07-01"] * 4),
    ...     "window_end": pd.to_datetime(["2025-07-16"] * 4),
    ...     "q_tr_MJ": [13.0, 13.6, 12.4, 40.0]})
    >>> residual_outliers(w)["flag_residual_outlier"].tolist()
    [False, False, False, True]
    """
    out = pd.DataFrame(index=windows.index)
    dur = (windows["window_end"] - windows["window_start"]).dt.total_seconds()
    f_tr = windows["q_tr_MJ"].astype(float) * 1e6 / dur.where(dur > 0)
    out["f_tr_W_m2"] = f_tr
    mid = windows["window_start"] + (windows["window_end"] - windows["window_start"]) / 2
    keys = ["array_id", "source", "radius_m"]
    n_peers = np.zeros(len(windows), dtype=int)
    peer_median = np.full(len(windows), np.nan)
    outlier = np.zeros(len(windows), dtype=bool)
    f_all, mid_all = f_tr.to_numpy(float), mid.to_numpy()
    for _, group in windows.groupby(keys, sort=False):
        pos = windows.index.get_indexer(group.index)
        dep = group["deployment_id"].to_numpy()
        start, end = group["window_start"].to_numpy(), group["window_end"].to_numpy()
        f = f_all[pos]
        for k, i in enumerate(pos):
            peers = (dep != dep[k]) & (start <= mid_all[i]) & (end > mid_all[i])
            vals = f[peers]
            vals = vals[np.isfinite(vals)]
            n_peers[i] = vals.size
            if vals.size < 2 or not np.isfinite(f_all[i]):
                continue
            med = float(np.median(vals))
            mad = 1.4826 * float(np.median(np.abs(vals - med)))
            peer_median[i] = med
            outlier[i] = bool(abs(f_all[i] - med) > max(mad_factor * mad, floor_W_m2))
    out["f_tr_peer_median_W_m2"] = peer_median
    out["n_peers"] = n_peers
    out["flag_residual_outlier"] = outlier
    return out


def window_time_flags(track_time, distance_m, windows: pd.DataFrame, distance_limit_m: float,
                      daily_speed: pd.Series, max_daily_speed_m_s: float) -> pd.DataFrame:
    """Near-shelf and fast-drift flags of a deployment's windows.

    A window is near the shelf when any track position inside it lies within
    ``distance_limit_m`` of the isobath; it drifts fast when the daily-mean speed of
    any day overlapping it exceeds ``max_daily_speed_m_s``.

    Parameters
    ----------
    track_time : array_like of datetime64
        Times of the along-track distances.
    distance_m : array_like
        Distance to the isobath [m] (NaN: unknown, e.g. no bathymetry grid).
    windows : pandas.DataFrame
        ``window_start``, ``window_end`` of the deployment's windows.
    distance_limit_m : float
        [m].
    daily_speed : pandas.Series
        From :func:`daily_drift_speed` [m s-1].
    max_daily_speed_m_s : float
        [m s-1].

    Returns
    -------
    pandas.DataFrame
        Same index: ``min_distance_to_isobath_m``, ``near_shelf_hours`` (time within the
        limit, from the track samples), ``flag_near_shelf``, ``max_daily_speed_m_s``,
        ``flag_fast_drift``.

    Examples
    --------
    >>> t = pd.date_range("2025-07-01", periods=11, freq="D").values
    >>> w = pd.DataFrame({"window_start": pd.to_datetime(["2025-07-01", "2025-07-06"]),
    ...                   "window_end": pd.to_datetime(["2025-07-06", "2025-07-11"])})
    >>> speed = pd.Series([0.1] * 10, index=pd.DatetimeIndex(t[:-1]))
    >>> f = window_time_flags(t, np.linspace(100e3, 0.0, 11), w, 50e3, speed, 0.5)
    >>> f["flag_near_shelf"].tolist(), f["flag_fast_drift"].tolist()
    ([False, True], [False, False])
    """
    t = np.asarray(track_time, dtype="datetime64[ns]")
    dist = np.asarray(distance_m, dtype=float)
    out = pd.DataFrame(index=windows.index)
    cols = {"min_distance_to_isobath_m": [], "near_shelf_hours": [], "flag_near_shelf": [],
            "max_daily_speed_m_s": [], "flag_fast_drift": []}
    if t.size > 1:
        dt_h = np.gradient((t - t[0]).astype(np.int64) / 3.6e12)  # hours each sample stands for
    else:
        dt_h = np.ones(t.shape)
    for _, w in windows.iterrows():
        a, b = np.datetime64(w["window_start"], "ns"), np.datetime64(w["window_end"], "ns")
        sel = (t >= a) & (t <= b)
        d = dist[sel]
        finite = np.isfinite(d)
        near = finite & (d < distance_limit_m)
        cols["min_distance_to_isobath_m"].append(float(d[finite].min()) if finite.any()
                                                 else float("nan"))
        cols["near_shelf_hours"].append(float(dt_h[sel][near].sum()) if finite.any()
                                        else float("nan"))
        cols["flag_near_shelf"].append(bool(near.any()))
        days = daily_speed[(daily_speed.index < pd.Timestamp(b))
                           & (daily_speed.index + pd.Timedelta(days=1) > pd.Timestamp(a))]
        vmax = float(days.max()) if days.notna().any() else float("nan")
        cols["max_daily_speed_m_s"].append(vmax)
        cols["flag_fast_drift"].append(bool(np.isfinite(vmax) and vmax > max_daily_speed_m_s))
    for k, v in cols.items():
        out[k] = v
    return out
