"""Tests of floeheat.track against pyproj, the WGS 84 ellipsoid and planted outliers."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from pyproj import Geod

from floeheat import constants as C
from floeheat import track as T

WGS84_A_M = 6378137.0  # WGS 84 semi-major axis (EPSG:7030 definition)


def _hourly(n, start="2020-06-01"):
    return pd.date_range(start, periods=n, freq="h").to_numpy("datetime64[ns]")


def _smooth_track(n, lat0=80.0, lon0=10.0, speed_m_s=0.2, azimuth_deg=30.0):
    """Fixes along a geodesic at constant speed, hourly (pyproj Geod.fwd)."""
    g = Geod(ellps="WGS84")
    d = np.arange(n) * speed_m_s * 3600.0
    lon, lat, _ = g.fwd(np.full(n, lon0), np.full(n, lat0), np.full(n, azimuth_deg), d)
    return _hourly(n), np.asarray(lat), np.asarray(lon)


def test_working_crs_check_value():
    # check-values.md s.8 (pyproj, RUN): EPSG:3413 (-150, 75) -> (-1578206.404, 422879.131)
    x, y = T.to_working_crs(75.0, -150.0, "EPSG:3413")
    assert float(x) == pytest.approx(-1578206.404, abs=1e-3)
    assert float(y) == pytest.approx(422879.131, abs=1e-3)


def test_hemisphere_and_crs():
    assert T.hemisphere([-70.0, -71.0, 5.0]) == "south"
    assert T.working_crs(T.hemisphere([85.0])) == C.CRS_WORKING_NORTH
    assert T.working_crs("south") == C.CRS_WORKING_SOUTH
    with pytest.raises(ValueError):
        T.working_crs("east")
    with pytest.raises(ValueError):
        T.hemisphere([np.nan])


def test_merge_sorts_dedups_and_drops_nan():
    t = _hourly(4)
    prof = {"time": t[[2, 0]], "latitude": [80.2, 80.0], "longitude": [190.0, 10.0]}
    string = (t[[0, 1, 3, 3]], [81.0, np.nan, 80.3, 80.3], [11.0, 10.1, 10.3, 10.3])
    m = T.merge_fixes(prof, string)
    assert m.time.values.tolist() == t[[0, 2, 3]].tolist()
    # same time in both: the first argument (profiler) is kept
    assert m.latitude.values.tolist() == [80.0, 80.2, 80.3]
    assert m.source.values.tolist() == [0, 0, 1]
    assert m.longitude.values[1] == pytest.approx(-170.0)  # 190 E wrapped to [-180, 180)


def test_segment_speed_along_equator():
    # The equator is a geodesic of the ellipsoid, length a * dlon (WGS 84 a; geodesy
    # textbook result, valid for dlon < (1 - f) pi).
    t = _hourly(2)
    v = T.segment_speeds(t, [0.0, 0.0], [0.0, 1.0])
    assert v[0] == pytest.approx(WGS84_A_M * np.radians(1.0) / 3600.0, rel=1e-12)


@pytest.mark.parametrize("where", [0, 1, 7, 18, 19])
def test_single_spike_removed_not_its_neighbours(where):
    t, lat, lon = _smooth_track(20)
    lat = lat.copy()
    lat[where] += 0.2  # ~22 km in one hour: both adjacent segments ~6 m s-1
    keep = T.reject_fast_fixes(t, lat, lon, max_speed_m_s=1.5)
    expected = np.ones(20, dtype=bool)
    expected[where] = False
    assert keep.tolist() == expected.tolist()


@pytest.mark.parametrize("where", [[9, 10], [0, 1], [18, 19]])
def test_two_consecutive_bad_fixes_removed(where):
    t, lat, lon = _smooth_track(20)
    lat = lat.copy()
    lat[where] += 0.3
    keep = T.reject_fast_fixes(t, lat, lon, max_speed_m_s=1.5)
    assert np.nonzero(~keep)[0].tolist() == where


def test_plausible_track_untouched_and_limit_is_respected():
    t, lat, lon = _smooth_track(30, speed_m_s=1.2)
    assert T.reject_fast_fixes(t, lat, lon, max_speed_m_s=1.5).all()
    # the same track against a limit below its speed loses fixes
    assert not T.reject_fast_fixes(t, lat, lon, max_speed_m_s=1.0).all()


def test_clean_track_output():
    t, lat, lon = _smooth_track(10)
    lat = lat.copy()
    lat[4] += 0.5
    tr = T.clean_track([(t[::2], lat[::2], lon[::2]), (t[1::2], lat[1::2], lon[1::2])])
    assert tr.attrs["n_rejected"] == 1 and tr.attrs["crs"] == "EPSG:3413"
    assert set(tr.data_vars) >= {"latitude", "longitude", "x_m", "y_m"}
    x, y = T.to_working_crs(tr.latitude.values, tr.longitude.values, "EPSG:3413")
    np.testing.assert_allclose(tr.x_m.values, x)
    np.testing.assert_allclose(tr.y_m.values, y)


def test_interpolation_across_antimeridian_near_pole():
    t = _hourly(3)
    lat = np.array([85.0, 85.0, 85.0])
    lon = np.array([179.5, -179.5, -178.5])
    tt = t[:1] + np.timedelta64(30, "m")
    out = T.interpolate_track(t, lat, lon, tt)
    # Reference: the geodesic midpoint (pyproj Geod). The straight segment in polar
    # stereographic and the geodesic differ by metres over a ~10 km segment.
    g = Geod(ellps="WGS84")
    az, _, dist = g.inv(lon[0], lat[0], lon[1], lat[1])
    mlon, mlat, _ = g.fwd(lon[0], lat[0], az, dist / 2.0)
    _, _, off = g.inv(mlon, mlat, float(out.longitude[0]), float(out.latitude[0]))
    assert off < 5.0
    assert abs(float(out.longitude[0])) == pytest.approx(180.0, abs=1e-6)  # symmetry
    assert out.attrs["crs"] == "EPSG:3413"


def test_interpolation_rules():
    t, lat, lon = _smooth_track(5)
    t = t.copy()
    t[3:] += np.timedelta64(2, "D")  # a 2-day gap between fixes 2 and 3
    tt = np.concatenate([t[:1] - np.timedelta64(1, "m"), t[:1], t[2:3] + np.timedelta64(1, "D"),
                         t[-1:], t[-1:] + np.timedelta64(1, "m")])
    out = T.interpolate_track(t, lat, lon, tt, max_gap=pd.Timedelta(days=1))
    ok = np.isfinite(out.latitude.values)
    assert ok.tolist() == [False, True, False, True, False]
    assert float(out.latitude[1]) == pytest.approx(lat[0], abs=1e-9)
    assert float(out.longitude[3]) == pytest.approx(lon[-1], abs=1e-9)
    bridged = T.interpolate_track(t, lat, lon, tt)
    assert np.isfinite(bridged.latitude.values[2])


def test_interpolation_is_linear_in_projection():
    t, lat, lon = _smooth_track(3, lat0=-70.0)
    tt = t[:1] + np.timedelta64(15, "m")
    out = T.interpolate_track(t, lat, lon, tt)
    assert out.attrs["crs"] == C.CRS_WORKING_SOUTH
    x, y = T.to_working_crs(lat[:2], lon[:2], C.CRS_WORKING_SOUTH)
    # definition of linear interpolation, 1/4 of the way
    assert float(out.x_m[0]) == pytest.approx(0.75 * x[0] + 0.25 * x[1], abs=1e-6)
    assert float(out.y_m[0]) == pytest.approx(0.75 * y[0] + 0.25 * y[1], abs=1e-6)
