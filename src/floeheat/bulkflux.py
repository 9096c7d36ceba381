"""Bulk-flux cross-check of the ocean-to-ice heat flux measured at the ice base.

The flux the string measures per unit ice area, ``F_w = F_b - F_c`` (basal melt energy
minus conduction into the interface, science.md "Terms and signs"), is compared with the
bulk formula ``F_bulk = rho cp c_h u* (T_ml - T_f)`` (Maykut & McPhee 1995, c_h = 0.006),
with the friction velocity from a quadratic drag law ``u* = sqrt(Cd) |u_ice - u_w|``
(McPhee 1980, Cd = 5.5e-3). ``u_w`` is the surface-layer velocity; when nothing better
is known it is taken as zero, so that the whole ice drift counts as relative to the
water (the free-drift picture of ice driven by the wind over a resting ocean).
``T_ml`` is the in-situ temperature of the profiler's shallowest sample and ``T_f`` the
freezing temperature of water of that salinity at sea-surface pressure.

The ratio of the season (or window) means gives the exchange coefficient the
measurements imply, ``c_h F_w / F_bulk``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from floeheat import constants as C

__all__ = [
    "BULKFLUX_COLUMNS",
    "ice_velocity",
    "friction_velocity",
    "thermal_forcing",
    "shallowest_samples",
    "bulk_comparison",
]

#: Columns of a bulk-flux comparison table (one row per window and one for the whole).
BULKFLUX_COLUMNS = (
    "deployment_id", "array_id", "period", "start", "end", "hours", "f_w_measured_W_m2",
    "f_b_W_m2", "f_c_W_m2", "f_w_bulk_W_m2", "u_star_mean_m_s", "delta_t_mean_K",
    "ratio", "c_h", "c_h_implied", "disagree", "reason",
)


def ice_velocity(time, latitude_deg, longitude_deg) -> tuple[np.ndarray, np.ndarray]:
    """Eastward and northward ice velocity over each segment of a track.

    Parameters
    ----------
    time : array_like of datetime64, (n,)
        Times, increasing.
    latitude_deg, longitude_deg : array_like, (n,)
        Positions [degrees].

    Returns
    -------
    u_east, v_north : numpy.ndarray, (n - 1,)
        [m s-1], from the geodesic (WGS 84) distance and azimuth of each segment.

    Examples
    --------
    One degree of latitude northward in a day at 80 N (about 111.66 km on WGS 84):

    >>> t = np.array(["2025-07-01", "2025-07-02"], dtype="datetime64[ns]")
    >>> u, v = ice_velocity(t, [80.0, 81.0], [0.0, 0.0])
    >>> round(float(u[0]), 6), round(float(v[0]), 3)
    (0.0, 1.292)
    """
    from pyproj import Geod

    t = np.asarray(time, dtype="datetime64[ns]")
    lat = np.asarray(latitude_deg, dtype=float)
    lon = np.asarray(longitude_deg, dtype=float)
    az, _, dist = Geod(ellps="WGS84").inv(lon[:-1], lat[:-1], lon[1:], lat[1:])
    dt = np.diff(t).astype(np.int64) / 1e9
    speed = np.asarray(dist, dtype=float) / np.where(dt > 0, dt, np.nan)
    a = np.radians(np.asarray(az, dtype=float))
    return speed * np.sin(a), speed * np.cos(a)


def friction_velocity(u_ice_m_s, v_ice_m_s, u_water_m_s: float = 0.0,
                      v_water_m_s: float = 0.0,
                      drag_coefficient: float = C.ICE_OCEAN_DRAG_COEFFICIENT) -> np.ndarray:
    """Friction velocity from the quadratic drag law u* = sqrt(Cd) |u_ice - u_w|.

    Parameters
    ----------
    u_ice_m_s, v_ice_m_s : array_like
        Ice velocity [m s-1].
    u_water_m_s, v_water_m_s : float or array_like
        Surface-layer velocity [m s-1]; zero for the free-drift estimate.
    drag_coefficient : float
        Cd [1] (default McPhee 1980, 5.5e-3).

    Returns
    -------
    numpy.ndarray
        [m s-1].

    Examples
    --------
    >>> round(float(friction_velocity(0.3, 0.4)), 5)  # sqrt(5.5e-3) * 0.5
    0.03708
    """
    du = np.asarray(u_ice_m_s, dtype=float) - np.asarray(u_water_m_s, dtype=float)
    dv = np.asarray(v_ice_m_s, dtype=float) - np.asarray(v_water_m_s, dtype=float)
    return np.sqrt(drag_coefficient) * np.hypot(du, dv)


def thermal_forcing(temperature_degC, practical_salinity, pressure_dbar, latitude_deg,
                    longitude_deg,
                    saturation_fraction: float = C.SATURATION_FRACTION) -> np.ndarray:
    """Mixed-layer temperature above freezing, T_ml - T_f [K].

    ``T_f`` is the in-situ freezing temperature (TEOS-10, ``gsw.t_freezing``) of water
    of the sample's absolute salinity at sea-surface pressure.

    Parameters
    ----------
    temperature_degC : array_like
        In-situ temperature (ITS-90) of the shallowest sample [degC].
    practical_salinity : array_like
        [1].
    pressure_dbar, latitude_deg, longitude_deg : array_like
        Where the sample was taken (for the absolute salinity).
    saturation_fraction : float
        Air saturation [0-1].

    Returns
    -------
    numpy.ndarray
        [K].

    Examples
    --------
    SA = 35.16504 g/kg at p = 0 freezes at -1.921014315441 degC (gsw 3.6, air
    saturated); SP 35 gives about that SA in the open ocean:

    >>> round(float(thermal_forcing(-1.8, 35.0, 0.0, 0.0, -30.0)), 2)
    0.12
    """
    import gsw

    sa = gsw.SA_from_SP(np.asarray(practical_salinity, dtype=float),
                        np.asarray(pressure_dbar, dtype=float),
                        np.asarray(longitude_deg, dtype=float),
                        np.asarray(latitude_deg, dtype=float))
    t_f = gsw.t_freezing(sa, 0.0, saturation_fraction)
    return np.asarray(temperature_degC, dtype=float) - t_f


def shallowest_samples(profiles) -> pd.DataFrame:
    """Each profile's shallowest complete sample, in time order.

    Parameters
    ----------
    profiles : xarray.Dataset
        Profiles as read by :func:`floeheat.io.profiles.read_profiles`: ``temperature``
        [degC], ``salinity`` [1], ``pressure`` [dbar] on (profile, level), shallowest
        level first, and ``time``, ``latitude``, ``longitude`` per profile.

    Returns
    -------
    pandas.DataFrame
        Columns ``time``, ``temperature_degC``, ``salinity``, ``pressure_dbar``,
        ``latitude_deg``, ``longitude_deg``; profiles without a complete sample are
        left out.

    Examples
    --------
    >>> import xarray as xr
    >>> ds = xr.Dataset({"temperature": (("profile", "level"), [[np.nan, -1.2], [-1.5, -1.6]]),
    ...                  "salinity": (("profile", "level"), [[30.0, 31.0], [30.5, 31.5]]),
    ...                  "pressure": (("profile", "level"), [[5.0, 10.0], [5.0, 10.0]]),
    ...                  "time": ("profile", np.array(["2020-07-02", "2020-07-01"],
    ...                                               "datetime64[ns]")),
    ...                  "latitude": ("profile", [80.0, 80.1]),
    ...                  "longitude": ("profile", [10.0, 10.1])})
    >>> shallowest_samples(ds)[["temperature_degC", "pressure_dbar"]].values.tolist()
    [[-1.5, 5.0], [-1.2, 10.0]]
    """
    t = np.asarray(profiles["temperature"].values, dtype=float)
    s = np.asarray(profiles["salinity"].values, dtype=float)
    p = np.asarray(profiles["pressure"].values, dtype=float)
    ok = np.isfinite(t) & np.isfinite(s) & np.isfinite(p)
    has = ok.any(axis=1)
    first = np.argmax(ok, axis=1)
    k = np.arange(t.shape[0])
    return pd.DataFrame({
        "time": profiles["time"].values[has], "temperature_degC": t[k, first][has],
        "salinity": s[k, first][has], "pressure_dbar": p[k, first][has],
        "latitude_deg": profiles["latitude"].values[has],
        "longitude_deg": profiles["longitude"].values[has],
    }).sort_values("time", kind="stable").reset_index(drop=True)


def _mean(x):
    x = np.asarray(x, dtype=float)
    return float(np.mean(x)) if x.size and np.isfinite(x).all() else float("nan")


def bulk_comparison(edges, q_b_J_m2, f_c_W_m2, u_star_m_s, delta_t_K, *,
                    window_days: float = C.WINDOW_DAYS,
                    c_h: float = C.BULK_HEAT_EXCHANGE_CH, rho_kg_m3: float = C.RHO0_KG_M3,
                    cp_J_kg_K: float = C.CP0_J_KG_K,
                    disagree_factor: float = C.BULK_DISAGREE_FACTOR,
                    min_flux_W_m2: float = C.BULK_MIN_FLUX_W_M2) -> pd.DataFrame:
    """Measured against bulk ocean-to-ice heat flux, per window and over the whole period.

    Parameters
    ----------
    edges : array_like of datetime64, (n + 1,)
        Interval edges (e.g. hourly) from the window start t0.
    q_b_J_m2 : array_like, (n + 1,)
        Cumulative basal melt energy per unit ice area at the edges [J m-2].
    f_c_W_m2, u_star_m_s, delta_t_K : array_like, (n,)
        Conduction into the interface, friction velocity and T_ml - T_f over each
        interval [W m-2, m s-1, K].
    window_days : float
        Windows are consecutive from t0 (the last may be shorter), as the budget's.
    c_h, rho_kg_m3, cp_J_kg_K : float
        Bulk formula constants.
    disagree_factor : float
        Measured and bulk disagree when either exceeds the other by this factor, or
        when their signs differ, unless both are smaller than ``min_flux_W_m2``.
    min_flux_W_m2 : float
        [W m-2].

    Returns
    -------
    pandas.DataFrame
        ``period`` (``window 1`` ..., ``whole``), ``start``, ``end``, ``hours``,
        ``f_w_measured_W_m2`` (F_b - F_c), ``f_b_W_m2``, ``f_c_W_m2``,
        ``f_w_bulk_W_m2`` (mean of the interval bulk fluxes), ``u_star_mean_m_s``,
        ``delta_t_mean_K``, ``ratio`` (measured / bulk), ``c_h``, ``c_h_implied``
        (c_h times the ratio), ``disagree`` (bool), ``reason``.

    Examples
    --------
    A steady 10 W m-2 melt flux with no conduction, u* = 0.01 m s-1 and 0.05 K: the
    bulk flux is 12.275 W m-2 (1025 * 3991.868 * 0.006 * 0.01 * 0.05; with 0.1 K it is
    the 24.550 W m-2 of the worked check in the check values), so the implied c_h is
    0.006 * 10 / 12.275:

    >>> e = pd.date_range("2025-07-01", periods=49, freq="h").values
    >>> q = 10.0 * 3600.0 * np.arange(49)
    >>> t = bulk_comparison(e, q, np.zeros(48), np.full(48, 0.01), np.full(48, 0.05))
    >>> row = t[t["period"] == "whole"].iloc[0]
    >>> print(f"{row['f_w_bulk_W_m2']:.3f} {row['c_h_implied']:.5f} {row['disagree']}")
    12.275 0.00489 False
    """
    e = np.asarray(edges, dtype="datetime64[ns]")
    q = np.asarray(q_b_J_m2, dtype=float)
    fc = np.asarray(f_c_W_m2, dtype=float)
    bulk = rho_kg_m3 * cp_J_kg_K * c_h * np.asarray(u_star_m_s, dtype=float) * \
        np.asarray(delta_t_K, dtype=float)
    ustar = np.asarray(u_star_m_s, dtype=float)
    dtk = np.asarray(delta_t_K, dtype=float)
    s = (e - e[0]).astype(np.int64) / 1e9
    win_s = window_days * C.SECONDS_PER_DAY
    n_win = max(1, int(np.ceil((s[-1] - 1e-6) / win_s))) if s[-1] > 0 else 0
    periods = [(f"window {k + 1}", k * win_s, min((k + 1) * win_s, s[-1]))
               for k in range(n_win)]
    periods.append(("whole", 0.0, s[-1]))
    rows = []
    for name, a, b in periods:
        i0 = int(np.searchsorted(s, a - 1e-6))
        i1 = int(np.searchsorted(s, b + 1e-6)) - 1
        row = {"period": name, "start": pd.Timestamp(e[i0]), "end": pd.Timestamp(e[i1]),
               "hours": (s[i1] - s[i0]) / 3600.0}
        sl = slice(i0, i1)
        dur = s[i1] - s[i0]
        f_b = (q[i1] - q[i0]) / dur if dur > 0 else float("nan")
        f_c = _mean(fc[sl])
        f_bulk = _mean(bulk[sl])
        f_meas = f_b - f_c
        ratio = f_meas / f_bulk if np.isfinite(f_bulk) and f_bulk != 0 else float("nan")
        reasons = []
        if not np.isfinite(f_meas):
            reasons.append("no measured flux (ice base or conduction missing)")
        if not np.isfinite(f_bulk):
            reasons.append("no bulk flux (drift or mixed-layer temperature missing)")
        small = abs(f_meas) < min_flux_W_m2 and abs(f_bulk) < min_flux_W_m2
        disagree = bool(not reasons and not small and (
            np.sign(f_meas) != np.sign(f_bulk) or not
            (1.0 / disagree_factor <= ratio <= disagree_factor)))
        row.update(f_w_measured_W_m2=f_meas, f_b_W_m2=f_b, f_c_W_m2=f_c,
                   f_w_bulk_W_m2=f_bulk, u_star_mean_m_s=_mean(ustar[sl]),
                   delta_t_mean_K=_mean(dtk[sl]), ratio=ratio, c_h=c_h,
                   c_h_implied=c_h * ratio, disagree=disagree,
                   reason="; ".join(reasons) if reasons else
                   ("both below the comparison floor" if small else ""))
        rows.append(row)
    cols = [c for c in BULKFLUX_COLUMNS if c not in ("deployment_id", "array_id")]
    return pd.DataFrame(rows, columns=cols)
