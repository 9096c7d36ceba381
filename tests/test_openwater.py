"""Tests of floeheat.openwater against analytic geometry, pyproj and brute force."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st
from pyproj import Geod, Transformer

from floeheat import constants as C
from floeheat import openwater as O

WATER, ICE, NODATA = C.MASK_CODES["water"], C.MASK_CODES["ice"], C.MASK_CODES["nodata"]


# --- scale factor -------------------------------------------------------------------


def test_scale_factor_vs_spherical_polar_stereographic():
    # Snyder 1987 (USGS Prof. Paper 1395), polar stereographic on the sphere with
    # latitude of true scale phi_c: k = (1 + sin phi_c) / (1 + sin phi). EPSG:3413 has
    # phi_c = 70 N (check-values.md s.8). The ellipsoidal form differs by terms of
    # order e^2 (sin phi - sin phi_c) ~ 2e-4 at most here; it is 8e-6 at 75 N.
    k_sphere = (1 + np.sin(np.radians(70.0))) / (1 + np.sin(np.radians(75.0)))
    k = float(O.scale_factor("EPSG:3413", -150.0, 75.0))
    assert k == pytest.approx(k_sphere, rel=2e-4)
    # exactly 1 on the latitude of true scale (its definition), any longitude
    np.testing.assert_allclose(O.scale_factor("EPSG:3413", [-45.0, 100.0], [70.0, 70.0]),
                               1.0, atol=1e-9)


def test_scale_factor_vs_finite_differences():
    # Independent of get_factors: projected length / geodesic length of a short segment
    # (pyproj Transformer + Geod); for a conformal map it is direction independent.
    g = Geod(ellps="WGS84")
    tr = Transformer.from_crs("EPSG:4326", "EPSG:3976", always_xy=True)
    lon0, lat0 = 40.0, -67.0
    for az in (0.0, 77.0, 200.0):
        lon1, lat1, _ = g.fwd(lon0, lat0, az, 50.0)
        x0, y0 = tr.transform(lon0, lat0)
        x1, y1 = tr.transform(lon1, lat1)
        k_fd = np.hypot(x1 - x0, y1 - y0) / 50.0
        assert float(O.scale_factor("EPSG:3976", lon0, lat0)) == pytest.approx(k_fd, rel=1e-5)
    assert O.projected_radius([1000.0, 2000.0], "EPSG:3976", lon0, lat0) == pytest.approx(
        np.array([1000.0, 2000.0]) * float(O.scale_factor("EPSG:3976", lon0, lat0)))


def test_scale_factor_equal_area_grid():
    # EPSG:6931 is Lambert azimuthal equal-area: areal scale 1 by construction, so the
    # area-preserving radius factor sqrt(areal scale) is 1 although the map is not
    # conformal.
    assert float(O.scale_factor("EPSG:6931", -150.0, 75.0)) == pytest.approx(1.0, abs=1e-6)


# --- the circle ---------------------------------------------------------------------


def _brute_count(transform, x, y, r, pad=3):
    """Pixel centres within r by explicit enumeration (definition of the rule)."""
    a, _, c, _, e, f = tuple(transform)[:6]
    j = np.arange(np.floor((x - r - c) / a) - pad, np.ceil((x + r - c) / a) + pad)
    i = np.arange(np.floor(min((y - r - f) / e, (y + r - f) / e)) - pad,
                  np.ceil(max((y - r - f) / e, (y + r - f) / e)) + pad)
    xc = c + a * (j + 0.5)
    yc = f + e * (i + 0.5)
    return int(((xc[None, :] - x) ** 2 + (yc[:, None] - y) ** 2 <= r * r).sum())


@settings(max_examples=50, deadline=None)
@given(x=st.floats(-50, 50), y=st.floats(-50, 50), r=st.floats(0.0, 30.0),
       sign_e=st.sampled_from([-1.0, 1.0]))
def test_circle_count_equals_brute_force(x, y, r, sign_e):
    tr = Affine(1.5, 0, -7.0, 0, 1.5 * sign_e, 11.0)
    stats = O.circle_fractions(np.zeros((0, 0)), 0, 0, tr, (0, 0), x, y, [r])
    assert int(stats.n_circle[0]) == _brute_count(tr, x, y, r)


def test_disc_area_converges_with_lattice_bound():
    # Gauss circle problem, elementary bound: every unit square centred inside the disc
    # of radius r lies in the disc of radius r + sqrt(2)/2 and every point of the disc
    # of radius r - sqrt(2)/2 lies in such a square, so |N - pi r^2| <= sqrt(2) pi r + pi/2
    # (r in pixels); relative error <= sqrt(2)/r + 1/(2 r^2).
    radius = 15_000.0
    rng = np.random.default_rng(0)
    errs, bounds = [], []
    for px in (3000.0, 1000.0, 300.0, 100.0, 40.0):
        x0, y0 = rng.uniform(-px, px, 2) + (-1578206.404, 422879.131)
        tr = Affine(px, 0, -1600e3, 0, -px, 440e3)
        n = int(O.circle_fractions(np.zeros((0, 0)), 0, 0, tr, (0, 0), x0, y0,
                                   [radius]).n_circle[0])
        rp = radius / px
        err = abs(n * px * px - np.pi * radius**2) / (np.pi * radius**2)
        bound = np.sqrt(2) / rp + 1 / (2 * rp**2)
        assert err <= bound
        errs.append(err)
        bounds.append(bound)
    assert errs[-1] < 1e-3 < errs[0]  # the finest lattice is far closer than the coarsest


@pytest.mark.parametrize("d_frac", [-0.6, 0.0, 0.3, 0.8])
@pytest.mark.parametrize("south_up", [False, True])
def test_half_plane_gives_circular_segment(d_frac, south_up):
    # Water where x > x0 + d: f_ow = segment area / disc area, segment area
    # r^2 acos(d/r) - d sqrt(r^2 - d^2) (circular segment, e.g. CRC Standard
    # Mathematical Tables). Tolerance: pixels within sqrt(2)/2 of the segment's
    # boundary (arc + chord, length P) may switch side: |dN| <= sqrt(2) P + pi/2, for
    # both the water count and the circle count.
    px, r = 10.0, 1000.0
    d = d_frac * r
    shape = (400, 400)
    e = px if south_up else -px
    f = -2000.0 if south_up else 2000.0
    tr = Affine(px, 0, -2000.0, 0, e, f)
    x0, y0 = 3.3, -7.1
    cols = np.arange(shape[1])
    xc = -2000.0 + px * (cols + 0.5)
    win = np.where(xc[None, :] > x0 + d, WATER, ICE).repeat(shape[0], 0).astype(np.uint8)
    s = O.circle_fractions(win, 0, 0, tr, shape, x0, y0, [r])
    seg = r**2 * np.arccos(d / r) - d * np.sqrt(r**2 - d**2)
    f_ref = seg / (np.pi * r**2)
    chord = 2 * np.sqrt(r**2 - d**2)
    arc = 2 * r * np.arccos(d / r)
    n_ref = np.pi * (r / px) ** 2
    tol = ((np.sqrt(2) * (arc + chord) / px + np.pi / 2)
           + f_ref * (np.sqrt(2) * np.pi * r / px + np.pi / 2)) / n_ref
    assert float(s.f_ow[0]) == pytest.approx(f_ref, abs=tol)
    assert float(s.coverage[0]) == 1.0 and bool(s.accepted[0])


def test_coverage_half_beyond_scene_edge():
    px, r = 20.0, 2000.0
    shape = (500, 300)
    tr = Affine(px, 0, 0.0, 0, -px, 10_000.0)
    x0, y0 = 0.0, 5000.0  # on the scene's western edge: half the circle lies beyond it
    # symmetry: exactly the pixels west of the edge are outside (centres never on x = 0)
    cov = O.scene_coverage(tr, shape, x0, y0, [r])[0]
    assert cov == pytest.approx(0.5, abs=0.5 * np.sqrt(2) * 2 * r / px / (np.pi * (r / px) ** 2))
    win_slices = O.circle_window(tr, shape, x0, y0, r)
    assert win_slices[1].start == 0
    full = np.full(shape, ICE, dtype=np.uint8)
    win = full[win_slices]
    s = O.circle_fractions(win, win_slices[0].start, win_slices[1].start, tr, shape,
                           x0, y0, [r])
    assert float(s.coverage[0]) == pytest.approx(cov, abs=1e-12)
    assert bool(s.accepted[0]) == (cov >= C.COVERAGE_THRESHOLD)
    # a no-data stripe inside the scene lowers the valid coverage below the footprint's
    full[:, :10] = NODATA
    s2 = O.circle_fractions(full[win_slices], win_slices[0].start, 0, tr, shape, x0, y0, [r])
    assert float(s2.coverage[0]) < C.COVERAGE_THRESHOLD
    assert np.isnan(s2.f_ow[0]) and not bool(s2.accepted[0])


def test_window_read_once_serves_all_radii():
    rng = np.random.default_rng(5)
    shape = (300, 260)
    tr = Affine(50.0, 0, 100_000.0, 0, -50.0, 900_000.0)
    scene = rng.choice(np.array([WATER, ICE, NODATA], dtype=np.uint8), size=shape,
                       p=[0.2, 0.7, 0.1])
    x0, y0 = 100_000.0 + 50.0 * 20.2, 900_000.0 - 50.0 * 150.7   # near the west edge
    radii = np.array([500.0, 2000.0, 4000.0])
    rs, cs = O.circle_window(tr, shape, x0, y0, radii.max())
    s_win = O.circle_fractions(scene[rs, cs], rs.start, cs.start, tr, shape, x0, y0, radii)
    s_all = O.circle_fractions(scene, 0, 0, tr, shape, x0, y0, radii)
    for a, b in zip(s_win, s_all, strict=True):
        np.testing.assert_array_equal(a, b)
    # brute-force reference of the counts over the whole scene
    cols, rows = np.meshgrid(np.arange(shape[1]), np.arange(shape[0]))
    xc, yc = tr.c + tr.a * (cols + 0.5), tr.f + tr.e * (rows + 0.5)
    inside = (xc - x0) ** 2 + (yc - y0) ** 2 <= radii[-1] ** 2
    assert int(s_all.n_water[-1]) == int((inside & (scene == WATER)).sum())
    assert int(s_all.n_valid[-1]) == int((inside & (scene != NODATA)).sum())
    with pytest.raises(ValueError):
        O.circle_fractions(scene[rs, cs][1:], rs.start + 1, cs.start, tr, shape, x0, y0, radii)


def test_circle_missing_the_scene():
    tr = Affine(10.0, 0, 0.0, 0, -10.0, 0.0)
    assert O.circle_window(tr, (100, 100), -5000.0, 0.0, 100.0) is None
    assert O.scene_coverage(tr, (100, 100), -5000.0, 0.0, [100.0])[0] == 0.0
    with pytest.raises(ValueError):
        O.circle_window(Affine(10.0, 0.1, 0.0, 0, -10.0, 0.0), (10, 10), 0, 0, 5)


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 2**31 - 1), x=st.floats(-200, 1200), y=st.floats(-1200, 200),
       r=st.floats(1.0, 400.0))
def test_fractions_in_unit_interval(seed, x, y, r):
    rng = np.random.default_rng(seed)
    shape = (100, 100)
    tr = Affine(10.0, 0, 0.0, 0, -10.0, 0.0)
    scene = rng.choice(np.array([WATER, ICE, NODATA, 7], dtype=np.uint8), size=shape)
    s = O.circle_fractions(scene, 0, 0, tr, shape, x, y, [r, r / 2])
    ok = np.isfinite(s.f_ow)
    assert np.all((s.f_ow[ok] >= 0) & (s.f_ow[ok] <= 1))
    has = s.n_circle > 0  # a circle holding no pixel centre has coverage NaN
    assert np.all((s.coverage[has] >= 0) & (s.coverage[has] <= 1))
    assert np.isnan(s.coverage[~has]).all()
    assert np.all(s.n_water <= s.n_valid) and np.all(s.n_valid <= s.n_circle)
    foot = O.scene_coverage(tr, shape, x, y, [r, r / 2])
    assert np.all(s.coverage[has] <= foot[has] + 1e-12)


# --- time series --------------------------------------------------------------------


def _t(*days):
    return np.datetime64("2020-06-01", "ns") + (np.array(days) * 86400e9).astype(
        "timedelta64[ns]")


def test_time_series_gap_rules():
    gap = pd.Timedelta(days=6)
    scenes = _t(0, 6, 12.5)          # gap 6 d exactly (bridged), then 6.5 d (not)
    f = np.array([0.0, 0.6, 0.2])
    targets = _t(-6, -6.01, 1.5, 6, 9, 12.5, 18.5, 18.51)
    out = O.radar_time_series(scenes, f, targets, [15000.0], max_gap=gap)
    v, fl = out.values[:, 0], out.flag.values[:, 0]
    # linear interpolation, definition: 0 + 0.6 * 1.5 / 6
    np.testing.assert_allclose(v, [0.0, np.nan, 0.15, 0.6, np.nan, 0.2, 0.2, np.nan])
    assert fl.tolist() == [0, 2, 0, 0, 1, 0, 0, 3]
    assert out.radius.values.tolist() == [15000.0] and out.radius.attrs["units"] == "m"
    assert O.FLAG_MEANINGS[int(fl[4])] == "gap_longer_than_max"


def test_time_series_duplicates_nan_and_radii():
    scenes = _t(0, 0, 2, 4)
    f = np.array([[0.1, np.nan], [0.3, np.nan], [np.nan, np.nan], [0.4, np.nan]])
    out = O.radar_time_series(scenes, f, _t(0, 2), [2000.0, 8000.0])
    # same-time scenes averaged (0.2); the NaN scene at day 2 skipped: 0.2 + 0.2 * 2/4
    np.testing.assert_allclose(out.values[:, 0], [0.2, 0.3])
    assert np.isnan(out.values[:, 1]).all() and (out.flag.values[:, 1] == 4).all()
    with pytest.raises(ValueError):
        O.radar_time_series(scenes, f[:, :1], _t(0), [2000.0, 8000.0])


def test_members_interpolate_as_each_alone():
    # members sharing their counting scenes are interpolated together; each member's
    # series and flags must be what radar_time_series gives that member on its own
    rng = np.random.default_rng(7)
    scenes = _t(0, 0, 1.5, 3, 9, 10, 17)
    targets = _t(*np.arange(-8.0, 26.0, 0.25))
    f = rng.uniform(0.0, 0.5, (9, scenes.size, 2))
    f[::2, 3, 0] = np.nan          # two patterns of counting scenes at the first radius
    f[4, :, 1] = np.nan            # a member without any scene at the second
    gap = pd.Timedelta(days=5)
    many, flags = O.radar_series_members(scenes, f, targets, [2000.0, 8000.0], gap)
    for m in range(f.shape[0]):
        one = O.radar_time_series(scenes, f[m], targets, [2000.0, 8000.0], max_gap=gap)
        np.testing.assert_array_equal(many[m], one.values)
        np.testing.assert_array_equal(flags[m], one.flag.values)
    assert (flags[4, :, 1] == 4).all() and np.isfinite(many).any()


def test_per_scene_arrays_has_one_row_per_scene():
    # the long table of 40 scenes x 3 radii (radii in any order, one missing) gives 40
    # rows: never one row per combination of the distinct times and scene IDs
    times = pd.Timestamp("2020-06-01") + pd.to_timedelta(np.arange(40) * 7, unit="h")
    long = pd.DataFrame({"time": np.repeat(times, 3), "scene_id": np.repeat(
        [f"s{i:02d}" for i in range(40)], 3), "radius_m": np.tile([8e3, 2e3, 4e3], 40),
        "n_valid": np.arange(120.0)}).drop(index=[5])
    t, wide = O.per_scene_arrays(long.sample(frac=1.0, random_state=1), ["n_valid"],
                                 [2e3, 4e3, 8e3])
    assert wide["n_valid"].shape == (40, 3) and t.tolist() == list(times.values)
    assert wide["n_valid"][0].tolist() == [1.0, 2.0, 0.0]
    assert np.isnan(wide["n_valid"][1, 1])
