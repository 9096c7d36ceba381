"""The one-dimensional upper-ocean heat budget of a deployment (science.md, "Terms and
signs", "Analysis window", "Results of either sign").

Every term is a cumulative series from the window start t0 on a common time base: the
edges of the forcing (shortwave) intervals that lie entirely inside the analysis window.
Internally J m-2; the output Dataset holds MJ m-2 (outputs.md).

Conventions of the output Dataset (``budget.zarr``):

- ``time`` holds the interval edges t0 ... t_end. Cumulative terms are values at the
  edges (0 at t0). Interval quantities (``sw_down``, ``f_ow``) and window means
  (``f_tr``, ``t_ice``, ``t_area``) at an edge belong to the interval that ends there
  (as the archive's "interval ending at time" rule); their value at t0 is NaN.
  ``time_bnds`` gives each edge's interval.
- Windows are consecutive, ``window_days`` long from t0; the last one may be shorter.
  Window values are computed from the increments inside the window, so a window without
  gaps in f_ow has values even when another window has a gap.
- What the 1-D budget leaves out (turbulent and longwave exchange through open water,
  diffusion and entrainment across z2, lateral advection, lateral melt, sunlight
  absorbed below z2) ends in the residual.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from floeheat import constants as C

__all__ = [
    "time_base",
    "interp_in_time",
    "assemble_budget",
    "seasonal_table",
    "window_table",
    "season_bounds",
    "analysis_window",
]

_MJ = 1.0e-6
_NS = 1.0e-9
#: Default hold of f_ow beyond its first/last sample: half a daily step, so that daily
#: values standing at mid-day cover the window's first and last half days.
#: Common practice, no source.
F_OW_HOLD = pd.Timedelta(hours=12)
#: Default hold of H, z_b and F_c beyond their first/last sample. Common practice, no
#: source.
INSITU_HOLD = pd.Timedelta(days=1)
_NO_HOLD = pd.Timedelta(0)


def _seconds(t) -> np.ndarray:
    return np.asarray(t, dtype="datetime64[ns]").astype(np.int64).astype(float) * _NS


def time_base(time_bnds, start, end) -> tuple[np.ndarray, np.ndarray]:
    """Edges of the forcing intervals lying entirely inside [start, end].

    Parameters
    ----------
    time_bnds : array_like of datetime64, shape (n, 2)
        Lower and upper bound of each forcing interval (e.g. hourly), in time order.
    start, end : datetime-like
        The analysis window (UTC).

    Returns
    -------
    edges : numpy.ndarray of datetime64[ns], shape (m + 1,)
        t0 ... t_end.
    keep : numpy.ndarray of bool, shape (n,)
        Which input intervals were kept.

    Raises
    ------
    ValueError
        When no interval lies inside or the kept intervals are not contiguous.

    Examples
    --------
    >>> b = np.array([["2020-05-01T00", "2020-05-01T01"], ["2020-05-01T01", "2020-05-01T02"],
    ...               ["2020-05-01T02", "2020-05-01T03"]], dtype="datetime64[ns]")
    >>> edges, keep = time_base(b, "2020-05-01T00:30", "2020-05-01T03")
    >>> keep.tolist(), len(edges)
    ([False, True, True], 3)
    """
    b = np.asarray(getattr(time_bnds, "values", time_bnds), dtype="datetime64[ns]")
    t0, t1 = np.datetime64(pd.Timestamp(start), "ns"), np.datetime64(pd.Timestamp(end), "ns")
    keep = (b[:, 0] >= t0) & (b[:, 1] <= t1)
    if not keep.any():
        raise ValueError(f"no forcing interval lies entirely inside {start} .. {end}")
    k = b[keep]
    if np.any(k[1:, 0] != k[:-1, 1]):
        i = int(np.nonzero(k[1:, 0] != k[:-1, 1])[0][0])
        raise ValueError(f"forcing intervals are not contiguous after {k[i, 1]}")
    return np.concatenate([k[:, 0], k[-1:, 1]]), keep


def _interp_1d(xs, ys, xd, max_gap_s, hold_s, skip_nan):
    if skip_nan:
        ok = np.isfinite(ys)
        xs, ys = xs[ok], ys[ok]
    out = np.full(xd.shape, np.nan)
    if xs.size == 0:
        return out
    o = np.argsort(xs, kind="stable")
    xs, ys = xs[o], ys[o]
    i = np.searchsorted(xs, xd, side="right") - 1
    inside = (i >= 0) & (i < xs.size - 1)
    ii = i[inside]
    x0, x1 = xs[ii], xs[ii + 1]
    w = (xd[inside] - x0) / (x1 - x0)
    with np.errstate(invalid="ignore"):
        v = np.where(w == 0.0, ys[ii], ys[ii] * (1.0 - w) + ys[ii + 1] * w)
    if max_gap_s is not None:
        v = np.where((x1 - x0 > max_gap_s) & (w != 0.0), np.nan, v)
    out[inside] = v
    at_end = xd == xs[-1]
    out[at_end] = ys[-1]
    before = (xd < xs[0]) & (xs[0] - xd <= hold_s)
    out[before] = ys[0]
    after = (xd > xs[-1]) & (xd - xs[-1] <= hold_s)
    out[after] = ys[-1]
    return out


def interp_in_time(
    da: xr.DataArray,
    times,
    max_gap=None,
    hold=_NO_HOLD,
    skip_nan: bool = True,
) -> xr.DataArray:
    """Linear interpolation in time to target instants, with gap and end rules.

    Parameters
    ----------
    da : xarray.DataArray
        Has a datetime dim ``time`` (any other dims are kept, moved after ``time``).
    times : array_like of datetime64
        Target instants.
    max_gap : pandas.Timedelta, optional
        Two consecutive samples farther apart than this are not bridged (NaN between).
    hold : pandas.Timedelta, optional
        Beyond the first / last sample the value is held for up to this long (default 0:
        NaN outside the samples).
    skip_nan : bool, optional
        True: NaN samples are dropped before interpolating (bridged). False: a NaN
        sample makes its neighbouring intervals NaN (a missing value stays missing).

    Returns
    -------
    xarray.DataArray
        Dims ``time`` (the targets) plus the others.

    Examples
    --------
    >>> t = np.array(["2020-05-01", "2020-05-03"], dtype="datetime64[ns]")
    >>> da = xr.DataArray([0.0, 2.0], dims="time", coords={"time": t})
    >>> tgt = np.array(["2020-05-02", "2020-05-04"], dtype="datetime64[ns]")
    >>> interp_in_time(da, tgt).values
    array([ 1., nan])
    """
    others = [d for d in da.dims if d != "time"]
    a = da.transpose("time", *others)
    xs = _seconds(a["time"].values)
    xd = _seconds(times)
    y = np.asarray(a.values, dtype=float).reshape(xs.size, -1)
    gap = None if max_gap is None else pd.Timedelta(max_gap).total_seconds()
    hold_s = pd.Timedelta(hold).total_seconds()
    out = np.stack([_interp_1d(xs, y[:, j], xd, gap, hold_s, skip_nan)
                    for j in range(y.shape[1])], axis=1)
    shape = (xd.size,) + tuple(a.sizes[d] for d in others)
    coords = {d: a[d] for d in others if d in a.coords}
    coords["time"] = np.asarray(times, dtype="datetime64[ns]")
    return xr.DataArray(out.reshape(shape), dims=("time", *others), coords=coords,
                        attrs=dict(da.attrs))


def _cum(inc: np.ndarray) -> np.ndarray:
    """Cumulative sum with 0 prepended along axis 0 (NaN propagates forward)."""
    z = np.zeros((1,) + inc.shape[1:])
    return np.concatenate([z, np.cumsum(inc, axis=0)], axis=0)


def _storage_series(storage: xr.Dataset, name: str, edges, hold) -> np.ndarray:
    da = storage[name]
    if "profile" in da.dims:
        da = da.swap_dims({"profile": "time"})
    h = interp_in_time(da, edges, hold=hold, skip_nan=True).values
    return h - h[0]


def _t_interval(num, den, level=0.90):
    """Ratio-estimator t-interval of sum(num)/sum(den) from the window values."""
    ok = np.isfinite(num) & np.isfinite(den) & (den > 0)
    n = int(ok.sum())
    if n < 2:
        return np.nan, np.nan
    a, b = num[ok], den[ok]
    # Student t quantile; scipy.special.stdtrit is the same function as
    # scipy.stats.t.ppf without scipy.stats' import (about 1 s of a job's start-up)
    from scipy.special import stdtrit

    tq = stdtrit(n - 1, 0.5 + level / 2.0)
    with np.errstate(all="ignore"):
        r = a.sum() / b.sum()
        se = np.sqrt(n / (n - 1) * np.sum((a - r * b) ** 2)) / b.sum()
        return r - tq * se, r + tq * se


def assemble_budget(
    shortwave: xr.Dataset,
    start,
    end,
    f_ow: xr.DataArray | None = None,
    storage: xr.Dataset | None = None,
    ice: xr.Dataset | None = None,
    *,
    albedo_ow: float = C.ALBEDO_OPEN_WATER,
    window_days: float = C.WINDOW_DAYS,
    weight_by_ice_fraction: bool = True,
    f_ow_max_gap=None,
    f_ow_hold=F_OW_HOLD,
    insitu_hold=INSITU_HOLD,
    deployment_id: str | None = None,
) -> xr.Dataset:
    """Every budget term, window means, partitioning and season totals of a deployment.

    Parameters
    ----------
    shortwave : xarray.Dataset
        At the buoy: ``sw_down(time)`` [W m-2, mean over each interval] and
        ``time_bnds(time, nv)``.
    start, end : datetime-like
        Analysis window (UTC).
    f_ow : xarray.DataArray, optional
        Open-water fraction [1, 0-1], dims ``(time, source, radius)`` on any times, NaN
        where missing (the source's own gap rules already applied); interpolated
        linearly to the interval midpoints (a NaN sample stays missing; samples farther
        apart than ``f_ow_max_gap`` are not bridged; held for ``f_ow_hold`` beyond the
        ends: default 12 h, half a daily step).
    storage : xarray.Dataset, optional
        From :func:`floeheat.storage.heat_storage`: ``heat_content`` (or ``q_st``) on
        ``profile`` with coord ``time`` [J m-2]; optional ``heat_content_z2_lo/hi``,
        ``z2_profile`` [m]. Interpolated linearly to the edges (profiles that do not
        reach z2 are skipped). None: no profiler, the term is absent.
    ice : xarray.Dataset, optional
        From :func:`floeheat.icebase.ice_base`: ``z_b(time)`` [m, string frame],
        ``f_c(time)`` [W m-2], optional ``melt_energy(time)`` [J m-3, default rho_i L].
        z_b and F_c are interpolated linearly to the edges; Q_b increments are
        e (z_b(t_k) - z_b(t_k+1)) with e at the interval midpoint; Q_c by the trapezoid
        rule. None: no string, the ice terms are absent.
    albedo_ow : float in [0, 1]
    window_days : float > 0
    weight_by_ice_fraction : bool
        Weight the ice-base terms by (1 - f_ow) in q_w (default, science.md); False
        switches the weighting off.
    f_ow_max_gap, f_ow_hold, insitu_hold : pandas.Timedelta
        Interpolation rules (see above); ``insitu_hold`` (default 1 day, common
        practice, no source) holds H, z_b and F_c beyond their first/last sample.
    deployment_id : str, optional

    Returns
    -------
    xarray.Dataset
        See the module docstring and outputs.md. Dims ``time``, ``source``, ``radius``,
        ``window`` (per-window values), ``profile_time`` (``z2``). Season totals are
        variables on ``(source, radius)`` named ``*_season`` [MJ m-2] with
        ``t_season``, ``t_season_lo``, ``t_season_hi``, ``f_ow_mean``, ``complete``,
        ``reason``. ``sw_in_season`` is the denominator of T_season,
        integral (1 - f_ow) F_sw dt (the solar incident on the ice-covered part);
        ``sw_total_season`` is integral F_sw dt.

    Examples
    --------
    >>> b = pd.date_range("2020-06-01", periods=49, freq="h").values
    >>> sw = xr.Dataset({"sw_down": ("time", np.full(48, 200.0)),
    ...                  "time_bnds": (("time", "nv"), np.stack([b[:-1], b[1:]], 1))},
    ...                 coords={"time": b[1:]})
    >>> f = xr.DataArray(np.full((2, 1, 1), 0.1), dims=("time", "source", "radius"),
    ...                  coords={"time": b[[0, -1]], "source": ["radar"], "radius": [2000.0]})
    >>> out = assemble_budget(sw, b[0], b[-1], f_ow=f)
    >>> round(float(out.q_ow[-1, 0, 0]), 4)  # 0.934 * 0.1 * 200 W m-2 * 2 days, MJ m-2
    3.2279
    >>> bool(out.complete_season[0, 0])
    False
    """
    if not 0.0 <= albedo_ow <= 1.0:
        raise ValueError("albedo_ow must lie in [0, 1]")
    edges, keep = time_base(shortwave["time_bnds"].values, start, end)
    n = edges.size - 1
    te = _seconds(edges)
    dt = np.diff(te)
    mids = edges[:-1] + (edges[1:] - edges[:-1]) // 2
    sw = np.asarray(shortwave["sw_down"].values, dtype=float)[keep]

    if f_ow is None:
        f_ow = xr.DataArray(np.zeros((0, 0, 0)), dims=("time", "source", "radius"),
                            coords={"time": np.array([], dtype="datetime64[ns]"),
                                    "source": np.array([], dtype=str),
                                    "radius": np.array([], dtype=float)})
    if set(f_ow.dims) != {"time", "source", "radius"}:
        raise ValueError(f"f_ow must have dims (time, source, radius), got {f_ow.dims}")
    f_ow = f_ow.transpose("time", "source", "radius")
    sources, radii = f_ow["source"].values, f_ow["radius"].values
    ns, nr = sources.size, radii.size
    if f_ow.sizes["time"]:
        fm = interp_in_time(f_ow, mids, max_gap=f_ow_max_gap, hold=f_ow_hold,
                            skip_nan=False).values
    else:
        fm = np.full((n, ns, nr), np.nan)
    sw3 = sw[:, None, None]
    dt3 = dt[:, None, None]

    reasons_common: list[str] = []
    # --- terms (J m-2) -------------------------------------------------------------
    d_ow = (1.0 - albedo_ow) * fm * sw3 * dt3
    if storage is not None:
        hname = "heat_content" if "heat_content" in storage else "q_st"
        q_st = _storage_series(storage, hname, edges, insitu_hold)
        sens = {tag: _storage_series(storage, "heat_content" + tag, edges, insitu_hold)
                for tag in ("_z2_lo", "_z2_hi") if "heat_content" + tag in storage}
        if not np.isfinite(q_st).all():
            reasons_common.append("q_st missing at some times (profiles do not cover the "
                                  "window or do not reach z2)")
    else:
        q_st, sens = np.full(n + 1, np.nan), {}
        reasons_common.append("no profiles: q_st absent")
    if ice is not None:
        zb = interp_in_time(ice["z_b"], edges, hold=insitu_hold).values.astype(float)
        fc = interp_in_time(ice["f_c"], edges, hold=insitu_hold).values.astype(float)
        if "melt_energy" in ice:
            e = interp_in_time(ice["melt_energy"], mids, hold=insitu_hold).values
        else:
            e = np.full(n, C.RHO_ICE_KG_M3 * C.LATENT_HEAT_FUSION_J_KG)
        d_b = e * (zb[:-1] - zb[1:])
        d_c = 0.5 * (fc[:-1] + fc[1:]) * dt
        if not (np.isfinite(d_b).all() and np.isfinite(d_c).all()):
            reasons_common.append("ice bottom or conduction missing at some times")
    else:
        d_b = d_c = np.full(n, np.nan)
        reasons_common.append("no thermistor string: q_b, q_c, q_w absent")
    q_b, q_c = _cum(d_b), _cum(d_c)
    w = (1.0 - fm) if weight_by_ice_fraction else np.ones_like(fm)
    d_w = w * (d_b - d_c)[:, None, None]
    d_st = np.diff(q_st)[:, None, None]
    d_r = d_ow - (d_st + d_w)
    q_ow, q_w = _cum(d_ow), _cum(d_w)
    resid = q_ow - (q_st[:, None, None] + q_w)

    # --- windows --------------------------------------------------------------------
    wlen = window_days * C.SECONDS_PER_DAY
    widx = np.floor((te[:-1] - te[0]) / wlen + 1e-9).astype(int)
    nw = int(widx.max()) + 1
    den_i = (1.0 - fm) * sw3 * dt3
    wsum = np.zeros((nw,) + fm.shape[1:])

    def _wsum(x):
        out = wsum.copy()
        for k in range(nw):
            out[k] = np.sum(x[widx == k], axis=0)
        return out

    dur = np.array([dt[widx == k].sum() for k in range(nw)])[:, None, None]
    w_r, w_den = _wsum(d_r), _wsum(den_i)
    w_sw = np.array([(sw * dt)[widx == k].sum() for k in range(nw)])[:, None, None]
    w_ow, w_st, w_w = _wsum(d_ow), _wsum(np.broadcast_to(d_st, d_r.shape)), _wsum(d_w)
    w_f = _wsum(fm * dt3) / dur
    with np.errstate(all="ignore"):
        w_ftr = -w_r / dur
        w_tice = -w_r / w_den
        w_tarea = -w_r / w_sw
        share_ow = w_ow / w_sw
        share_tr = -w_r / w_sw
        entered = w_ow - w_r  # = stored + passed to the ice
        share_st = w_st / entered
        share_ice = w_w / entered
    wstart = edges[:-1][np.array([np.nonzero(widx == k)[0][0] for k in range(nw)])]
    wend = edges[1:][np.array([np.nonzero(widx == k)[0][-1] for k in range(nw)])]

    def _on_time(x):
        return np.concatenate([np.full((1,) + x.shape[1:], np.nan), x[widx]], axis=0)

    # --- season ---------------------------------------------------------------------
    f_ok = np.isfinite(fm).all(axis=0) if n else np.zeros((ns, nr), bool)
    s_den = np.sum(den_i, axis=0)
    with np.errstate(all="ignore"):
        t_season = -resid[-1] / s_den
    lo = np.full((ns, nr), np.nan)
    hi = np.full((ns, nr), np.nan)
    complete = np.zeros((ns, nr), bool)
    reason = np.empty((ns, nr), dtype=object)
    for i in range(ns):
        for j in range(nr):
            rs = list(reasons_common)
            if not f_ok[i, j]:
                rs.insert(0, "f_ow missing in part of the window (gap beyond the maximum)")
            complete[i, j] = not rs and bool(np.isfinite(t_season[i, j]))
            if not rs and not complete[i, j]:
                rs.append("no shortwave under the ice: T_season undefined")
            reason[i, j] = "; ".join(rs)
            lo[i, j], hi[i, j] = _t_interval(-w_r[:, i, j], w_den[:, i, j])
    reason = reason.astype(str)
    gap = ~f_ok
    season = {
        "sw_in": s_den, "sw_total": np.broadcast_to(np.sum(sw * dt), (ns, nr)),
        "q_ow": q_ow[-1], "q_st": np.broadcast_to(q_st[-1], (ns, nr)),
        "q_b": np.broadcast_to(q_b[-1], (ns, nr)), "q_c": np.broadcast_to(q_c[-1], (ns, nr)),
        "q_w": q_w[-1], "residual": resid[-1],
    }
    season = {k: np.where(gap, np.nan, v) for k, v in season.items()}
    t_season = np.where(gap, np.nan, t_season)
    lo, hi = np.where(gap, np.nan, lo), np.where(gap, np.nan, hi)
    with np.errstate(invalid="ignore", divide="ignore"):
        f_mean = np.where(gap, np.nan, np.sum(fm * dt3, axis=0) / dt.sum())

    # --- Dataset --------------------------------------------------------------------
    T, TSR, SR, W = ("time",), ("time", "source", "radius"), ("source", "radius"), (
        "window", "source", "radius")
    bnds = np.stack([np.concatenate([[np.datetime64("NaT", "ns")], edges[:-1]]), edges], 1)
    coords = {"time": edges, "source": sources, "radius": radii,
              "window_start": ("window", wstart), "window_end": ("window", wend)}
    ds = xr.Dataset(coords=coords)
    ds["radius"].attrs.update(units="m", long_name="averaging radius on the ground")
    ds["time_bnds"] = (("time", "nv"), bnds)

    def put(name, dims, val, units, long_name, **kw):
        ds[name] = (dims, val)
        ds[name].attrs.update(units=units, long_name=long_name, **kw)

    put("sw_down", T, np.concatenate([[np.nan], sw]), "W m-2",
        "downwelling shortwave at the surface, mean over the interval ending at time",
        standard_name="surface_downwelling_shortwave_flux_in_air")
    put("f_ow", TSR, np.concatenate([np.full((1, ns, nr), np.nan), fm]), "1",
        "open-water fraction at the midpoint of the interval ending at time")
    put("q_ow", TSR, q_ow * _MJ, "MJ m-2", "solar entering through open water, cumulative",
        albedo_ow=albedo_ow)
    if storage is not None:
        put("q_st", T, q_st * _MJ, "MJ m-2", "heat storage change, cumulative")
        for tag, v in sens.items():
            put("q_st" + tag, T, v * _MJ, "MJ m-2",
                f"heat storage change with z2 moved {'up' if tag.endswith('lo') else 'down'}"
                " by the sensitivity offset")
        if "z2_profile" in storage:
            zp = storage["z2_profile"]
            put("z2", ("profile_time",), zp.values, "m",
                "per-profile density-threshold depth (diagnostic)", positive="down")
            ds = ds.assign_coords(profile_time=("profile_time", zp["time"].values
                                                if "time" in zp.coords else np.arange(zp.size)))
            if "z2" in storage:
                ds.attrs["z2_m"] = float(storage["z2"])
    if ice is not None:
        put("q_b", T, q_b * _MJ, "MJ m-2", "basal melt energy per unit ice area, cumulative")
        put("q_c", T, q_c * _MJ, "MJ m-2",
            "conduction into the ice base per unit ice area, cumulative")
        put("q_w", TSR, q_w * _MJ, "MJ m-2",
            "ocean-to-ice heat per unit surface, cumulative",
            weight_by_ice_fraction=str(weight_by_ice_fraction))
    put("residual", TSR, resid * _MJ, "MJ m-2", "residual R = q_ow - (q_st + q_w)",
        comment="R < 0: a missing source (sunlight through the ice). Also holds what the "
                "1-D budget leaves out: turbulent and longwave exchange through open water, "
                "diffusion and entrainment across z2, lateral advection, lateral melt, "
                "sunlight absorbed below z2. Never clipped.")
    put("f_tr", TSR, _on_time(w_ftr), "W m-2", "transmitted flux -dR/dt, window mean")
    put("t_ice", TSR, _on_time(w_tice), "1",
        "through-ice transmittance per ice-covered area, window mean")
    put("t_area", TSR, _on_time(w_tarea), "1", "area-mean transmitted fraction, window mean")
    # per-window values
    put("window_f_tr", W, w_ftr, "W m-2", "transmitted flux, window mean")
    put("window_t_ice", W, w_tice, "1", "through-ice transmittance, window totals' ratio")
    put("window_t_area", W, w_tarea, "1", "area-mean transmitted fraction")
    put("window_f_ow", W, w_f, "1", "open-water fraction, window mean")
    put("window_sw_in", W, w_den * _MJ, "MJ m-2", "solar incident on the ice-covered part")
    put("window_sw_total", W, np.broadcast_to(w_sw, w_r.shape) * _MJ, "MJ m-2",
        "solar incident at the surface")
    put("share_ow", W, share_ow, "1", "share of the incident solar entering through open water")
    put("share_tr", W, share_tr, "1", "share of the incident solar transmitted through ice")
    put("share_rest", W, 1.0 - share_ow - share_tr, "1",
        "share of the incident solar reflected by open water or reflected or absorbed by "
        "ice and snow")
    put("share_stored", W, share_st, "1", "share of the solar entering the ocean stored")
    put("share_to_ice", W, share_ice, "1",
        "share of the solar entering the ocean passed to the ice (q_w)")
    # flags
    pos = np.nan_to_num(_on_time(w_ftr), nan=0.0) < 0
    put("qc_positive_residual", TSR, pos.astype(np.int8), "1",
        "window with a positive residual trend (negative transmitted estimate)",
        flag_values=np.array([0, 1], np.int8), flag_meanings="pass positive_residual",
        comment="f_tr < 0 in the window: an overestimated open-water fraction or a missing "
                "sink; the value is kept, never clipped")
    put("qc_f_ow_missing", TSR,
        np.concatenate([np.zeros((1, ns, nr), bool), ~np.isfinite(fm)]).astype(np.int8), "1",
        "f_ow missing in the interval ending at time", flag_values=np.array([0, 1], np.int8),
        flag_meanings="pass f_ow_missing")
    put("qc_q_st_missing", T, (~np.isfinite(q_st)).astype(np.int8), "1",
        "heat storage change missing (no profiles, or none covering this time)",
        flag_values=np.array([0, 1], np.int8), flag_meanings="pass q_st_missing")
    put("qc_ice_missing", T, (~np.isfinite(q_b + q_c)).astype(np.int8), "1",
        "ice-base terms missing (no string, or none covering this time)",
        flag_values=np.array([0, 1], np.int8), flag_meanings="pass ice_missing")
    # season
    for k, v in season.items():
        put(f"{k}_season", SR, v * _MJ, "MJ m-2", f"season total of {k}")
    ds["sw_in_season"].attrs["long_name"] = (
        "season integral of (1 - f_ow) F_sw dt, the denominator of T_season")
    put("t_season", SR, t_season, "1", "season transmittance -R(t_end) / sw_in")
    put("t_season_lo", SR, lo, "1", "lower bound of the 90 % interval of t_season",
        method="t-interval of the ratio estimator over the window totals")
    put("t_season_hi", SR, hi, "1", "upper bound of the 90 % interval of t_season",
        method="t-interval of the ratio estimator over the window totals")
    put("f_ow_mean", SR, f_mean, "1", "time-mean open-water fraction over the window")
    ds["complete_season"] = (SR, complete)
    ds["complete_season"].attrs["long_name"] = "every term available over the whole window"
    ds["reason"] = (SR, reason)
    ds["reason"].attrs["long_name"] = "why the season is incomplete (empty when complete)"
    put("qc_season_positive_residual", SR,
        (np.nan_to_num(resid[-1], nan=-1.0) > 0).astype(np.int8), "1",
        "season residual positive (negative transmitted estimate)",
        flag_values=np.array([0, 1], np.int8), flag_meanings="pass positive_residual")

    from floeheat import ARCHIVE_FORMAT_VERSION, OUTPUT_FORMAT_VERSION, __version__

    ds.attrs.update(
        deployment_id=deployment_id or "",
        window_start=str(pd.Timestamp(edges[0])), window_end=str(pd.Timestamp(edges[-1])),
        albedo_ow=albedo_ow, window_days=window_days,
        weight_by_ice_fraction=str(weight_by_ice_fraction),
        software_version=__version__, archive_format_version=ARCHIVE_FORMAT_VERSION,
        output_format_version=OUTPUT_FORMAT_VERSION,
        t_season_interval="90 % t-interval of the ratio estimator sum(-dR)/sum((1-f_ow)F_sw dt)"
                          " over the windows (windows treated as independent)",
    )
    return ds


_COLUMNS = ["deployment_id", "array_id", "source", "radius_m", "start", "end", "sw_in_MJ",
            "q_ow_MJ", "q_st_MJ", "q_b_MJ", "q_c_MJ", "q_w_MJ", "residual_MJ", "t_ice",
            "t_ice_lo", "t_ice_hi", "f_ow_mean", "complete", "reason"]


def seasonal_table(
    budget: xr.Dataset, deployment_id: str | None = None, array_id: str | None = None
) -> pd.DataFrame:
    """The deployment's rows of ``seasonal.csv`` (one per source x radius).

    ``sw_in_MJ`` is the denominator of T_season, the season integral of
    (1 - f_ow) F_sw dt [MJ m-2]; ``t_ice`` is T_season and ``t_ice_lo``/``t_ice_hi`` its
    90 % interval. Values are NaN where the season is incomplete for lack of f_ow or of
    the instrument a term needs.

    Parameters
    ----------
    budget : xarray.Dataset
        From :func:`assemble_budget`.
    deployment_id, array_id : str, optional
        Default: the Dataset's ``deployment_id`` attribute; empty array_id.

    Returns
    -------
    pandas.DataFrame
        Columns as outputs.md.

    Examples
    --------
    >>> b = pd.date_range("2020-06-01", periods=25, freq="h").values
    >>> sw = xr.Dataset({"sw_down": ("time", np.full(24, 100.0)),
    ...                  "time_bnds": (("time", "nv"), np.stack([b[:-1], b[1:]], 1))})
    >>> seasonal_table(assemble_budget(sw, b[0], b[-1])).shape
    (0, 19)
    """
    dep = deployment_id if deployment_id is not None else budget.attrs.get("deployment_id", "")
    rows = []
    for s in budget["source"].values:
        for r in budget["radius"].values:
            b = budget.sel(source=s, radius=r)
            rows.append({
                "deployment_id": dep, "array_id": array_id or "", "source": str(s),
                "radius_m": float(r), "start": pd.Timestamp(budget["time"].values[0]),
                "end": pd.Timestamp(budget["time"].values[-1]),
                **{f"{k}_MJ": float(b[f"{k}_season"]) for k in
                   ("sw_in", "q_ow", "q_st", "q_b", "q_c", "q_w", "residual")},
                "t_ice": float(b.t_season), "t_ice_lo": float(b.t_season_lo),
                "t_ice_hi": float(b.t_season_hi), "f_ow_mean": float(b.f_ow_mean),
                "complete": bool(b.complete_season), "reason": str(b.reason.values),
            })
    return pd.DataFrame(rows, columns=_COLUMNS)


def window_table(budget: xr.Dataset) -> pd.DataFrame:
    """Per-window values, one row per window x source x radius (for climatologies).

    Parameters
    ----------
    budget : xarray.Dataset
        From :func:`assemble_budget`.

    Returns
    -------
    pandas.DataFrame
        Columns ``window_start, window_end, source, radius_m, f_ow_mean, sw_total_MJ,
        sw_in_MJ, f_tr, t_ice, t_area, share_ow, share_tr, share_rest, share_stored,
        share_to_ice``.

    Examples
    --------
    >>> b = pd.date_range("2020-06-01", periods=25, freq="h").values
    >>> sw = xr.Dataset({"sw_down": ("time", np.full(24, 100.0)),
    ...                  "time_bnds": (("time", "nv"), np.stack([b[:-1], b[1:]], 1))})
    >>> list(window_table(assemble_budget(sw, b[0], b[-1])).columns)[:4]
    ['window_start', 'window_end', 'source', 'radius_m']
    """
    names = {"window_f_ow": "f_ow_mean", "window_sw_total": "sw_total_MJ",
             "window_sw_in": "sw_in_MJ", "window_f_tr": "f_tr", "window_t_ice": "t_ice",
             "window_t_area": "t_area", "share_ow": "share_ow", "share_tr": "share_tr",
             "share_rest": "share_rest", "share_stored": "share_stored",
             "share_to_ice": "share_to_ice"}
    cols = ["window_start", "window_end", "source", "radius_m", *names.values()]
    if budget.sizes.get("source", 0) == 0 or budget.sizes.get("radius", 0) == 0:
        return pd.DataFrame(columns=cols)
    df = budget[list(names)].to_dataframe().reset_index().rename(
        columns={**names, "radius": "radius_m"})
    return df[cols]


def season_bounds(season: dict, reference_time) -> tuple[pd.Timestamp, pd.Timestamp]:
    """The configured season (month-day start and end, UTC) that holds a reference time.

    A season whose end month-day comes before its start runs across the year boundary
    (the southern default, 1 November to 1 April).

    Parameters
    ----------
    season : dict
        ``{"start": "MM-DD", "end": "MM-DD"}`` (end exclusive, at 00:00 UTC).
    reference_time : datetime-like
        A time inside the data (e.g. the median instrument time).

    Returns
    -------
    (pandas.Timestamp, pandas.Timestamp)

    Examples
    --------
    >>> season_bounds({"start": "05-01", "end": "10-01"}, "2024-07-10")
    (Timestamp('2024-05-01 00:00:00'), Timestamp('2024-10-01 00:00:00'))
    >>> season_bounds({"start": "11-01", "end": "04-01"}, "2025-01-15")
    (Timestamp('2024-11-01 00:00:00'), Timestamp('2025-04-01 00:00:00'))
    """
    ref = pd.Timestamp(reference_time)
    (sm, sd), (em, ed) = ([int(v) for v in season[k].split("-")] for k in ("start", "end"))
    if (em, ed) > (sm, sd):
        return pd.Timestamp(ref.year, sm, sd), pd.Timestamp(ref.year, em, ed)
    # across the year boundary: the season starting in the reference's year or the one
    # before, whichever holds it (or is nearer).
    start = pd.Timestamp(ref.year if (ref.month, ref.day) >= (sm, sd) else ref.year - 1, sm, sd)
    return start, pd.Timestamp(start.year + 1, em, ed)


def analysis_window(start, end, profile_times=None, icemass_times=None,
                    season: dict | None = None) -> tuple[pd.Timestamp, pd.Timestamp]:
    """A deployment's analysis window (science.md, "Analysis window").

    The window is the deployment's start and end where given, else the overlap of its
    profiler and thermistor records (the one record when only one instrument exists),
    intersected with the configured season.

    Parameters
    ----------
    start, end : datetime-like or None
        From deployments.csv (None when empty).
    profile_times, icemass_times : array_like of datetime64 or None
        The instruments' record times.
    season : dict, optional
        ``{"start": "MM-DD", "end": "MM-DD"}`` of the deployment's hemisphere.

    Returns
    -------
    (pandas.Timestamp, pandas.Timestamp)

    Raises
    ------
    ValueError
        When the window is empty (records that do not overlap, or lie outside the season).

    Examples
    --------
    >>> p = np.array(["2024-04-20", "2024-08-01"], dtype="datetime64[ns]")
    >>> i = np.array(["2024-04-25", "2024-09-20"], dtype="datetime64[ns]")
    >>> analysis_window(None, None, p, i, {"start": "05-01", "end": "10-01"})
    (Timestamp('2024-05-01 00:00:00'), Timestamp('2024-08-01 00:00:00'))
    """
    records = [np.asarray(t, dtype="datetime64[ns]") for t in (profile_times, icemass_times)
               if t is not None and np.size(t)]
    lo = max((pd.Timestamp(np.nanmin(t)) for t in records), default=None)
    hi = min((pd.Timestamp(np.nanmax(t)) for t in records), default=None)
    w0 = pd.Timestamp(start) if start is not None else lo
    w1 = pd.Timestamp(end) if end is not None else hi
    if w0 is None or w1 is None:
        raise ValueError("no analysis window: give start and end in deployments.csv or "
                         "provide instrument records")
    if season is not None:
        s0, s1 = season_bounds(season, w0 + (w1 - w0) / 2)
        w0, w1 = max(w0, s0), min(w1, s1)
    if not w0 < w1:
        raise ValueError(f"the analysis window is empty ({w0} to {w1}): the instrument "
                         "records do not overlap each other or the season; check start/end "
                         "in deployments.csv or the season in the config")
    return w0, w1
