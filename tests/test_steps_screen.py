"""Stage screen on hand-made budget records (synthetic data): what it excludes, and what
it says without a bathymetry grid."""

from __future__ import annotations

import json

import netCDF4
import numpy as np
import pandas as pd

from floeheat.steps.screen import run_screen

SETTINGS = {"isobath_m": 1000.0, "distance_m": 50_000.0, "max_daily_speed_m_s": 0.5,
            "max_separation_change_m": 10_000.0, "outlier_mad": 3.0,
            "outlier_floor_W_m2": 2.0, "exclude": ["near_shelf"]}


def _record(tmp_path, dep, lat0, dlat_per_day, lon0=0.0):
    """A 20-day track moving north and two windows (15 + 5 days)."""
    d = tmp_path / dep
    d.mkdir()
    t = pd.date_range("2025-07-01", periods=20 * 24 + 1, freq="h")
    lat = lat0 + dlat_per_day * np.arange(t.size) / 24.0
    pd.DataFrame({"time": t, "latitude": lat, "longitude": lon0, "x_m": 0.0,
                  "y_m": 0.0}).to_csv(d / "track.csv", index=False)
    w = pd.DataFrame({"deployment_id": dep, "array_id": "A", "ice_type": "first-year",
                      "source": "radar", "radius_m": 15000.0,
                      "window_start": ["2025-07-01", "2025-07-16"],
                      "window_end": ["2025-07-16", "2025-07-21"], "q_tr_MJ": [15.0, 5.0]})
    w.to_csv(d / "windows.csv", index=False)
    status = d / "budget.json"
    status.write_text(json.dumps({"ok": True, "deployment_id": dep, "stage": "budget",
                                  "track": str(d / "track.csv"),
                                  "windows": str(d / "windows.csv")}))
    return str(status)


def _bathymetry(path):
    """Shallow (200 m) north of 81.5 N, 3000 m south of it, on a 0.1 x 0.5 degree grid."""
    lat = np.arange(79.0, 83.0, 0.1)
    lon = np.arange(-10.0, 10.0, 0.5)
    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("lat", lat.size)
        ds.createDimension("lon", lon.size)
        v = ds.createVariable("lat", "f8", ("lat",))
        v[:] = lat
        v.standard_name, v.units = "latitude", "degrees_north"
        v = ds.createVariable("lon", "f8", ("lon",))
        v[:] = lon
        v.standard_name, v.units = "longitude", "degrees_east"
        v = ds.createVariable("elevation", "f4", ("lat", "lon"))
        v.standard_name, v.units = "height_above_mean_sea_level", "m"
        v[:] = np.where(lat[:, None] >= 81.5, -200.0, -3000.0) * np.ones(lon.size)
    return str(path)


def test_screen_excludes_the_deployment_that_reaches_the_shelf(tmp_path):
    # "a" drifts north from 80.2 N at 0.05 degree a day: 80.95 N at the end of window 1
    # (0.55 degree, about 61 km, from the shallow cells at 81.5 N), 81.2 N at the end of
    # window 2 (about 33 km): only window 2 comes within 50 km. "b" and "c" stay south.
    records = [_record(tmp_path, "a", 80.2, 0.05), _record(tmp_path, "b", 79.4, 0.0, 1.0),
               _record(tmp_path, "c", 79.45, 0.0, -1.0)]
    bathy = _bathymetry(tmp_path / "depth.nc")
    out = tmp_path / "out"
    out.mkdir()
    run_screen(records, [bathy], str(out / "screen.csv"), str(out / "sw.csv"),
               str(out / "track.csv"), settings=SETTINGS)
    sw = pd.read_csv(out / "sw.csv")
    assert sw.loc[sw["deployment_id"] == "a", "excluded"].tolist() == [False, True]
    assert not sw.loc[sw["deployment_id"] != "a", "excluded"].any()
    summary = pd.read_csv(out / "screen.csv").set_index("deployment_id")
    assert summary.loc["a", "excluded_days"] == 5.0
    assert summary.loc["a", "excluded_fraction"] == 0.25
    assert summary["advection_screen"].str.startswith("applied").all()


def test_without_bathymetry_the_tables_say_no_screen_was_applied(tmp_path):
    records = [_record(tmp_path, "a", 80.2, 0.05), _record(tmp_path, "b", 79.4, 0.0, 1.0)]
    out = tmp_path / "out"
    out.mkdir()
    run_screen(records, [], str(out / "screen.csv"), str(out / "sw.csv"),
               str(out / "track.csv"), settings=SETTINGS)
    summary = pd.read_csv(out / "screen.csv")
    assert (summary["advection_screen"] ==
            "not applied: no bathymetry grid in the archive").all()
    assert summary["near_shelf_days"].isna().all()
    assert not pd.read_csv(out / "sw.csv")["excluded"].any()
