"""Tests of floeheat.steps.budget's forcing pass: all of a part's deployments sampled
together, each as if alone, one bad deployment failing alone."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from pyproj import CRS, Proj, Transformer
from scipy.interpolate import RegularGridInterpolator

from floeheat.steps import budget as SB
from floeheat.steps.forcing import pass_chunks, write_store
from floeheat.steps.status import StageFailed

HOURS = 72
EDGES = pd.date_range("2021-07-01", periods=HOURS + 1, freq="h").to_numpy("datetime64[ns]")
LAT = np.arange(74.0, 86.01, 0.25)
LON = np.arange(-180.0, 180.0, 1.0)
MICROWAVE = {"radii_m": [25_000.0, 50_000.0], "method": "mean"}


def _shortwave(path):
    rng = np.random.default_rng(3)
    vals = rng.uniform(0.0, 700.0, (HOURS, LAT.size, LON.size))
    ds = xr.Dataset({"sw_down": (("time", "latitude", "longitude"), vals, {"units": "W m-2"}),
                     "time_bnds": (("time", "nv"), np.stack([EDGES[:-1], EDGES[1:]], 1))},
                    coords={"time": EDGES[1:], "latitude": LAT, "longitude": LON})
    # small chunks so that the part's tracks span several of them
    write_store(ds.chunk(pass_chunks(ds, chunk_bytes=LAT.size * LON.size * 8 * 10)), path, 1)
    return vals


def _concentration(path):
    rng = np.random.default_rng(4)
    n, cell = 120, 25_000.0
    x = (np.arange(n) - n / 2 + 0.5) * cell
    days = EDGES[0] + np.arange(4) * np.timedelta64(1, "D")
    wkt = CRS("EPSG:3413").to_wkt()
    ds = xr.Dataset(
        {"sea_ice_area_fraction": (("time", "y", "x"), rng.uniform(0.5, 1.0, (4, n, n)),
                                   {"units": "1", "crs_wkt": wkt}),
         "time_bnds": (("time", "nv"), np.stack([days, days + np.timedelta64(1, "D")], 1))},
        coords={"time": days + np.timedelta64(12, "h"), "x": x, "y": x[::-1].copy()},
        attrs={"crs_wkt": wkt})
    write_store(ds, path, 1)


def _track(path, lat, lon):
    """A stationary buoy: its position at any time is exact, whatever the interpolation."""
    t = pd.date_range("2021-06-30", "2021-07-05", freq="3h")
    pd.DataFrame({"time": t, "latitude": lat, "longitude": lon, "x_m": 0.0, "y_m": 0.0}
                 ).to_csv(path, index=False)
    return str(path)


POINTS = {"d1": (80.13, 12.4), "d2": (76.61, -151.7), "d3": (84.9, 97.25)}


@pytest.fixture()
def part(tmp_path):
    sw = _shortwave(tmp_path / "sw.zarr")
    _concentration(tmp_path / "ci.zarr")
    insitu = {d: {"ok": True, "window_start": "2021-07-01T06:00", "window_end": "2021-07-03",
                  "track": _track(tmp_path / f"{d}.csv", *p)} for d, p in POINTS.items()}
    return tmp_path, sw, insitu


def test_part_shortwave_matches_scipy_bilinear(part):
    tmp, vals, insitu = part
    got = SB.sample_part_forcing(insitu, str(tmp / "sw.zarr"), str(tmp / "ci.zarr"), {},
                                 MICROWAVE)
    for dep, (lat, lon) in POINTS.items():
        sw = got[dep].shortwave
        assert got[dep].error is None
        # the intervals overlapping the window 06:00 on the 1st to 00:00 on the 3rd
        first = np.flatnonzero(EDGES[1:] > np.datetime64("2021-07-01T06:00"))[0]
        expect_t = EDGES[1:][first:first + 42]
        np.testing.assert_array_equal(sw.time.values, expect_t)
        # scipy.interpolate.RegularGridInterpolator (linear) is bilinear on the grid
        ref = [RegularGridInterpolator((LAT, LON), vals[j])([[lat, lon]])[0]
               for j in range(first, first + 42)]
        # (positions interpolated in the track's map projection and back: rounding only)
        np.testing.assert_allclose(sw.sw_down.values, ref, rtol=1e-9)


def test_part_equals_each_deployment_alone(part):
    tmp, _, insitu = part
    got = SB.sample_part_forcing(insitu, str(tmp / "sw.zarr"), str(tmp / "ci.zarr"), {},
                                 MICROWAVE)
    sw, ci = xr.open_zarr(tmp / "sw.zarr"), xr.open_zarr(tmp / "ci.zarr")
    for dep, rec in insitu.items():
        track = pd.read_csv(rec["track"], parse_dates=["time"])
        alone = SB.shortwave_at_track(sw, track, rec["window_start"], rec["window_end"])
        np.testing.assert_array_equal(got[dep].shortwave.sw_down.values, alone.sw_down.values)
        pos = SB.microwave_positions(ci.time_bnds.values, track, rec["window_start"],
                                     rec["window_end"])
        daily = SB.microwave_at_tracks(ci, {dep: pos}, MICROWAVE)[dep]
        np.testing.assert_array_equal(got[dep].microwave_daily.values, daily.values)
        assert got[dep].microwave_daily.dims == ("time", "radius")
        # days overlapping the window widened by a day (06:00 on 30 June to the 4th):
        # 1, 2 and 3 July
        assert got[dep].microwave_daily.sizes["time"] == 3
    # the part's values differ between deployments (each got its own position)
    a, b = (got[d].microwave_daily.values for d in ("d1", "d3"))
    assert not np.allclose(a, b)


def test_microwave_mean_is_the_mean_of_the_cells_in_the_circle(part):
    tmp, _, insitu = part
    got = SB.sample_part_forcing(insitu, str(tmp / "sw.zarr"), str(tmp / "ci.zarr"), {},
                                 MICROWAVE)
    ci = xr.open_zarr(tmp / "ci.zarr").load()
    lat, lon = POINTS["d2"]
    xb, yb = Transformer.from_crs("EPSG:4326", "EPSG:3413", always_xy=True).transform(lon, lat)
    X, Y = np.meshgrid(ci.x.values, ci.y.values)
    # ground distance = map distance / the stereographic scale factor at the buoy
    # (Snyder 1987, Map Projections - A Working Manual, USGS PP 1395, eq. 21-4 and 21-33)
    k = Proj("EPSG:3413").get_factors(lon, lat).meridional_scale
    inside = np.hypot(X - xb, Y - yb) / k <= 50_000.0
    ref = 1.0 - ci.sea_ice_area_fraction.values[:3, inside].mean(axis=1)  # 1-3 July
    np.testing.assert_allclose(got["d2"].microwave_daily.sel(radius=50_000.0).values, ref,
                               rtol=1e-12)


def test_a_deployment_outside_the_forcing_fails_alone(part):
    tmp, _, insitu = part
    insitu["late"] = dict(insitu["d1"], window_start="2021-08-01", window_end="2021-08-05")
    insitu["broken"] = dict(insitu["d2"], track=str(tmp / "missing.csv"))
    insitu["upstream_failed"] = {"ok": False}
    got = SB.sample_part_forcing(insitu, str(tmp / "sw.zarr"), str(tmp / "ci.zarr"), {},
                                 MICROWAVE)
    assert isinstance(got["late"].error, StageFailed)
    assert "does not cover the analysis window" in str(got["late"].error)
    assert got["broken"].error is not None
    assert "upstream_failed" not in got
    for dep in POINTS:
        assert got[dep].error is None and got[dep].shortwave.sizes["time"] == 42


def test_no_gridded_shortwave_and_no_csv_names_the_fix(part):
    tmp, _, insitu = part
    write_store(None, tmp / "none.zarr", 1)
    got = SB.sample_part_forcing(insitu, str(tmp / "none.zarr"), str(tmp / "ci.zarr"), {},
                                 MICROWAVE)
    msg = str(got["d1"].error)
    assert "has no shortwave" in msg and "shortwave_file" in msg
    assert got["d1"].microwave_daily is None or got["d1"].error is not None


# --------------------------------------------------------------------------- budget store

def _files(root) -> dict:
    return {p.relative_to(root).as_posix(): p.read_bytes()
            for p in sorted(root.rglob("*")) if p.is_file()}


def test_budget_store_is_the_store_zarr_itself_writes_to_a_folder(tmp_path):
    # reference: zarr-python's own local-folder writer (through xarray.Dataset.to_zarr)
    t = pd.date_range("2021-07-01", periods=5, freq="D")
    ds = xr.Dataset(
        {"q_ow": (("time", "source", "radius"), np.arange(20.0).reshape(5, 2, 2),
                  {"units": "MJ m-2"}),
         "qc_ok": (("source", "radius"), np.array([[True, False], [False, True]])),
         "reason": (("source", "radius"), np.array([["", "gap"], ["x", ""]]))},
        coords={"time": t, "source": ["radar", "microwave"], "radius": [2000.0, 4000.0]},
        attrs={"deployment_id": "B1"})
    SB.write_budget_store(ds, tmp_path / "budget.zarr")
    # what write_budget_store hands to Zarr: strings to attributes, booleans to int8
    ref = ds.drop_vars("reason")
    ref.attrs["reason"] = '{"radar/2000": "", "radar/4000": "gap", ' \
                          '"microwave/2000": "x", "microwave/4000": ""}'
    ref["qc_ok"] = ref["qc_ok"].astype("int8")
    ref["source"] = ref["source"].astype(str)
    ref.to_zarr(tmp_path / "ref.zarr", zarr_format=3, consolidated=True, mode="w")
    mine, theirs = _files(tmp_path / "budget.zarr"), _files(tmp_path / "ref.zarr")
    assert mine.keys() == theirs.keys()
    assert all(mine[k] == theirs[k] for k in mine)
    back = xr.open_zarr(tmp_path / "budget.zarr", consolidated=True, chunks=None)
    np.testing.assert_array_equal(back["q_ow"].values, ds["q_ow"].values)
    assert back.attrs["reason"] == ref.attrs["reason"]
    assert not list(tmp_path.glob(".budget.zarr.partial-*"))
