"""Solar geometry and the synthetic downwelling shortwave at the surface.

The solar position follows the NOAA Global Monitoring Laboratory "general solar
position calculations" with Spencer's (1971, Search 2(5)) Fourier series for the
declination, the equation of time and the eccentricity factor. Surface irradiance is
the top-of-atmosphere irradiance on a horizontal plane times an atmospheric
transmissivity (clouds included) that varies from day to day.
"""

from __future__ import annotations

import numpy as np

from floeheat.constants import SOLAR_CONSTANT_W_M2

__all__ = ["cos_zenith", "toa_horizontal_W_m2", "interval_mean_cos_zenith",
           "transmissivity_series"]


def _gamma_rad(time: np.ndarray) -> np.ndarray:
    """Fractional year (radians) of ``datetime64`` times, NOAA convention."""
    t = np.asarray(time, dtype="datetime64[ns]")
    year_start = t.astype("datetime64[Y]").astype("datetime64[ns]")
    doy = (t - year_start) / np.timedelta64(1, "D")  # day of year - 1 + fraction
    return 2.0 * np.pi / 365.0 * (doy - 0.5)  # (doy - 1 + (hour - 12)/24) form


def cos_zenith(time, lat_deg, lon_deg):
    """Cosine of the solar zenith angle (negative below the horizon).

    Parameters
    ----------
    time : array of datetime64
        UTC times (broadcast against the positions).
    lat_deg, lon_deg : array_like
        Latitude and longitude, degrees (east positive).

    Returns
    -------
    numpy.ndarray
        cos(zenith), unitless.

    Examples
    --------
    >>> t = np.array(["2019-06-21T12:00"], dtype="datetime64[ns]")
    >>> z = np.degrees(np.arccos(cos_zenith(t, 75.0, -150.0)))
    >>> bool(abs(z[0] - 79.74) < 0.05)
    True
    """
    t = np.asarray(time, dtype="datetime64[ns]")
    g = _gamma_rad(t)
    eqtime_min = 229.18 * (0.000075 + 0.001868 * np.cos(g) - 0.032077 * np.sin(g)
                           - 0.014615 * np.cos(2 * g) - 0.040849 * np.sin(2 * g))
    decl = (0.006918 - 0.399912 * np.cos(g) + 0.070257 * np.sin(g)
            - 0.006758 * np.cos(2 * g) + 0.000907 * np.sin(2 * g)
            - 0.002697 * np.cos(3 * g) + 0.00148 * np.sin(3 * g))
    minutes = (t - t.astype("datetime64[D]").astype("datetime64[ns]")) / np.timedelta64(1, "m")
    tst_min = minutes + eqtime_min + 4.0 * np.asarray(lon_deg)
    ha = np.radians(tst_min / 4.0 - 180.0)
    lat = np.radians(np.asarray(lat_deg))
    return np.sin(lat) * np.sin(decl) + np.cos(lat) * np.cos(decl) * np.cos(ha)


def toa_horizontal_W_m2(time, lat_deg, lon_deg):
    """Top-of-atmosphere irradiance on a horizontal plane, W m-2 (0 at night).

    Examples
    --------
    >>> t = np.array(["2025-06-21T00:00"], dtype="datetime64[ns]")
    >>> bool(toa_horizontal_W_m2(t, 89.9, 0.0)[0] > 500)
    True
    """
    g = _gamma_rad(np.asarray(time, dtype="datetime64[ns]"))
    ecc = (1.000110 + 0.034221 * np.cos(g) + 0.001280 * np.sin(g)
           + 0.000719 * np.cos(2 * g) + 0.000077 * np.sin(2 * g))
    return SOLAR_CONSTANT_W_M2 * ecc * np.clip(cos_zenith(time, lat_deg, lon_deg), 0.0, None)


def interval_mean_cos_zenith(start, step_s: float, lat_deg, lon_deg, n_sub: int = 6):
    """Mean top-of-atmosphere horizontal irradiance over intervals, W m-2.

    Parameters
    ----------
    start : array of datetime64, shape (n,)
        Interval starts.
    step_s : float
        Interval length, seconds.
    lat_deg, lon_deg : array_like
        Positions broadcastable against ``start[:, None, ...]``.
    n_sub : int
        Sub-samples (midpoint rule) per interval.

    Returns
    -------
    numpy.ndarray
        Interval means, shape ``start.shape + broadcast(lat, lon).shape``.

    Examples
    --------
    >>> s = np.array(["2025-06-21T00:00"], dtype="datetime64[ns]")
    >>> interval_mean_cos_zenith(s, 3600.0, np.array([80.0]), np.array([0.0])).shape
    (1, 1)
    """
    start = np.asarray(start, dtype="datetime64[ns]")
    lat = np.asarray(lat_deg, dtype="float64")
    lon = np.asarray(lon_deg, dtype="float64")
    total = 0.0
    for k in range(n_sub):
        offset = np.timedelta64(int(round((k + 0.5) / n_sub * step_s * 1e9)), "ns")
        t = (start + offset).reshape(start.shape + (1,) * max(lat.ndim, lon.ndim))
        total = total + toa_horizontal_W_m2(t, lat, lon)
    return total / n_sub


def transmissivity_series(rng: np.random.Generator, n_days: int, mean: float = 0.55,
                          sd: float = 0.1, lag1: float = 0.6) -> np.ndarray:
    """Daily atmospheric transmissivity of a cloudy polar summer (AR(1), in [0.35, 0.85]).

    Examples
    --------
    >>> x = transmissivity_series(np.random.default_rng(0), 100)
    >>> bool(x.min() >= 0.35 and x.max() <= 0.85)
    True
    """
    x = np.empty(n_days)
    e = rng.standard_normal(n_days) * sd * np.sqrt(1 - lag1**2)
    x[0] = rng.standard_normal() * sd
    for i in range(1, n_days):
        x[i] = lag1 * x[i - 1] + e[i]
    return np.clip(mean + x, 0.35, 0.85)
