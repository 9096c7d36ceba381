"""Gridded forcing: hourly shortwave on latitude/longitude, daily passive-microwave
concentration and a sea-floor depth grid, both on 25 km cells of the working CRS.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .icefield import IceField
from .scenario import Scenario, rng_for
from .solar import interval_mean_cos_zenith, transmissivity_series

__all__ = ["ShortwaveGrid", "make_shortwave", "bilinear_latlon", "PMGrid", "make_microwave",
           "wet_bias", "PM_CELL_M"]

#: Passive-microwave cell size, metres.
PM_CELL_M = 25_000.0
#: Largest wet-snow/pond bias of passive-microwave concentration (fraction). Scenario value.
WET_BIAS_MAX = 0.07


@dataclass
class ShortwaveGrid:
    """Hourly interval means (float32-exact) on a regular latitude/longitude grid."""

    start: np.ndarray   # (n,) interval starts
    lat: np.ndarray     # (ny,) increasing
    lon: np.ndarray     # (nx,) increasing
    values: np.ndarray  # (n, ny, nx) W m-2


def make_shortwave(sc: Scenario, lat_track, lon_track) -> ShortwaveGrid:
    """Solar geometry times a day-to-day varying transmissivity, hourly intervals."""
    size = sc.size
    rng = rng_for(sc.seed, "shortwave", sc.hemisphere)
    dlat = size.sw_dlat_deg
    lat0 = np.floor((np.nanmin(lat_track) - size.sw_margin_deg) / dlat) * dlat
    lat1 = np.ceil((np.nanmax(lat_track) + size.sw_margin_deg) / dlat) * dlat
    lat0, lat1 = max(lat0, -89.75), min(lat1, 89.75)
    lon_m = 2.0 * size.sw_margin_deg / np.cos(np.radians(np.nanmax(np.abs(lat_track))))
    lon0 = np.floor((np.nanmin(lon_track) - lon_m) / size.sw_dlon_deg) * size.sw_dlon_deg
    lon1 = np.ceil((np.nanmax(lon_track) + lon_m) / size.sw_dlon_deg) * size.sw_dlon_deg
    if lon0 < -180.0 or lon1 > 180.0 or lon1 - lon0 > 180.0:
        # tracks near the date line or the pole: a grid all around, -180 and 180 both
        # included so that interpolation needs no wrap
        lon0, lon1 = -180.0, 180.0
    lat = np.round(np.arange(lat0, lat1 + 1e-9, size.sw_dlat_deg), 4)
    lon = np.round(np.arange(lon0, lon1 + 1e-9, size.sw_dlon_deg), 4)
    start = sc.hours[:-1]
    n = start.size
    n_days = n // 24 + 3
    tau_day = transmissivity_series(rng, n_days)
    phase = rng.uniform(0, 2 * np.pi, n_days)
    hours_f = np.arange(n) / 24.0
    tau0 = np.interp(hours_f, np.arange(n_days), tau_day)
    ph = np.interp(hours_f, np.arange(n_days), np.unwrap(phase))
    LAT, LON = np.meshgrid(lat, lon, indexing="ij")
    values = np.empty((n, lat.size, lon.size), np.float32)
    step = 24 * 10
    for a in range(0, n, step):
        b = min(n, a + step)
        toa = interval_mean_cos_zenith(start[a:b], 3600.0, LAT, LON)
        tau = tau0[a:b, None, None] + 0.06 * np.sin(  # periodic in longitude
            2 * np.pi * (LON[None] / 45.0 + LAT[None] / 4.0) + ph[a:b, None, None])
        values[a:b] = np.round(toa * np.clip(tau, 0.3, 0.9), 1)
    return ShortwaveGrid(start=start, lat=lat, lon=lon, values=values)


def bilinear_latlon(grid: ShortwaveGrid, lat_deg, lon_deg) -> np.ndarray:
    """Interval values at a moving point: bilinear in latitude and longitude, per interval.

    ``lat_deg``/``lon_deg`` have one value per interval (e.g. its mid-point position).
    """
    lat = np.asarray(lat_deg, float)
    lon = np.asarray(lon_deg, float)
    fi = np.interp(lat, grid.lat, np.arange(grid.lat.size))
    fj = np.interp(lon, grid.lon, np.arange(grid.lon.size))
    i0 = np.clip(np.floor(fi).astype(int), 0, grid.lat.size - 2)
    j0 = np.clip(np.floor(fj).astype(int), 0, grid.lon.size - 2)
    wi = fi - i0
    wj = fj - j0
    k = np.arange(lat.size)
    v = grid.values.astype(np.float64)
    return ((1 - wi) * (1 - wj) * v[k, i0, j0] + (1 - wi) * wj * v[k, i0, j0 + 1]
            + wi * (1 - wj) * v[k, i0 + 1, j0] + wi * wj * v[k, i0 + 1, j0 + 1])


def wet_bias(sc: Scenario, day_mid) -> np.ndarray:
    """Wet-surface low bias of passive-microwave concentration (fraction) by day.

    Zero before melt onset, ramping to ``WET_BIAS_MAX`` within 6 days, easing off after
    100 days (refreeze).
    """
    td = (np.asarray(day_mid, "datetime64[ns]") - sc.melt_onset) / np.timedelta64(1, "D")
    up = np.clip(td / 6.0, 0, 1)
    down = np.clip(1.0 - (td - 100.0) / 25.0, 0.3, 1.0)
    return WET_BIAS_MAX * up * down


@dataclass
class PMGrid:
    """Daily concentration on 25 km cells (fraction, NaN missing, 1.2 land)."""

    day_start: np.ndarray
    x: np.ndarray   # cell centres
    y: np.ndarray   # cell centres, decreasing
    conc: np.ndarray  # (n_day, ny, nx)
    land: np.ndarray  # (ny, nx) bool
    depth_m: np.ndarray  # sea-floor depth, m positive down (land: NaN)


def make_microwave(sc: Scenario, field_: IceField, x_track, y_track) -> PMGrid:
    """Daily concentration: 1 - (large-scale open water) - wet bias + noise."""
    rng = rng_for(sc.seed, "microwave", sc.hemisphere)
    m = sc.size.pm_margin_m
    ex0 = -3_850_000.0 if sc.hemisphere == "north" else -3_950_000.0
    ey0 = 5_850_000.0 if sc.hemisphere == "north" else 4_350_000.0
    c = PM_CELL_M
    i_x0 = np.floor((np.nanmin(x_track) - m - ex0) / c)
    i_x1 = np.ceil((np.nanmax(x_track) + m - ex0) / c)
    i_y0 = np.floor((ey0 - (np.nanmax(y_track) + m)) / c)
    i_y1 = np.ceil((ey0 - (np.nanmin(y_track) - m)) / c)
    x = ex0 + (np.arange(i_x0, i_x1) + 0.5) * c
    y = ey0 - (np.arange(i_y0, i_y1) + 0.5) * c
    X, Y = np.meshgrid(x, y)
    land = np.zeros(X.shape, bool)
    corner = np.add.outer(np.arange(y.size), np.arange(x.size)) < 3
    land |= corner
    t0 = sc.sim_start.astype("datetime64[D]").astype("datetime64[ns]")
    n_day = int(np.ceil((sc.sim_end - t0) / np.timedelta64(1, "D")))
    day_start = t0 + np.arange(n_day) * np.timedelta64(1, "D")
    conc = np.empty((n_day, y.size, x.size), np.float32)
    bias = wet_bias(sc, day_start + np.timedelta64(12, "h"))
    for d in range(n_day):
        tm = day_start[d] + np.timedelta64(12, "h")
        dx, dy = field_.shift.pattern_shift_at(tm)
        t_days = (tm - field_.t0) / np.timedelta64(1, "D")
        q = field_.target(t_days, X - dx, Y - dy)
        b = bias[d] * (1 + rng.normal(0, 0.15)) if bias[d] > 0 else 0.0
        v = 1.0 - q - b + rng.normal(0, 0.01, X.shape)
        v = np.clip(np.round(v, 3), 0.0, 1.0)
        v[rng.random(X.shape) < 0.02] = np.nan
        if rng.random() < 0.1:
            a = int(rng.integers(0, max(1, x.size - 2)))
            v[:, a:a + 2] = np.nan
        v[land] = 1.2
        conc[d] = v
    r = np.hypot(X - X.mean(), Y - Y.mean())
    depth = 3600.0 + 400.0 * np.cos(r / 300_000.0) + 50.0 * np.sin(X / 97_000.0)
    depth = np.where(land, np.nan, np.round(depth, 1))
    return PMGrid(day_start=day_start, x=x, y=y, conc=conc, land=land, depth_m=depth)


#: Shelf variant: depth on the bank, its radius, and the width of the slope down to the
#: deep basin (metres). Scenario parameters.
SHELF_DEPTH_M = 150.0
SHELF_RADIUS_M = 20_000.0
SHELF_SLOPE_WIDTH_M = 80_000.0
#: Depth the slope would reach at its foot, metres (the basin below is clipped to it).
SHELF_SLOPE_FOOT_M = 3600.0


def shelf_isobath_radius_m(isobath_m: float) -> float:
    """Distance from the bank's centre at which the slope crosses an isobath, metres.

    Examples
    --------
    >>> round(shelf_isobath_radius_m(1000.0))
    39710
    """
    frac = (isobath_m - SHELF_DEPTH_M) / (SHELF_SLOPE_FOOT_M - SHELF_DEPTH_M)
    return SHELF_RADIUS_M + SHELF_SLOPE_WIDTH_M * frac


def with_shelf(pm: PMGrid, centre_xy: tuple[float, float]) -> PMGrid:
    """The grid with a shallow bank (shelf variant): depth rising linearly from the basin
    to ``SHELF_DEPTH_M`` over ``SHELF_SLOPE_WIDTH_M``, flat within ``SHELF_RADIUS_M``."""
    X, Y = np.meshgrid(pm.x, pm.y)
    r = np.hypot(X - centre_xy[0], Y - centre_xy[1])
    slope = SHELF_DEPTH_M + np.clip(r - SHELF_RADIUS_M, 0, None) / SHELF_SLOPE_WIDTH_M * (
        SHELF_SLOPE_FOOT_M - SHELF_DEPTH_M)
    depth = np.where(np.isnan(pm.depth_m), np.nan, np.round(np.minimum(pm.depth_m, slope), 1))
    return PMGrid(day_start=pm.day_start, x=pm.x, y=pm.y, conc=pm.conc, land=pm.land,
                  depth_m=depth)
