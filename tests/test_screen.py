"""Tests of floeheat.screen against outside references (pyproj geodesics, scipy)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from pyproj import CRS, Geod, Transformer

from floeheat import screen as scr
from floeheat.steps.screen import annotate_climatology, apply_screen, screen_label

GEOD = Geod(ellps="WGS84")


def _latlon_grid(shallow_north_of: float):
    """A 0.05 x 0.2 degree grid: 200 m north of a latitude, 3000 m south of it."""
    lat = np.arange(79.0, 82.0, 0.05)
    lon = np.arange(-20.0, 20.0, 0.2)
    depth = np.where(lat[:, None] >= shallow_north_of, 200.0, 3000.0) * np.ones(lon.size)
    return xr.DataArray(depth, dims=("latitude", "longitude"),
                        coords={"latitude": lat, "longitude": lon})


def test_distance_to_isobath_matches_the_geodesic_distance():
    # Shallow water north of 81.0 N (cell centres at 81.00, 81.05, ...): a point at
    # 80.5 N, 0 E lies about 0.5 degree of latitude south of the nearest shallow centre.
    grid = _latlon_grid(81.0 - 1e-9)
    d, dist = scr.depth_and_distance_to_isobath([80.5], [0.0], grid, 1000.0)
    _, _, want = GEOD.inv(0.0, 80.5, 0.0, 81.0)  # pyproj geodesic (Karney 2013)
    assert d[0] == 3000.0
    # projected distance over the local scale factor: within 0.5 % of the geodesic
    assert dist[0] == pytest.approx(want, rel=5e-3)


def test_distance_is_zero_over_shallow_water_and_nan_outside_the_grid():
    grid = _latlon_grid(81.0 - 1e-9)
    d, dist = scr.depth_and_distance_to_isobath([81.5, 60.0], [0.0, 0.0], grid, 1000.0)
    assert d[0] == 200.0 and dist[0] == 0.0
    assert np.isnan(d[1]) and np.isnan(dist[1])


def test_projected_grid_in_the_south_uses_the_southern_working_crs():
    # A 5 km grid on EPSG:3976 with a shallow half-plane x < 0; a point 20 km east of it.
    x = np.arange(-200_000.0, 200_001.0, 5000.0)
    y = np.arange(1_500_000.0, 1_700_001.0, 5000.0)
    z = np.where(x[None, :] < 0, 300.0, 4000.0) * np.ones((y.size, 1))
    grid = xr.DataArray(z, dims=("y", "x"), coords={"y": y, "x": x},
                        attrs={"crs_wkt": CRS("EPSG:3976").to_wkt()})
    lon, lat = Transformer.from_crs("EPSG:3976", "EPSG:4326", always_xy=True).transform(
        [20_000.0, -5_000.0], [1_600_000.0, 1_600_000.0])
    d, dist = scr.depth_and_distance_to_isobath(lat, lon, grid, 1000.0, hemisphere="south")
    lon0, lat0 = Transformer.from_crs("EPSG:3976", "EPSG:4326", always_xy=True).transform(
        -5_000.0, 1_600_000.0)
    _, _, want = GEOD.inv(lon[0], lat[0], lon0, lat0)  # nearest shallow centre x = -5 km
    assert d[0] == 4000.0 and dist[0] == pytest.approx(want, rel=5e-3)
    assert d[1] == 300.0 and dist[1] == 0.0


def test_no_shallow_cell_gives_an_infinite_distance():
    grid = _latlon_grid(90.0)
    _, dist = scr.depth_and_distance_to_isobath([80.5], [0.0], grid, 1000.0)
    assert np.isinf(dist[0])


def test_daily_speed_against_the_geodesic_path():
    t = pd.date_range("2025-07-01", periods=49, freq="h").values
    lon = np.linspace(0.0, 4.0, 49)
    lat = np.full(49, 80.0)
    speed = scr.daily_drift_speed(t, lat, lon)
    _, _, seg = GEOD.inv(lon[:24], lat[:24], lon[1:25], lat[1:25])
    assert speed.iloc[0] == pytest.approx(np.sum(seg) / 86400.0, rel=1e-9)


def _windows(q_tr):
    n = len(q_tr)
    return pd.DataFrame({"deployment_id": [f"d{i}" for i in range(n)], "array_id": "A",
                         "source": "radar", "radius_m": 15000.0,
                         "window_start": pd.Timestamp("2025-07-01"),
                         "window_end": pd.Timestamp("2025-07-16"), "q_tr_MJ": q_tr})


def test_residual_outlier_against_median_and_scaled_mad():
    # 15-day windows: 1 W m-2 is 1.296 MJ m-2. Peers at 10, 11, 12 W m-2 (median 11,
    # MAD 1, scaled 1.4826): 3 * 1.4826 = 4.45 W m-2 from the median flags.
    mj = 15 * 86400 / 1e6
    w = _windows([10 * mj, 11 * mj, 12 * mj, 15.3 * mj, 15.6 * mj])
    flags = scr.residual_outliers(w)
    assert flags["f_tr_W_m2"].iloc[0] == pytest.approx(10.0)
    # the fourth has peers 10, 11, 12, 15.6 (median 11.5): 3.8 away, under 3 * 1.4826 * 1
    assert flags["flag_residual_outlier"].tolist() == [False, False, False, False, False]
    w = _windows([10 * mj, 11 * mj, 12 * mj, 30 * mj])
    assert scr.residual_outliers(w)["flag_residual_outlier"].tolist() == [False] * 3 + [True]


def test_residual_outlier_needs_two_peers():
    w = _windows([1.0, 90.0])
    flags = scr.residual_outliers(w)
    assert not flags["flag_residual_outlier"].any()
    assert flags["n_peers"].tolist() == [1, 1]


def test_shear_flag_from_separation_change():
    t = pd.date_range("2025-07-01", periods=49, freq="h").values
    lat = np.full(49, 80.0)
    lon_b = np.linspace(0.1, 1.0, 49)  # drifting east, away from the first buoy
    change = scr.separation_change(t, lat, np.zeros(49), t, lat, lon_b, t[0], t[-1])
    _, _, d0 = GEOD.inv(0.0, 80.0, 0.1, 80.0)
    _, _, d1 = GEOD.inv(0.0, 80.0, 1.0, 80.0)
    assert change == pytest.approx(d1 - d0, rel=1e-6)


def test_window_flags_near_shelf_and_fast_drift():
    t = pd.date_range("2025-07-01", periods=241, freq="h").values
    dist = np.linspace(200e3, 0.0, 241)  # reaches 50 km at hour 180
    w = pd.DataFrame({"window_start": pd.to_datetime(["2025-07-01", "2025-07-06"]),
                      "window_end": pd.to_datetime(["2025-07-06", "2025-07-11"])})
    speed = pd.Series([0.1, 0.1, 0.1, 0.1, 0.1, 0.1, 0.7, 0.1, 0.1, 0.1],
                      index=pd.date_range("2025-07-01", periods=10, freq="D"))
    f = scr.window_time_flags(t, dist, w, 50e3, speed, 0.5)
    assert f["flag_near_shelf"].tolist() == [False, True]
    assert f["near_shelf_hours"].iloc[1] == pytest.approx(60.0, abs=1.0)
    assert f["flag_fast_drift"].tolist() == [False, True]


def test_apply_screen_and_annotation(tmp_path):
    w = _windows([1.0, 2.0, 3.0])
    w["ice_type"] = ""
    sw = w[["deployment_id", "source", "radius_m", "window_start", "window_end"]].copy()
    sw["excluded"] = [False, True, False]
    sw.to_csv(tmp_path / "screen_windows.csv", index=False)
    pd.DataFrame({"advection_screen": [screen_label(True, 1000.0, 50e3)]}).to_csv(
        tmp_path / "screen.csv", index=False)
    kept, gone, label = apply_screen(w, str(tmp_path / "screen_windows.csv"))
    assert kept["deployment_id"].tolist() == ["d0", "d2"]
    assert gone["deployment_id"].tolist() == ["d1"]
    assert label.startswith("applied")
    clim = pd.DataFrame({"region": ["r"], "month": [7], "source": ["radar"],
                         "radius_m": [15000.0], "n_windows": [2]})
    out = annotate_climatology(clim, gone, ["r"], label, False)
    assert out["n_windows_screened_out"].tolist() == [1]
    kept, gone, label = apply_screen(w, None)
    assert len(kept) == 3 and label.startswith("not applied")
