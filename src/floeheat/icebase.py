"""Ice bottom, top surface and conduction from an ice mass-balance thermistor string
(science.md, "Ice bottom and conduction", "Terms and signs").

Frame: depth is positive down from the string's reference, which moves with the ice, so
surface melt and floe rise do not move the bottom in this frame. Input is the canonical
icemass Dataset of the reader layer: dims ``(time, sensor)``, ``depth(sensor)`` [m],
``temperature(time, sensor)`` [degC], optional ``ice_bottom_depth(time)`` [m] and
``heated_rise(time, sensor)`` [K].

Method (choices of this module, documented per function):

1. Sensors are cleaned: readings outside a plausible range, sensors mostly missing, and
   long runs of identical readings that disagree with the neighbouring sensors are
   masked (:func:`mask_bad_sensors`); spikes in time are removed by a rolling median
   with a MAD threshold (:func:`despike`).
2. The bottom (:func:`find_ice_bottom`): the deepest sensors are taken as water (nearly
   uniform, near freezing); the deepest pair of sensors departing from the water's
   temperature by more than a threshold marks ice; a least-squares line through the
   ice sensors just above is extended down to where it meets the water temperature.
   Where heating-cycle rises are given, the deepest pair of sensors whose rise is well
   above the water's (water carries the pulse's heat away) gives a second estimate,
   used where the temperature method finds nothing.
3. The top surface (:func:`find_top_surface`): air shows a large temporal variance (the
   diurnal cycle); snow and ice damp it. The surface lies below the deepest sensor of
   the contiguous top run whose one-day standard deviation stays above a fraction of
   the topmost sensor's.
4. Both series are smoothed in time by a centred rolling median (one day by default).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from floeheat import constants as C

__all__ = [
    "mask_bad_sensors",
    "despike",
    "find_ice_bottom",
    "find_top_surface",
    "smooth_in_time",
    "ice_conductivity",
    "ice_enthalpy_bl99",
    "melt_energy_per_volume",
    "conductive_flux",
    "basal_melt_energy",
    "compare_with_sounder",
    "bulk_heat_flux",
    "ice_base",
]


def _tz(temperature: xr.DataArray, depth_m) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(T[time, sensor] sorted by depth, depth sorted, order)."""
    z = np.asarray(depth_m, dtype=float)
    order = np.argsort(z, kind="stable")
    t = np.asarray(temperature.transpose("time", "sensor").values, dtype=float)
    return t[:, order], z[order], order


def _lsq(z: np.ndarray, t: np.ndarray) -> tuple[float, float]:
    """Least-squares slope and intercept of t(z)."""
    zm, tm = z.mean(), t.mean()
    dz = z - zm
    den = float(np.sum(dz * dz))
    if den == 0.0:
        return np.nan, np.nan
    g = float(np.sum(dz * (t - tm)) / den)
    return g, float(tm - g * zm)


def mask_bad_sensors(
    temperature: xr.DataArray,
    valid_range_degC: tuple[float, float] = (-60.0, 30.0),
    max_nan_fraction: float = 0.5,
    stuck_steps: int = 24,
    tolerance_K: float = 0.2,
) -> xr.Dataset:
    """Mask dead, out-of-range and stuck thermistor readings.

    A reading is masked when it lies outside ``valid_range_degC``; a whole sensor when
    more than ``max_nan_fraction`` of its record is missing after that; a reading when it
    belongs to a run of at least ``stuck_steps`` identical consecutive values that
    differs by more than ``tolerance_K`` from the median of the two sensors on either
    side (a sensor stuck near its neighbours' values is harmless and kept, which also
    keeps water sensors whose reading does not change at the logger's resolution).
    Thresholds: common practice, no source.

    Parameters
    ----------
    temperature : xarray.DataArray
        Dims ``(time, sensor)`` [degC], sensors in string order.
    valid_range_degC : (float, float)
    max_nan_fraction : float in [0, 1]
    stuck_steps : int >= 2
    tolerance_K : float > 0

    Returns
    -------
    xarray.Dataset
        ``temperature`` (masked, NaN), ``qc_dead_sensor(sensor)`` (bool),
        ``qc_masked(time, sensor)`` (bool: masked here, missing input excluded).

    Examples
    --------
    >>> t = np.tile(np.linspace(-5.0, -1.8, 6), (30, 1))
    >>> t += np.random.default_rng(0).normal(0, 0.01, t.shape)
    >>> t[:, 2] = 7.0  # stuck far from its neighbours
    >>> out = mask_bad_sensors(xr.DataArray(t, dims=("time", "sensor")))
    >>> bool(out.qc_masked[:, 2].all()), int(out.qc_masked.sum())
    (True, 30)
    """
    t = temperature.transpose("time", "sensor")
    v = np.asarray(t.values, dtype=float).copy()
    missing_in = ~np.isfinite(v)
    lo, hi = valid_range_degC
    v[(v < lo) | (v > hi)] = np.nan
    dead = np.mean(~np.isfinite(v), axis=0) > max_nan_fraction
    v[:, dead] = np.nan
    nt, ns = v.shape
    # neighbours' median (two on each side), per time
    neigh = np.full_like(v, np.nan)
    for j in range(ns):
        idx = [k for k in range(j - 2, j + 3) if 0 <= k < ns and k != j]
        with np.errstate(all="ignore"):
            if idx:
                blk = v[:, idx]
                has = np.isfinite(blk).any(axis=1)
                neigh[has, j] = np.nanmedian(blk[has], axis=1)
    for j in range(ns if nt else 0):
        col = v[:, j]
        # runs of identical consecutive readings (a missing one is a run of its own)
        starts = np.flatnonzero(np.r_[True, col[1:] != col[:-1]])
        ends = np.r_[starts[1:], nt]
        stuck = (ends - starts >= stuck_steps) & np.isfinite(col[starts])
        for start, end in zip(starts[stuck], ends[stuck]):
            dev = np.abs(col[start:end] - neigh[start:end, j])
            if np.nanmedian(dev) > tolerance_K:
                v[start:end, j] = np.nan
    masked = ~np.isfinite(v) & ~missing_in
    return xr.Dataset(
        {
            "temperature": t.copy(data=v),
            "qc_dead_sensor": xr.DataArray(dead, dims=("sensor",),
                                           attrs={"long_name": "sensor masked as dead"}),
            "qc_masked": xr.DataArray(masked, dims=t.dims, coords=t.coords,
                                      attrs={"long_name": "reading masked (range or stuck)"}),
        }
    )


def despike(
    temperature: xr.DataArray, window: int = 7, n_mad: float = 5.0, floor_K: float = 0.05
) -> xr.DataArray:
    """Remove spikes in time: a centred rolling median with a MAD threshold.

    A reading is a spike when it departs from the rolling median over ``window`` time
    steps by more than ``n_mad * 1.4826 * MAD + floor_K`` (MAD: the rolling median of
    absolute departures; the floor keeps near-constant water sensors from being thinned
    by resolution noise). Common practice, no source.

    Parameters
    ----------
    temperature : xarray.DataArray
        Dims include ``time`` [degC].
    window : int, odd >= 3
    n_mad, floor_K : float > 0

    Returns
    -------
    xarray.DataArray
        Same shape, spikes set to NaN; attr ``n_spikes``.

    Examples
    --------
    >>> t = xr.DataArray(np.r_[np.full(5, -1.8), 3.0, np.full(5, -1.8)], dims="time")
    >>> int(despike(t).isnull().sum())
    1
    """
    med = _rolling_median_in_time(temperature, window)
    dev = abs(temperature - med)
    mad = _rolling_median_in_time(dev, window)
    spike = dev > n_mad * 1.4826 * mad + floor_K
    out = temperature.where(~spike)
    out.attrs = dict(temperature.attrs, n_spikes=int(spike.sum()))
    return out


def _rolling_median_in_time(da: xr.DataArray, window: int) -> xr.DataArray:
    """Centred rolling median over ``window`` steps of ``time``, missing values left
    out (at least one needed), as ``da.rolling(time=window, center=True,
    min_periods=1).median()`` gives it, through pandas' rolling median (a running
    median in C; xarray without bottleneck takes the median of every window apart)."""
    dims = ("time", *(d for d in da.dims if d != "time"))
    values = np.asarray(da.transpose(*dims).values)
    dtype = values.dtype if values.dtype.kind == "f" else np.dtype(float)
    flat = values.reshape(values.shape[0], -1)
    med = pd.DataFrame(flat).rolling(window, center=True, min_periods=1).median()
    out = med.to_numpy(dtype=float).astype(dtype, copy=False).reshape(values.shape)
    return da.transpose(*dims).copy(data=out).transpose(*da.dims)


def _bottom_from_rise(r: np.ndarray, z: np.ndarray, n_water: int, rise_factor: float) -> float:
    ok = np.isfinite(r)
    if ok.sum() < n_water + 2:
        return np.nan
    rv, zv = r[ok], z[ok]
    rw = float(np.median(rv[-n_water:]))
    ice = rv[:-n_water] > rise_factor * rw
    pair = np.nonzero(ice[1:] & ice[:-1])[0]
    if pair.size == 0:
        return np.nan
    j = int(pair[-1]) + 1
    return float(0.5 * (zv[j] + zv[j + 1]))


#: Longest gap between heating cycles over which their ice-bottom picks are carried.
#: Common practice, no source (cycles usually run once or a few times a day).
HEATED_MAX_GAP = np.timedelta64(36, "h")


def _bridge(temperature: xr.DataArray, values: np.ndarray, max_gap) -> np.ndarray:
    """Linear interpolation of sparse per-step values over gaps up to ``max_gap``."""
    ok = np.isfinite(values)
    if ok.sum() < 1 or "time" not in temperature.coords:
        return values.copy()
    t = temperature["time"].values.astype("datetime64[ns]").astype(np.int64).astype(float)
    tk, vk = t[ok], values[ok]
    out = np.interp(t, tk, vk)
    nxt = np.searchsorted(tk, t, side="left").clip(0, tk.size - 1)
    prv = (np.searchsorted(tk, t, side="right") - 1).clip(0, tk.size - 1)
    gap = max_gap.astype("timedelta64[ns]").astype(np.int64)
    far = (np.minimum(np.abs(t - tk[nxt]), np.abs(t - tk[prv])) > gap / 2) & \
        ((tk[nxt] - tk[prv]) > gap)
    out[far | (t < tk[0] - gap / 2) | (t > tk[-1] + gap / 2)] = np.nan
    return out


def _two_layer_cost(z: np.ndarray, t: np.ndarray, target: float, grid: np.ndarray) -> np.ndarray:
    """Sum of squared residuals of the two-layer model for each candidate interface depth.

    Sensors (``z``, ``t``) at or above a candidate zc are ice, a straight line reaching
    ``target`` (the freezing temperature) at zc; those below are water, a constant. inf
    where either layer has too few sensors (3 ice, 2 water).

    The ice of a candidate is a run of the sensors sorted by depth, so every sum is a
    difference of running sums (of depths about their mean and temperatures about the
    target, which keeps the differences well conditioned).
    """
    order = np.argsort(z, kind="stable")
    zs = np.asarray(z, float)[order]
    ref = float(np.mean(zs))
    dz, d = zs - ref, np.asarray(t, float)[order] - target

    def running(x):
        return np.concatenate([[0.0], np.cumsum(x)])

    s_z, s_zz, s_d, s_dd, s_zd = (running(x) for x in (dz, dz * dz, d, d * d, dz * d))
    k = np.searchsorted(zs, grid, side="right")  # ice sensors: z <= zc
    zc = np.asarray(grid, float) - ref
    sxx = s_zz[k] - 2.0 * zc * s_z[k] + k * zc * zc
    sxy = s_zd[k] - zc * s_d[k]
    with np.errstate(divide="ignore", invalid="ignore"):
        sse_ice = s_dd[k] - np.where(sxx > 0, sxy * sxy / sxx, 0.0)
    nw = zs.size - k
    w_sum, w_sq = s_d[-1] - s_d[k], s_dd[-1] - s_dd[k]
    sse_w = np.where(nw > 0, w_sq - w_sum ** 2 / np.maximum(nw, 1), 0.0)
    ok = (k >= 3) & (nw >= 2)
    return np.where(ok, sse_ice + sse_w, np.inf)


def _minimum(grid: np.ndarray, cost: np.ndarray, n_obs: int, breaks=()) -> tuple[float, float]:
    """Sub-grid minimum of a cost curve (parabola through the lowest point and its
    neighbours, unless one of ``breaks``, where the curve jumps, lies between them) and
    the width of its 95 % interval: the candidates within 3.84 sigma^2
    of the minimum (chi-square, one degree of freedom), sigma^2 = min cost / (n_obs - 3).
    """
    if not np.isfinite(cost).any():
        return np.nan, np.nan
    k = int(np.argmin(cost))
    best = float(grid[k])
    sigma2 = max(float(cost[k]) / max(n_obs - 3, 1), 1e-12)
    near = grid[cost <= cost[k] + 3.84 * sigma2]
    width = float(near.max() - near.min())
    smooth = 0 < k < grid.size - 1 and not np.any(
        (np.asarray(breaks) > grid[max(k - 1, 0)] - 1e-9)
        & (np.asarray(breaks) < grid[min(k + 1, grid.size - 1)] + 1e-9))
    if smooth and np.isfinite(cost[k - 1]) and np.isfinite(cost[k + 1]):
        den = cost[k - 1] - 2.0 * cost[k] + cost[k + 1]
        if den > 0:
            h = 0.5 * (grid[k + 1] - grid[k - 1])
            best += 0.5 * h * (cost[k - 1] - cost[k + 1]) / den
    return best, width


def _interface_fit(zv: np.ndarray, tv: np.ndarray, target: float, z_lo: float, z_hi: float,
                   water_span_m: float, step_m: float) -> tuple[float, float]:
    """Interface depth by a two-layer least-squares fit of one temperature profile.

    Candidates lie on a grid of ``step_m`` in [z_lo, z_hi]; the sensors are a fixed set
    (from ``z_lo`` to ``z_hi + water_span_m``) so that the costs compare. The known
    interface temperature lets the ice line locate the base even where the water is
    barely warmer than the ice just above it. Returns the depth and the width of its
    95 % interval (see :func:`_minimum`).
    """
    use = (zv >= z_lo - 1e-9) & (zv <= z_hi + water_span_m + 1e-9)
    if use.sum() < 5:
        return np.nan, np.nan
    # the sensors' own depths are candidates too (the cost jumps there)
    zu = zv[use]
    grid = np.union1d(np.arange(z_lo, z_hi + 0.5 * step_m, step_m),
                      zu[(zu >= z_lo) & (zu <= z_hi)])
    return _minimum(grid, _two_layer_cost(zv[use], tv[use], target, grid), int(use.sum()),
                    breaks=zv[use])


def find_ice_bottom(
    temperature: xr.DataArray,
    depth_m,
    n_water: int = 5,
    departure_K: float = 0.1,
    span_m: float = 0.2,
    min_gradient_K_m: float = 0.1,
    water_spread_K: float = 0.15,
    heated_rise: xr.DataArray | None = None,
    rise_factor: float = 1.5,
    freezing_temperature_degC=None,
    refine: bool = True,
    top_m=None,
    max_width_m: float = 0.1,
    water_span_m: float = 0.3,
    step_m: float = 0.0025,
) -> xr.Dataset:
    """Ice-ocean interface per time step (unsmoothed), in the string's frame.

    Per time step, on the valid sensors: the water temperature T_w is the median of the
    ``n_water`` deepest (required to agree within ``water_spread_K``, else not found);
    the ice sensor is the deeper of the deepest pair of adjacent sensors both departing
    from T_w by more than ``departure_K``; a least-squares line through the sensors
    within ``span_m`` above it (at least 3) must have |dT/dz| >= ``min_gradient_K_m``;
    the interface is where the line meets the freezing temperature of the water below
    (``freezing_temperature_degC``: the ice base is at the freezing point, while the
    mixed layer is usually warmer) or, without it, T_w. With ``refine`` (the default)
    and a freezing temperature, that first estimate only bounds a search: the
    interface is the depth that best splits the sensors from ``span_m`` above the ice
    sensor (but below the top surface ``top_m`` plus one spacing, so that air and snow
    stay out) down to the shallowest water sensor, plus ``water_span_m`` of water, into
    ice, a line reaching the freezing temperature at the interface, and water, a
    constant (least squares over candidates ``step_m`` apart, refined between them by a
    parabola); a step whose 95 % interval
    (chi-square on the residual variance) is wider than ``max_width_m`` is not found,
    as happens when the ice is nearly isothermal at the freezing point and the
    interface cannot be seen in temperature. The interface is kept between the ice
    sensor and the shallowest water sensor; a crossing farther below the ice sensor
    than (|T_w - target| + 2 ``departure_K``) / |dT/dz| plus one sensor spacing is a
    step, not a gradient, and counts as not found. With ``heated_rise``, the deeper of
    the deepest pair of adjacent sensors whose rise exceeds ``rise_factor`` times the
    water sensors' median rise marks ice, and the interface is the midpoint to the next
    sensor; this estimate serves where the temperature method finds nothing.
    Thresholds: common practice, no source.

    Parameters
    ----------
    temperature : xarray.DataArray
        Dims ``(time, sensor)`` [degC], cleaned (see :func:`mask_bad_sensors`).
    depth_m : array_like (sensor,)
        Sensor depth [m, positive down from the string's reference].
    n_water : int
    departure_K, span_m, min_gradient_K_m, water_spread_K : float
    heated_rise : xarray.DataArray, optional
        Dims ``(time, sensor)`` [K]; NaN at times without a heating cycle.
    rise_factor : float > 1
    freezing_temperature_degC : float or array_like (time,), optional
        In-situ freezing temperature of the water under the ice [degC] (e.g. from the
        profiles' shallowest salinity, :func:`floeheat.storage.surface_freezing_temperature`);
        NaN entries fall back to T_w.
    refine : bool
        Use the two-layer fit (above); False keeps the line crossing.
    top_m : float or array_like (time,), optional
        Top surface [m, positive down] (smoothed :func:`find_top_surface`).
    max_width_m, water_span_m, step_m : float
        Widest accepted 95 % interval [m]; water sensors used below the search [m];
        candidate spacing [m].

    Returns
    -------
    xarray.Dataset
        Dim ``time``: ``z_b`` [m] (NaN where not found), ``water_temperature`` [degC],
        ``gradient`` [K m-1] of the fit, ``source`` (int8: 0 none, 1 temperature,
        2 heating rise), ``z_b_heated`` [m] (the heating estimate, NaN without).

    Examples
    --------
    >>> z = np.arange(0.0, 3.0, 0.05)
    >>> prof = np.where(z < 1.5, -1.8 + 1.2 * (1.5 - z) / 1.5 * 1.0, -1.8)
    >>> T = xr.DataArray(np.tile(prof, (3, 1)), dims=("time", "sensor"))
    >>> np.round(find_ice_bottom(T, z).z_b.values, 3)
    array([1.5, 1.5, 1.5])
    """
    t, z, order = _tz(temperature, depth_m)
    nt = t.shape[0]
    spacing = float(np.median(np.diff(z))) if z.size > 1 else 0.0
    ztop = np.broadcast_to(np.asarray(np.nan if top_m is None else top_m, dtype=float), (nt,))
    zb = np.full(nt, np.nan)
    tw_out = np.full(nt, np.nan)
    grad = np.full(nt, np.nan)
    src = np.zeros(nt, dtype=np.int8)
    tf = np.broadcast_to(np.asarray(np.nan if freezing_temperature_degC is None
                                    else freezing_temperature_degC, dtype=float), (nt,))
    for i in range(nt):
        ok = np.isfinite(t[i])
        if ok.sum() < n_water + 3:
            continue
        tv, zv = t[i, ok], z[ok]
        water = tv[-n_water:]
        tw = float(np.median(water))
        if np.max(np.abs(water - tw)) > water_spread_K:
            continue
        tw_out[i] = tw
        ex = np.abs(tv[:-n_water] - tw) > departure_K
        pair = np.nonzero(ex[1:] & ex[:-1])[0]
        if pair.size == 0:
            continue
        j = int(pair[-1]) + 1
        band = (zv >= zv[j] - span_m - 1e-9) & (zv <= zv[j])
        if band.sum() < 3:
            continue
        g, a = _lsq(zv[band], tv[band])
        if not np.isfinite(g) or abs(g) < min_gradient_K_m:
            continue
        # Sensors below j that still follow the ice line (closer to it than to the
        # water's temperature) are ice too: walk down while they do, refitting, so
        # the crossing is extrapolated over at most one sensor spacing.
        last_water = zv.size - n_water
        while j + 1 < last_water:
            k = j + 1
            if abs(tv[k] - (a + g * zv[k])) >= abs(tv[k] - tw):
                break
            j = k
            band = (zv >= zv[j] - span_m - 1e-9) & (zv <= zv[j])
            g_new, a_new = _lsq(zv[band], tv[band])
            if not np.isfinite(g_new) or abs(g_new) < min_gradient_K_m:
                break
            g, a = g_new, a_new
        target = tf[i] if np.isfinite(tf[i]) else tw
        zc = (target - a) / g
        if refine and np.isfinite(tf[i]):
            z_lo = zv[j] - span_m
            if np.isfinite(ztop[i]):
                z_lo = max(z_lo, ztop[i] + spacing)
            zr, width = _interface_fit(zv, tv, target, z_lo, zv[-n_water],
                                       water_span_m=water_span_m, step_m=step_m)
            if not (np.isfinite(zr) and width <= max_width_m):
                continue
            zc = zr
        # a line reaching the target far below the ice sensor marks a step (e.g. air
        # over water-temperature ice), not a gradient: not found
        if zc - zv[j] > (abs(tw - target) + 2.0 * departure_K) / abs(g) + (zv[j + 1] - zv[j]):
            continue
        grad[i] = g
        zb[i] = float(np.clip(zc, zv[j], zv[-n_water]))
        src[i] = 1
    zh = np.full(nt, np.nan)
    if heated_rise is not None:
        r = np.asarray(heated_rise.transpose("time", "sensor").values, dtype=float)[:, order]
        for i in range(nt):
            zh[i] = _bottom_from_rise(r[i], z, n_water, rise_factor)
        # Heating cycles come once in a while: carry each pick to the steps around it
        # (linear between cycles up to HEATED_MAX_GAP). Where the temperature pick
        # strays farther than one sensor spacing from it (water barely above freezing
        # hides the interface from temperature alone), the heating pick wins.
        # a heating pick far from its neighbouring cycles' median is a bad cycle
        ok = np.flatnonzero(np.isfinite(zh))
        if ok.size >= 3:
            near = pd.Series(zh[ok]).rolling(5, center=True, min_periods=1).median().values
            zh[ok[np.abs(zh[ok] - near) > 2.0 * spacing]] = np.nan
        zh_all = _bridge(temperature, zh, HEATED_MAX_GAP)
        stray = (src == 1) & np.isfinite(zh_all) & (np.abs(zb - zh_all) > spacing)
        use = ((src == 0) & np.isfinite(zh_all)) | stray
        zb[use] = zh_all[use]
        src[use] = 2
    time = temperature["time"] if "time" in temperature.coords else None
    coords = {"time": time} if time is not None else {}

    def _da(v, units, long_name, **kw):
        return xr.DataArray(v, dims=("time",), coords=coords,
                            attrs=dict(units=units, long_name=long_name, **kw))

    return xr.Dataset(
        {
            "z_b": _da(zb, "m", "ice bottom in the string's frame (unsmoothed)", positive="down"),
            "water_temperature": _da(tw_out, "degC", "water temperature below the ice"),
            "gradient": _da(grad, "K m-1", "temperature gradient of the ice sensors fit"),
            "source": xr.DataArray(src, dims=("time",), coords=coords, attrs={
                "long_name": "ice bottom estimate source", "flag_values": [0, 1, 2],
                "flag_meanings": "not_found temperature heating_rise"}),
            "z_b_heated": _da(zh, "m", "ice bottom from heating-cycle rise", positive="down"),
        }
    )


def find_top_surface(
    temperature: xr.DataArray,
    depth_m,
    window_hours: float = 24.0,
    std_fraction: float = 0.3,
    min_air_std_K: float = 0.1,
    heated_rise: xr.DataArray | None = None,
    rise_fraction: float = 0.5,
) -> xr.DataArray:
    """Top surface (air over snow or ice) per time step (unsmoothed), string frame.

    The temporal standard deviation of each sensor over a centred ``window_hours``
    window is compared with the topmost valid sensor's (taken as in air; it must exceed
    ``min_air_std_K``): the run of sensors from the top whose standard deviation stays
    above ``std_fraction`` of it is air, and the surface lies midway between the last air
    sensor and the next. Where heating rises are given and the temperature method finds
    nothing, air is where the rise stays above ``rise_fraction`` of the topmost rise
    (air takes the pulse's heat worst). Common practice, no source.

    Parameters
    ----------
    temperature : xarray.DataArray
        Dims ``(time, sensor)`` [degC] with a datetime ``time`` coordinate.
    depth_m : array_like (sensor,)
        [m, positive down].
    window_hours, std_fraction, min_air_std_K, rise_fraction : float
    heated_rise : xarray.DataArray, optional
        ``(time, sensor)`` [K].

    Returns
    -------
    xarray.DataArray
        ``z_top(time)`` [m, positive down]; NaN where not found.

    Examples
    --------
    >>> time = pd.date_range("2020-06-01", periods=96, freq="h")
    >>> z = np.round(np.arange(-0.5, 1.0, 0.1), 2)
    >>> cyc = 2.0 * np.sin(2 * np.pi * np.arange(96) / 24)[:, None]
    >>> T = np.where(z < 0.0, -2.0 + cyc, -1.5 + 0.0 * cyc)
    >>> T = xr.DataArray(T, dims=("time", "sensor"), coords={"time": time})
    >>> float(np.round(find_top_surface(T, z)[48], 3))
    -0.05
    """
    t, z, order = _tz(temperature, depth_m)
    frame = pd.DataFrame(t, index=pd.DatetimeIndex(temperature["time"].values))
    std = frame.rolling(pd.Timedelta(hours=window_hours), center=True, min_periods=3,
                         closed="both").std()
    s = std.to_numpy()
    out = np.full(t.shape[0], np.nan)
    for i in range(t.shape[0]):
        ok = np.isfinite(s[i])
        if ok.sum() < 2:
            continue
        sv, zv = s[i, ok], z[ok]
        if sv[0] < min_air_std_K:
            continue
        air = sv >= std_fraction * sv[0]
        k = int(np.argmin(air)) if not air.all() else -1
        if k > 0:
            out[i] = 0.5 * (zv[k - 1] + zv[k])
    if heated_rise is not None:
        r = np.asarray(heated_rise.transpose("time", "sensor").values, dtype=float)[:, order]
        for i in np.nonzero(~np.isfinite(out))[0]:
            ok = np.isfinite(r[i])
            if ok.sum() < 2:
                continue
            rv, zv = r[i, ok], z[ok]
            air = rv >= rise_fraction * rv[0]
            k = int(np.argmin(air)) if not air.all() else -1
            if k > 0:
                out[i] = 0.5 * (zv[k - 1] + zv[k])
    return xr.DataArray(out, dims=("time",), coords={"time": temperature["time"]},
                        name="z_top", attrs={"units": "m", "positive": "down",
                                             "long_name": "top surface in the string's frame"})


def smooth_in_time(series: xr.DataArray, hours: float = 24.0) -> xr.DataArray:
    """Centred rolling median over ``hours`` (time-based, both window ends included);
    NaN only where the window holds no finite value.

    Parameters
    ----------
    series : xarray.DataArray
        Dim ``time`` (datetime).
    hours : float > 0
        Window length [h] (config ``ice.smooth_hours``).

    Returns
    -------
    xarray.DataArray

    Examples
    --------
    >>> time = pd.date_range("2020-06-01", periods=6, freq="6h")
    >>> s = xr.DataArray([1.0, 1.0, 9.0, 1.0, 1.0, np.nan], dims="time", coords={"time": time})
    >>> smooth_in_time(s).values
    array([1., 1., 1., 1., 1., 1.])
    """
    ser = pd.Series(series.values.astype(float), index=pd.DatetimeIndex(series["time"].values))
    sm = ser.rolling(pd.Timedelta(hours=hours), center=True, min_periods=1,
                     closed="both").median()
    return series.copy(data=sm.to_numpy())


def ice_conductivity(
    temperature_degC,
    salinity_ppt=0.0,
    k0_W_m_K: float = C.K_ICE_W_M_K,
    beta_W_m_ppt: float = C.K_ICE_BETA_W_M_PPT,
):
    """Sea-ice conductivity k = k0 + beta S / T (Untersteiner 1964).

    Parameters
    ----------
    temperature_degC : float or array_like
        Ice temperature [degC], < 0; NaN is returned where T >= 0.
    salinity_ppt : float or array_like
        Bulk salinity [ppt]; 0 gives k0.
    k0_W_m_K, beta_W_m_ppt : float

    Returns
    -------
    float or numpy.ndarray
        [W m-1 K-1].

    Examples
    --------
    >>> round(float(ice_conductivity(-5.0, 5.0)), 4)
    1.9
    """
    t = np.asarray(temperature_degC, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        k = np.where(t < 0, k0_W_m_K + beta_W_m_ppt * np.asarray(salinity_ppt) / t, np.nan)
    return k if k.ndim else float(k)


def ice_enthalpy_bl99(
    temperature_degC,
    salinity_ppt,
    rho_i_kg_m3: float = C.RHO_ICE_KG_M3,
    c0_J_kg_K: float = C.C_ICE_J_KG_K,
    latent_heat_J_kg: float = C.LATENT_HEAT_FUSION_J_KG,
    cw_J_kg_K: float = C.C_WATER_BL99_J_KG_K,
    mu_K_ppt: float = C.MU_LIQUIDUS_K_PPT,
):
    """Sea-ice enthalpy of Bitz & Lipscomb 1999 (J m-3, negative; 0 = water at 0 degC).

    q = -rho_i [c0 (Tm - T) + L0 (1 - Tm / T) - cw Tm], Tm = -mu S.

    Parameters
    ----------
    temperature_degC : float or array_like
        [degC], < 0 (and <= Tm for ice).
    salinity_ppt : float or array_like
        [ppt].
    rho_i_kg_m3, c0_J_kg_K, latent_heat_J_kg, cw_J_kg_K, mu_K_ppt : float

    Returns
    -------
    float or numpy.ndarray
        [J m-3].

    Examples
    --------
    >>> f"{ice_enthalpy_bl99(-5.0, 5.0):.6e}"
    '-2.999179e+08'
    """
    t = np.asarray(temperature_degC, dtype=float)
    tm = -mu_K_ppt * np.asarray(salinity_ppt, dtype=float)
    q = -rho_i_kg_m3 * (c0_J_kg_K * (tm - t) + latent_heat_J_kg * (1.0 - tm / t) - cw_J_kg_K * tm)
    return q if np.ndim(q) else float(q)


def melt_energy_per_volume(
    method: str = "constant",
    temperature_degC=None,
    salinity_ppt=None,
    rho_i_kg_m3: float = C.RHO_ICE_KG_M3,
    latent_heat_J_kg: float = C.LATENT_HEAT_FUSION_J_KG,
):
    """Energy to melt a unit volume of ice at the base [J m-3].

    Parameters
    ----------
    method : {"constant", "enthalpy"}
        ``constant``: rho_i L. ``enthalpy``: -q of :func:`ice_enthalpy_bl99` at the
        given temperature (at the base: the water's temperature) and bulk salinity.
    temperature_degC, salinity_ppt : float or array_like, optional
        Needed for ``enthalpy``.
    rho_i_kg_m3, latent_heat_J_kg : float

    Returns
    -------
    float or numpy.ndarray
        [J m-3], > 0.

    Examples
    --------
    >>> melt_energy_per_volume()
    306278000.0
    """
    if method == "constant":
        return rho_i_kg_m3 * latent_heat_J_kg
    if method == "enthalpy":
        if temperature_degC is None or salinity_ppt is None:
            raise ValueError("method 'enthalpy' needs temperature_degC and salinity_ppt")
        return -np.asarray(ice_enthalpy_bl99(temperature_degC, salinity_ppt, rho_i_kg_m3,
                                             latent_heat_J_kg=latent_heat_J_kg))
    raise ValueError(f"method must be 'constant' or 'enthalpy', got {method!r}")


def conductive_flux(
    temperature: xr.DataArray,
    depth_m,
    z_b_m: xr.DataArray,
    span_m: float = 0.2,
    gap_m: float = 0.0,
    conductivity: str = "constant",
    k_ice_W_m_K: float = C.K_ICE_W_M_K,
    beta_W_m_ppt: float = C.K_ICE_BETA_W_M_PPT,
    salinity_ppt: float = 4.0,
    min_sensors: int = 3,
) -> xr.Dataset:
    """Conductive heat flux at the ice base, F_c = -k_i dT/dz (z positive down).

    dT/dz is the least-squares slope over the valid sensors whose depth lies in
    [z_b - gap_m - span_m, z_b - gap_m] (at least ``min_sensors``). F_c > 0: heat
    conducted down into the interface (ice warmer than its base).

    Parameters
    ----------
    temperature : xarray.DataArray
        ``(time, sensor)`` [degC].
    depth_m : array_like (sensor,)
        [m, positive down].
    z_b_m : xarray.DataArray
        ``z_b(time)`` [m], same frame and times.
    span_m, gap_m : float
        Fit band above the interface [m] (config ``ice.fit_span_m``).
    conductivity : {"constant", "salinity"}
        k_i = ``k_ice_W_m_K``, or k0 + beta S / T at the band's mean temperature.
    k_ice_W_m_K, beta_W_m_ppt, salinity_ppt : float
        k (or k0) [W m-1 K-1], beta [W m-1 ppt-1], bulk salinity [ppt]
        (common practice, no source, for the default 4 ppt).
    min_sensors : int

    Returns
    -------
    xarray.Dataset
        Dim ``time``: ``f_c`` [W m-2], ``gradient`` [K m-1], ``k_ice`` [W m-1 K-1],
        ``t_band`` [degC] (mean temperature of the band).

    Examples
    --------
    >>> z = np.arange(0.0, 2.0, 0.05)
    >>> T = xr.DataArray([-1.8 + 2.0 * (1.0 - z) * (z < 1.0)], dims=("time", "sensor"))
    >>> round(float(conductive_flux(T, z, xr.DataArray([1.0], dims="time")).f_c[0]), 6)
    4.06
    """
    if conductivity not in ("constant", "salinity"):
        raise ValueError(f"conductivity must be 'constant' or 'salinity', got {conductivity!r}")
    t, z, _ = _tz(temperature, depth_m)
    zb = np.asarray(z_b_m.values, dtype=float)
    nt = t.shape[0]
    g = np.full(nt, np.nan)
    tb = np.full(nt, np.nan)
    for i in range(nt):
        if not np.isfinite(zb[i]):
            continue
        top, bot = zb[i] - gap_m - span_m - 1e-9, zb[i] - gap_m + 1e-9
        m = np.isfinite(t[i]) & (z >= top) & (z <= bot)
        if m.sum() < min_sensors:
            continue
        g[i], _a = _lsq(z[m], t[i, m])
        tb[i] = float(np.mean(t[i, m]))
    if conductivity == "constant":
        k = np.full(nt, k_ice_W_m_K)
    else:
        k = np.asarray(ice_conductivity(tb, salinity_ppt, k_ice_W_m_K, beta_W_m_ppt), dtype=float)
    coords = {"time": temperature["time"]} if "time" in temperature.coords else {}

    def _da(v, units, long_name, **kw):
        return xr.DataArray(v, dims=("time",), coords=coords,
                            attrs=dict(units=units, long_name=long_name, **kw))

    return xr.Dataset({
        "f_c": _da(-k * g, "W m-2", "conductive heat flux into the ice base (positive down)"),
        "gradient": _da(g, "K m-1", "temperature gradient above the ice base (z down)"),
        "k_ice": _da(k, "W m-1 K-1", "sea-ice thermal conductivity", conductivity=conductivity),
        "t_band": _da(tb, "degC", "mean ice temperature of the fit band"),
    })


def basal_melt_energy(z_b_m: xr.DataArray, energy_J_m3=C.RHO_ICE_KG_M3 * C.LATENT_HEAT_FUSION_J_KG):
    """Cumulative basal melt energy per ice area, Q_b(t) = e (z_b(t0) - z_b(t)).

    z_b is positive down in the string's frame: melt raises the bottom (z_b decreases,
    Q_b > 0); growth gives Q_b < 0. With a time-varying ``energy_J_m3`` the sum is taken
    step by step, each step at the mean of its end values. NaN steps are bridged
    linearly in time before summing; NaN before the first / after the last finite z_b.

    Parameters
    ----------
    z_b_m : xarray.DataArray
        Dim ``time`` [m, positive down].
    energy_J_m3 : float or xarray.DataArray on ``time``
        Melt energy per volume [J m-3] (:func:`melt_energy_per_volume`).

    Returns
    -------
    xarray.DataArray
        ``q_b(time)`` [J m-2], 0 at the first finite time.

    Examples
    --------
    >>> zb = xr.DataArray([2.0, 1.99, 1.98], dims="time")
    >>> np.round(basal_melt_energy(zb, 3.0e8).values)
    array([      0., 3000000., 6000000.])
    """
    v = np.asarray(z_b_m.values, dtype=float)
    ok = np.isfinite(v)
    out = np.full(v.shape, np.nan)
    if ok.any():
        idx = np.arange(v.size)
        if "time" in z_b_m.coords and np.issubdtype(z_b_m["time"].dtype, np.datetime64):
            x = z_b_m["time"].values.astype("datetime64[ns]").astype(np.int64).astype(float)
        else:
            x = idx.astype(float)
        first, last = idx[ok][0], idx[ok][-1]
        seg = slice(first, last + 1)
        zf = np.interp(x[seg], x[ok], v[ok])
        e = np.broadcast_to(np.asarray(getattr(energy_J_m3, "values", energy_J_m3),
                                       dtype=float), v.shape)[seg]
        em = 0.5 * (e[1:] + e[:-1])
        out[seg] = np.concatenate([[0.0], np.cumsum(-em * np.diff(zf))])
    return z_b_m.copy(data=out).assign_attrs(
        units="J m-2", long_name="basal melt energy per unit ice area, cumulative")


def compare_with_sounder(z_b_thermistor_m: xr.DataArray, z_b_sounder_m: xr.DataArray) -> dict:
    """Statistics of thermistor minus sounder ice-bottom position [m].

    Parameters
    ----------
    z_b_thermistor_m, z_b_sounder_m : xarray.DataArray
        Dim ``time``, same frame [m, positive down]; compared where both are finite.

    Returns
    -------
    dict
        ``n``, ``mean_m``, ``median_m``, ``std_m``, ``rmse_m``, ``max_abs_m`` (NaN when
        ``n`` is 0).

    Examples
    --------
    >>> a = xr.DataArray([1.0, 1.1, np.nan], dims="time")
    >>> b = xr.DataArray([1.0, 1.0, 1.0], dims="time")
    >>> compare_with_sounder(a, b)["n"]
    2
    """
    d = (z_b_thermistor_m - z_b_sounder_m).values.astype(float)
    d = d[np.isfinite(d)]
    if d.size == 0:
        nan = float("nan")
        return {"n": 0, "mean_m": nan, "median_m": nan, "std_m": nan, "rmse_m": nan,
                "max_abs_m": nan}
    return {"n": int(d.size), "mean_m": float(d.mean()), "median_m": float(np.median(d)),
            "std_m": float(d.std()), "rmse_m": float(np.sqrt(np.mean(d * d))),
            "max_abs_m": float(np.max(np.abs(d)))}


def bulk_heat_flux(
    u_star_m_s,
    temperature_degC,
    freezing_temperature_degC,
    rho_kg_m3: float = C.RHO0_KG_M3,
    cp_J_kg_K: float = C.CP0_J_KG_K,
    c_h: float = C.BULK_HEAT_EXCHANGE_CH,
):
    """Bulk ice-ocean heat flux F = rho cp c_h u* (T - T_f) [W m-2] (Maykut & McPhee 1995).

    Parameters
    ----------
    u_star_m_s : float or array_like
        Friction velocity [m s-1], >= 0.
    temperature_degC, freezing_temperature_degC : float or array_like
        Mixed-layer and freezing temperature [degC].
    rho_kg_m3, cp_J_kg_K, c_h : float

    Returns
    -------
    float or numpy.ndarray
        [W m-2], > 0 for water above freezing (heat to the ice).

    Examples
    --------
    >>> round(bulk_heat_flux(0.01, -1.7, -1.8), 3)
    24.55
    """
    f = rho_kg_m3 * cp_J_kg_K * c_h * np.asarray(u_star_m_s, dtype=float) * (
        np.asarray(temperature_degC, dtype=float) - np.asarray(freezing_temperature_degC))
    return f if np.ndim(f) else float(f)


def ice_base(
    icemass: xr.Dataset,
    *,
    smooth_hours: float = 24.0,
    fit_span_m: float = 0.2,
    conductivity: str = "constant",
    k_ice_W_m_K: float = C.K_ICE_W_M_K,
    latent_heat: str = "constant",
    rho_i_kg_m3: float = C.RHO_ICE_KG_M3,
    latent_heat_J_kg: float = C.LATENT_HEAT_FUSION_J_KG,
    bulk_salinity_ppt: float = 4.0,
    freezing_temperature_degC=None,
) -> xr.Dataset:
    """Ice bottom, top surface, conduction and basal melt energy of one string record.

    Cleans and despikes the temperatures, finds the bottom and top per step, smooths
    both over ``smooth_hours``. Where the icemass Dataset holds a sounder's
    ``ice_bottom_depth``, its smoothed value gives z_b wherever finite (the thermistor
    estimate elsewhere) and the thermistor estimate is compared with it (attrs
    ``sounder_*``).

    Parameters
    ----------
    icemass : xarray.Dataset
        Canonical icemass Dataset.
    smooth_hours, fit_span_m : float
        Config ``ice.smooth_hours`` [h], ``ice.fit_span_m`` [m].
    conductivity : {"constant", "salinity"}
    k_ice_W_m_K : float
    latent_heat : {"constant", "enthalpy"}
        Melt energy rho_i L, or -q of Bitz & Lipscomb 1999 at the water temperature and
        ``bulk_salinity_ppt``.
    rho_i_kg_m3, latent_heat_J_kg, bulk_salinity_ppt : float
    freezing_temperature_degC : float or xarray.DataArray on ``time``, optional
        In-situ freezing temperature of the water under the ice [degC]; a DataArray
        is interpolated to the string's times (held at its end values). See
        :func:`find_ice_bottom`.

    Returns
    -------
    xarray.Dataset
        Dim ``time``: ``z_b``, ``z_b_thermistor``, ``z_top``, ``ice_thickness`` [m];
        ``f_c`` [W m-2]; ``t_band`` [degC] (mean temperature of the conduction fit
        band, for the salinity form of k_i); ``melt_energy`` [J m-3]; ``q_b`` [J m-2];
        ``qc_z_b_not_found``, ``qc_top_not_found`` (bool, raw step without estimate);
        ``z_b_source``.

    Examples
    --------
    >>> time = pd.date_range("2020-06-01", periods=48, freq="h")
    >>> z = np.arange(-0.4, 3.0, 0.05)
    >>> zb = 1.5 - 0.01 * np.arange(48) / 24
    >>> day = np.sin(2 * np.pi * np.arange(48) / 24)[:, None]
    >>> T = np.where(z < 0, -1.0 + 2.0 * day,
    ...              np.where(z < zb[:, None], -1.8 + 0.8 * (zb[:, None] - z) / 1.5, -1.8))
    >>> ds = xr.Dataset({"temperature": (("time", "sensor"), T)},
    ...                 coords={"time": time, "depth": ("sensor", z)})
    >>> out = ice_base(ds)
    >>> bool(out.q_b[-1] > 0), bool(out.f_c.mean() > 0)
    (True, True)
    """
    depth = np.asarray(icemass["depth"].values, dtype=float)
    clean = mask_bad_sensors(icemass["temperature"])
    temp = despike(clean.temperature)
    rise = icemass["heated_rise"] if "heated_rise" in icemass else None
    tf = freezing_temperature_degC
    if isinstance(tf, xr.DataArray) and "time" in tf.dims:
        tf = tf.dropna("time")
        tf = (np.interp(temp["time"].values.astype("int64"),
                        tf["time"].values.astype("int64"), tf.values)
              if tf.sizes["time"] else None)
    top_raw = find_top_surface(temp, depth, heated_rise=rise)
    z_top = smooth_in_time(top_raw, smooth_hours)
    raw = find_ice_bottom(temp, depth, span_m=fit_span_m, heated_rise=rise,
                          top_m=z_top.values, freezing_temperature_degC=tf)
    zb_th = smooth_in_time(raw.z_b, smooth_hours)
    zb = zb_th
    src = raw.source.copy()
    attrs = {}
    if "ice_bottom_depth" in icemass and np.isfinite(icemass["ice_bottom_depth"].values).any():
        snd = smooth_in_time(icemass["ice_bottom_depth"].astype(float), smooth_hours)
        have = np.isfinite(snd.values)
        zb = xr.where(have, snd, zb_th)
        src = xr.where(have, np.int8(3), src).astype(np.int8)
        attrs.update({f"sounder_{k}": v for k, v in compare_with_sounder(zb_th, snd).items()})
    zb = zb.assign_attrs(units="m", positive="down", standard_name="sea_ice_draft",
                         long_name="ice bottom in the string's frame")
    # the sensor nearest the interface is the one most often misread as ice or water:
    # the fit band ends half a sensor spacing above the bottom
    half_spacing = 0.5 * float(np.median(np.diff(np.sort(depth)))) if depth.size > 1 else 0.0
    fc = conductive_flux(temp, depth, zb, span_m=fit_span_m, gap_m=half_spacing,
                         conductivity=conductivity,
                         k_ice_W_m_K=k_ice_W_m_K, salinity_ppt=bulk_salinity_ppt)
    if latent_heat == "enthalpy":
        e = melt_energy_per_volume("enthalpy", raw.water_temperature.values,
                                   bulk_salinity_ppt, rho_i_kg_m3, latent_heat_J_kg)
        e = xr.DataArray(e, dims=("time",), coords={"time": icemass["time"]})
        e = e.interpolate_na("time").ffill("time").bfill("time")
    else:
        e = xr.full_like(zb, melt_energy_per_volume("constant", rho_i_kg_m3=rho_i_kg_m3,
                                                    latent_heat_J_kg=latent_heat_J_kg))
    e = e.assign_attrs(units="J m-3", long_name="energy to melt ice at the base per volume",
                       method=latent_heat)
    src.attrs = {"long_name": "ice bottom source", "flag_values": [0, 1, 2, 3],
                 "flag_meanings": "not_found temperature heating_rise sounder"}
    out = xr.Dataset({
        "z_b": zb,
        "z_b_thermistor": zb_th.assign_attrs(units="m", positive="down",
                                             long_name="ice bottom from the thermistors"),
        "z_top": z_top.assign_attrs(units="m", positive="down",
                                    long_name="top surface in the string's frame"),
        "ice_thickness": (zb - z_top).assign_attrs(
            units="m", standard_name="sea_ice_thickness",
            long_name="ice (and snow) thickness, bottom minus top surface"),
        "f_c": fc.f_c,
        "t_band": fc.t_band,
        "melt_energy": e,
        "q_b": basal_melt_energy(zb, e),
        "qc_z_b_not_found": (raw.source == 0).assign_attrs(
            long_name="no ice bottom found at this step (value from smoothing)"),
        "qc_top_not_found": top_raw.isnull().assign_attrs(
            long_name="no top surface found at this step (value from smoothing)"),
        "z_b_source": src,
    })
    out.attrs.update(attrs, conductivity=conductivity, latent_heat=latent_heat,
                     fit_span_m=fit_span_m, smooth_hours=smooth_hours)
    return out
