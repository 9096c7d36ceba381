"""Tests of floeheat.microwave against pyproj geodesics, scipy and hand-worked cases."""

from __future__ import annotations

import dask.array
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st
from pyproj import CRS, Geod, Transformer
from scipy.interpolate import RegularGridInterpolator

from chunk_recorder import ChunkRecorder
from floeheat import microwave as M

WKT_3413 = CRS("EPSG:3413").to_wkt()
TO_LL = Transformer.from_crs("EPSG:3413", "EPSG:4326", always_xy=True)


def _conc(values, x, y, start="2020-06-01"):
    nt = values.shape[0]
    edges = pd.date_range(start, periods=nt + 1, freq="D").to_numpy("datetime64[ns]")
    return xr.Dataset(
        {"sea_ice_area_fraction": (("time", "y", "x"), values, {"crs_wkt": WKT_3413}),
         "time_bnds": (("time", "nv"), np.stack([edges[:-1], edges[1:]], 1))},
        coords={"time": edges[:-1], "x": x, "y": y})


def _ll(px, py):
    lon, lat = TO_LL.transform(np.asarray(px, float), np.asarray(py, float))
    return np.asarray(lat), np.asarray(lon)


def test_mean_matches_geodesic_disc():
    # Reference: cells whose centres lie within the radius by geodesic distance on the
    # WGS 84 ellipsoid (pyproj Geod). The projected circle of radius r k(buoy) differs
    # only where k varies across the disc (|dk| ~ 2e-4 over 20 km here), i.e. for cells
    # within ~5 m of the rim: allow 2 such cells.
    rng = np.random.default_rng(0)
    cell = 1000.0
    x = -1578e3 + np.arange(60) * cell
    y = 422e3 + np.arange(50) * cell
    c = rng.uniform(0.0, 1.0, (1, y.size, x.size))
    bx, by = -1578e3 + 30.3e3, 422e3 + 24.6e3
    lat, lon = _ll([bx], [by])
    out = M.fraction_at_buoys(_conc(c, x, y), lat, lon, [10_000.0])
    X, Y = np.meshgrid(x, y)
    clat, clon = _ll(X, Y)
    _, _, dist = Geod(ellps="WGS84").inv(np.full(X.shape, lon[0]), np.full(X.shape, lat[0]),
                                        clon, clat)
    inside = dist <= 10_000.0
    assert abs(int(out.n_cells[0, 0]) - int(inside.sum())) <= 2
    assert float(out[0, 0]) == pytest.approx(float(np.mean(1.0 - c[0][inside])), abs=0.01)
    # the disc's cell count is close to pi r^2 / cell^2 (lattice bound, see test_openwater)
    rp = 10.0
    assert abs(int(out.n_cells[0, 0]) - np.pi * rp**2) <= np.sqrt(2) * np.pi * rp + np.pi / 2


def test_nearest_fallback_and_limit():
    x = np.arange(0.0, 250e3, 25e3)
    y = np.arange(-1000e3, -750e3, 25e3)
    c = np.full((1, y.size, x.size), 0.9)
    c[0, 4, 4] = 0.3
    c[0, 4, 5] = np.nan
    bx, by = x[5] - 2e3, y[4]                # 2 km from a no-data cell, 23 km from 0.3
    lat, lon = _ll([bx], [by])
    out = M.fraction_at_buoys(_conc(c, x, y), lat, lon, [1000.0, 30_000.0])
    assert float(out[0, 0]) == pytest.approx(0.7)  # nearest valid cell (no cell within 1 km)
    assert int(out.n_cells[0, 0]) == 0
    assert int(out.n_cells[0, 1]) > 0
    near = M.fraction_at_buoys(_conc(c, x, y), lat, lon, [1000.0], method="nearest")
    assert float(near[0, 0]) == pytest.approx(0.7)
    tight = M.fraction_at_buoys(_conc(c, x, y), lat, lon, [1000.0], nearest_max_m=10_000.0)
    assert np.isnan(float(tight[0, 0]))


def test_bilinear_matches_scipy_and_renormalises():
    rng = np.random.default_rng(2)
    x = np.arange(-300e3, 300e3 + 1, 25e3)
    y = np.arange(-300e3, 300e3 + 1, 25e3)
    c = rng.uniform(0, 1, (2, y.size, x.size))
    px = rng.uniform(-290e3, 290e3, 2)
    py = rng.uniform(-290e3, 290e3, 2)
    lat, lon = _ll(px, py)
    out = M.fraction_at_buoys(_conc(c, x, y), lat, lon, [15_000.0], method="bilinear")
    for j in range(2):
        ref = RegularGridInterpolator((y, x), c[j])  # scipy reference for bilinear
        assert float(out[j, 0]) == pytest.approx(1.0 - ref([[py[j], px[j]]])[0], rel=1e-9)
    # one no-data corner: weights renormalised over the other three (by hand)
    c2 = c.copy()
    i, k = np.searchsorted(y, py[0]) - 1, np.searchsorted(x, px[0]) - 1
    c2[0, i, k] = np.nan
    wy = (py[0] - y[i]) / 25e3
    wx = (px[0] - x[k]) / 25e3
    w = np.array([wy * (1 - wx), (1 - wy) * wx, wy * wx])
    v = np.array([c[0, i + 1, k], c[0, i, k + 1], c[0, i + 1, k + 1]])
    out2 = M.fraction_at_buoys(_conc(c2, x, y), lat, lon, [15_000.0], method="bilinear")
    assert float(out2[0, 0]) == pytest.approx(1.0 - np.sum(w * v) / np.sum(w), rel=1e-9)


def _random_conc(seed, x0_m, y0_m, n, days, nan_fraction):
    """A random daily concentration on an n x n grid of 25 km cells from (x0, y0), with
    ``nan_fraction`` of the cells missing: the generator, axes, values and Dataset."""
    rng = np.random.default_rng(seed)
    x = x0_m + np.arange(n) * 25e3
    y = y0_m + np.arange(n) * 25e3
    c = rng.uniform(0.0, 1.0, (days, y.size, x.size))
    c[rng.uniform(size=c.shape) < nan_fraction] = np.nan
    return rng, x, y, c, _conc(c, x, y)


def test_latlon_grid_equals_projected_grid_and_tracks_vectorised():
    rng, x, y, c, ds = _random_conc(4, -1000e3, 200e3, 30, 3, 0.1)
    X, Y = np.meshgrid(x, y)
    glat, glon = _ll(X, Y)
    curv = xr.Dataset(
        {"sea_ice_area_fraction": (("time", "j", "i"), c),
         "time_bnds": ds.time_bnds},
        coords={"time": ds.time, "latitude": (("j", "i"), glat),
                "longitude": (("j", "i"), glon)})
    px = rng.uniform(-900e3, -400e3, (2, 3))
    py = rng.uniform(300e3, 800e3, (2, 3))
    lat, lon = _ll(px, py)
    lat = xr.DataArray(lat, dims=("track", "time"), coords={"track": ["a", "b"]})
    lon = xr.DataArray(lon, dims=("track", "time"), coords={"track": ["a", "b"]})
    radii = [15_000.0, 60_000.0]
    a = M.fraction_at_buoys(ds, lat, lon, radii)
    b = M.fraction_at_buoys(curv, lat, lon, radii, crs="EPSG:3413")
    np.testing.assert_allclose(a.values, b.values, rtol=1e-12)
    assert a.dims == ("track", "time", "radius") and a.track.values.tolist() == ["a", "b"]
    for t in range(2):
        one = M.fraction_at_buoys(ds, lat.values[t], lon.values[t], radii)
        np.testing.assert_allclose(one.values, a.values[t], rtol=1e-14)
    # daily values stand at the middle of their intervals (science.md)
    assert (a.time.values == ds.time.values + np.timedelta64(12, "h")).all()
    with pytest.raises(ValueError):
        M.fraction_at_buoys(curv, lat, lon, radii, method="bilinear")


@pytest.mark.parametrize("method", ["mean", "nearest", "bilinear"])
def test_chunked_store_one_pass_reads_only_chunks_within_reach(method):
    # Synthetic equivalence: a dask-chunked store gives the in-memory values exactly,
    # and per track the values of the one-pass call. Chunks read: each at most once,
    # every chunk holding a cell within 45 km of a buoy and none without a cell within
    # 52 km (the search distance is nearest_max_m = 50 km times the local scale factor,
    # 0.97-1.0 here; brute-force distances on the grid).
    rng, x, y, c, ds = _random_conc(5, -1500e3, 100e3, 64, 4, 0.2)
    rec = ChunkRecorder(c)
    chunked = ds.copy()
    chunked["sea_ice_area_fraction"] = (("time", "y", "x"),
                                        dask.array.from_array(rec, chunks=(4, 16, 16)),
                                        {"crs_wkt": WKT_3413})
    days = np.arange(4)
    px = np.array([[-1400e3], [-700e3], [-150e3]]) + 3e3 * days
    py = np.array([[210e3], [905e3], [1560e3]]) + 2e3 * days
    lat, lon = _ll(px, py)
    radii = [15_000.0, 40_000.0]
    together = M.fraction_at_buoys(chunked, lat, lon, radii, method=method)
    read = list(rec.blocks)
    ref = M.fraction_at_buoys(ds, lat, lon, radii, method=method)
    np.testing.assert_array_equal(together.values, ref.values)
    np.testing.assert_array_equal(together.n_cells.values, ref.n_cells.values)
    for t in range(3):
        alone = M.fraction_at_buoys(chunked, lat[t], lon[t], radii, method=method)
        np.testing.assert_array_equal(alone.values, together.values[t])
    got = [(rows[0] // 16, cols[0] // 16) for _, rows, cols in read]
    assert len(got) == len(set(got))  # no chunk read twice
    X, Y = np.meshgrid(x, y)
    d = np.hypot(X[None] - px.reshape(-1, 1, 1), Y[None] - py.reshape(-1, 1, 1)).min(axis=0)

    def chunks_within(dist):
        rr, cc = np.nonzero(d <= dist)
        return set(zip((rr // 16).tolist(), (cc // 16).tolist()))

    if method == "bilinear":  # the four corners only: within one cell diagonal
        assert set(got) <= chunks_within(25e3 * np.sqrt(2))
    else:
        assert chunks_within(45e3) <= set(got) <= chunks_within(52e3)
    assert len(set(got)) < 16 // 2  # of the 4 x 4 chunks, the buoys touch a few


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 2**31 - 1), frac_nan=st.floats(0.0, 0.9),
       method=st.sampled_from(["mean", "bilinear", "nearest"]))
def test_fractions_in_unit_interval(seed, frac_nan, method):
    rng = np.random.default_rng(seed)
    x = np.arange(10) * 25e3
    y = -1000e3 + np.arange(10) * 25e3
    c = rng.uniform(0, 1, (2, 10, 10))
    c[rng.uniform(size=c.shape) < frac_nan] = np.nan
    lat, lon = _ll(rng.uniform(0, 225e3, 2), rng.uniform(-1000e3, -775e3, 2))
    f = M.fraction_at_buoys(_conc(c, x, y), lat, lon, [10e3, 40e3], method=method).values
    ok = np.isfinite(f)
    assert np.all((f[ok] >= 0.0) & (f[ok] <= 1.0))


def test_interpolate_daily_rules():
    mid = np.array(["2020-06-01T12", "2020-06-02T12", "2020-06-03T12", "2020-06-05T12"],
                   dtype="datetime64[ns]")
    f = xr.DataArray(np.array([[0.1], [0.3], [np.nan], [0.5]]), dims=("time", "radius"),
                     coords={"time": mid, "radius": [15000.0]})
    tt = np.array(["2020-06-01T00", "2020-05-31T23:59", "2020-06-02T00", "2020-06-02T12",
                   "2020-06-04T00", "2020-06-06T00", "2020-06-06T00:01"],
                  dtype="datetime64[ns]")
    out = M.interpolate_daily(f, tt)
    # hold of half a day before the first and after the last; linear between
    # consecutive days; the NaN day leaves a 3-day gap that is not bridged
    np.testing.assert_allclose(out.values[:, 0], [0.1, np.nan, 0.2, 0.3, np.nan, 0.5, np.nan])
    wide = M.interpolate_daily(f, tt[4:5], max_gap=pd.Timedelta(days=3))
    assert float(wide[0, 0]) == pytest.approx(0.3 + 0.2 * 1.5 / 3.0)  # linear, definition
    assert out.dims == ("time", "radius")
