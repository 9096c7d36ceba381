"""Wind-driven drift of the floe camps, with inertial oscillations, and reported fixes.

Velocities are built hourly in metres per second on the ground: a regional drift shared
by all arrays (a daily AR(1) wind response around a slow mean drift), inertial motion
(clockwise in the north, anticlockwise in the south, at the local Coriolis frequency)
and a small AR(1) anomaly per array. Deployments of one array move rigidly together.
Positions are integrated in the working projection, ground metres times the local scale
factor. The regional part also carries the floe-and-lead pattern (see ``icefield``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .scenario import Scenario, rng_for

__all__ = ["Tracks", "make_tracks", "ar1", "reported_fixes", "OMEGA_EARTH_RAD_S"]

#: Rotation rate of the Earth (sidereal), rad s-1. Textbook value, from memory.
OMEGA_EARTH_RAD_S = 7.2921e-5


@dataclass
class Tracks:
    """True hourly positions (interval boundaries) and interval-mean drift speed."""

    time: np.ndarray          # (n + 1,) datetime64[ns]
    x_m: np.ndarray           # (n_dep, n + 1)
    y_m: np.ndarray
    lon_deg: np.ndarray
    lat_deg: np.ndarray
    speed_m_s: np.ndarray     # (n_dep, n) ground speed over each interval
    pattern_dx_m: np.ndarray  # (n + 1,) displacement of the ice pattern
    pattern_dy_m: np.ndarray

    def position_at(self, i_dep: int, t: np.datetime64) -> tuple[float, float]:
        """Projected position of one deployment at any time (linear in time)."""
        tt = (self.time - self.time[0]) / np.timedelta64(1, "s")
        s = (np.datetime64(t, "ns") - self.time[0]) / np.timedelta64(1, "s")
        return (float(np.interp(s, tt, self.x_m[i_dep])), float(np.interp(s, tt, self.y_m[i_dep])))

    def pattern_shift_at(self, t: np.datetime64) -> tuple[float, float]:
        """Displacement of the ice pattern at any time, metres."""
        tt = (self.time - self.time[0]) / np.timedelta64(1, "s")
        s = (np.datetime64(t, "ns") - self.time[0]) / np.timedelta64(1, "s")
        return (float(np.interp(s, tt, self.pattern_dx_m)),
                float(np.interp(s, tt, self.pattern_dy_m)))


def ar1(rng: np.random.Generator, n: int, sd: float, lag1: float) -> np.ndarray:
    """A stationary AR(1) series of length ``n`` with standard deviation ``sd``.

    Examples
    --------
    >>> x = ar1(np.random.default_rng(0), 5000, 2.0, 0.5)
    >>> bool(1.8 < x.std() < 2.2)
    True
    """
    e = rng.standard_normal(n) * sd * np.sqrt(1.0 - lag1**2)
    x = np.empty(n)
    x[0] = rng.standard_normal() * sd
    for i in range(1, n):
        x[i] = lag1 * x[i - 1] + e[i]
    return x


def _daily_to_hourly(rng, n_hours: int, sd: float, lag1: float) -> np.ndarray:
    n_days = n_hours // 24 + 3
    d = ar1(rng, n_days, sd, lag1)
    return np.interp(np.arange(n_hours) / 24.0, np.arange(n_days), d)


def make_tracks(sc: Scenario) -> Tracks:
    """Integrate the drift of every deployment over the simulation period.

    Returns
    -------
    Tracks
        Positions at the hourly instants and speeds over the hourly intervals.
    """
    import pyproj

    time = sc.hours
    n = time.size - 1
    dt = 3600.0
    rng = rng_for(sc.seed, "drift", sc.hemisphere)
    mean_dir = rng.uniform(0, 2 * np.pi)
    mean_speed = rng.uniform(0.03, 0.06)
    u_c = mean_speed * np.cos(mean_dir) + _daily_to_hourly(rng, n, 0.10, 0.7)
    v_c = mean_speed * np.sin(mean_dir) + _daily_to_hourly(rng, n, 0.10, 0.7)
    lat0 = sc.centre_lonlat[1]
    f_rad_s = 2.0 * OMEGA_EARTH_RAD_S * np.sin(np.radians(abs(lat0)))
    t_s = (np.arange(n) + 0.5) * dt
    amp = np.clip(0.035 + _daily_to_hourly(rng, n, 0.015, 0.8), 0.005, 0.08)
    phase = rng.uniform(0, 2 * np.pi)
    u_c = u_c + amp * np.cos(f_rad_s * t_s + phase)
    v_c = v_c - sc.sign * amp * np.sin(f_rad_s * t_s + phase)

    crs = pyproj.CRS(sc.crs)
    k = float(pyproj.Proj(crs).get_factors(*sc.centre_lonlat).meridional_scale)
    pdx = np.concatenate([[0.0], np.cumsum(u_c * k * dt)])
    pdy = np.concatenate([[0.0], np.cumsum(v_c * k * dt)])

    n_dep = len(sc.deployments)
    x = np.empty((n_dep, n + 1))
    y = np.empty((n_dep, n + 1))
    speed = np.empty((n_dep, n))
    anomalies = {}
    for a, name in enumerate(sc.array_ids):
        r = rng_for(sc.seed, "drift-array", sc.hemisphere, name)
        anomalies[name] = (_daily_to_hourly(r, n, 0.015, 0.7), _daily_to_hourly(r, n, 0.015, 0.7),
                           sc.array_origin_xy[a])
    for i, d in enumerate(sc.deployments):
        ua, va, origin = anomalies[d.array_id]
        u = u_c + ua
        v = v_c + va
        x[i] = origin[0] + d.offset_m[0] + np.concatenate([[0.0], np.cumsum(u * k * dt)])
        y[i] = origin[1] + d.offset_m[1] + np.concatenate([[0.0], np.cumsum(v * k * dt)])
        speed[i] = np.hypot(u, v)
    to_ll = pyproj.Transformer.from_crs(crs, "EPSG:4326", always_xy=True)
    lon, lat = to_ll.transform(x, y)
    return Tracks(time=time, x_m=x, y_m=y, lon_deg=np.asarray(lon), lat_deg=np.asarray(lat),
                  speed_m_s=speed, pattern_dx_m=pdx, pattern_dy_m=pdy)


def reported_fixes(rng: np.random.Generator, lon_deg: np.ndarray, lat_deg: np.ndarray,
                   n_bad: int = 3) -> tuple[np.ndarray, np.ndarray]:
    """Positions as an instrument reports them: a few metres of noise and bad fixes.

    Bad fixes jump by tenths of a degree for one record: impossible speeds.

    Examples
    --------
    >>> lon, lat = reported_fixes(np.random.default_rng(0), np.zeros(100), np.full(100, 80.0))
    >>> int((np.abs(lat - 80.0) > 0.05).sum())
    3
    """
    lat_r = lat_deg + rng.normal(0, 4e-5, lat_deg.shape)
    lon_r = lon_deg + rng.normal(0, 4e-5, lon_deg.shape) / np.cos(np.radians(lat_deg))
    if lat_deg.size > 10 and n_bad:
        idx = rng.choice(np.arange(2, lat_deg.size - 2), size=n_bad, replace=False)
        lat_r[idx] += rng.choice([-1, 1], n_bad) * rng.uniform(0.1, 0.6, n_bad)
        lon_r[idx] += rng.choice([-1, 1], n_bad) * rng.uniform(0.2, 2.0, n_bad)
    return np.round(lon_r, 6), np.clip(np.round(lat_r, 6), -90, 90)
