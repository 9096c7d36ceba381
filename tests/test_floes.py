"""Tests of floeheat.floes against analytic shapes.

Geometry used: a square floe of side s has area s**2 and equivalent diameter
2 s / sqrt(pi); a disc of radius r has area pi r**2; a straight lead at perpendicular
distance d from the centre of a circle of radius r cuts it into segments of area
r**2 acos(d / r) - d sqrt(r**2 - d**2) (the circular segment, elementary geometry).
Pixel counts match these within the discretisation error of the pixel-centre rule.
"""

from __future__ import annotations

import numpy as np
import pytest
from affine import Affine

from floeheat.floes import (
    circle_pixels,
    distance_from_pixel,
    floe_context,
    rim_arcs,
    scene_floe_context,
)
from floeheat.openwater import circle_fractions

PX = 10.0  # pixel size [m]


def _scene(n):
    return Affine(PX, 0, 0, 0, -PX, n * PX)


def _centre(n):
    return n * PX / 2, n * PX / 2           # centre of the middle pixel (n odd)


def test_square_floe():
    n, side = 61, 11
    m = np.zeros((n, n), np.uint8)
    c = n // 2
    m[c - 5:c + 6, c - 5:c + 6] = 1
    x, y = _centre(n)
    fc = floe_context(m, 0, 0, _scene(n), (n, n), x, y, 250.0)
    assert fc.buoy_class == 1
    assert fc.floe_area_m2 == pytest.approx((side * PX) ** 2)
    assert fc.floe_diameter_m == pytest.approx(2 * side * PX / np.sqrt(np.pi))
    assert not fc.floe_at_rim
    assert fc.distance_to_water_m == pytest.approx(6 * PX)   # half side + 1 pixel
    assert fc.n_leads_crossing == 0 and fc.n_leads_touching == 1   # water all around


def test_square_floe_touching_diagonally_is_separate():
    # 4-connected ice: a floe meeting another only at a corner is its own floe
    n = 41
    m = np.zeros((n, n), np.uint8)
    c = n // 2
    m[c - 2:c + 3, c - 2:c + 3] = 1
    m[c + 3:c + 8, c + 3:c + 8] = 1
    fc = floe_context(m, 0, 0, _scene(n), (n, n), *_centre(n), 150.0)
    assert fc.floe_area_m2 == pytest.approx(25 * PX * PX)


@pytest.mark.parametrize("width_px, offset_px", [(1, 8), (3, 10), (5, 4)])
def test_straight_lead(width_px, offset_px):
    n, r = 81, 300.0
    m = np.ones((n, n), np.uint8)
    c = n // 2
    m[:, c + offset_px:c + offset_px + width_px] = 0          # a north-south lead
    x, y = _centre(n)
    fc = floe_context(m, 0, 0, _scene(n), (n, n), x, y, r)
    assert fc.distance_to_water_m == pytest.approx(offset_px * PX)
    assert fc.n_leads_crossing == 1 and fc.n_leads_touching == 1
    assert fc.floe_at_rim
    # the floe is the circle minus the segment beyond the lead's near edge
    d = (offset_px - 0.5) * PX
    segment = r * r * np.arccos(d / r) - d * np.sqrt(r * r - d * d)
    assert fc.floe_area_m2 == pytest.approx(np.pi * r * r - segment, rel=0.03)
    inside = circle_pixels(m.shape, 0, 0, _scene(n), x, y, r)
    assert ((m == 0) & inside).sum(axis=1).max() == width_px   # the lead's width


def test_two_parallel_leads_and_a_lead_ending_inside():
    n, r = 81, 300.0
    m = np.ones((n, n), np.uint8)
    c = n // 2
    m[:, c + 5] = 0
    m[:, c - 12:c - 10] = 0
    m[c + 15, :c - 20] = 0                           # enters from the west, ends inside
    fc = floe_context(m, 0, 0, _scene(n), (n, n), *_centre(n), r)
    assert fc.n_leads_crossing == 2 and fc.n_leads_touching == 3


def test_diagonal_lead_is_one_lead():
    n, r = 81, 300.0
    m = np.ones((n, n), np.uint8)
    i = np.arange(n)
    m[i, i] = 0                                      # one-pixel diagonal: 8-connected
    x, y = _centre(n)
    x += 3 * PX
    fc = floe_context(m, 0, 0, _scene(n), (n, n), x, y, r)
    assert fc.n_leads_crossing == 1 and fc.n_leads_touching == 1
    assert fc.distance_to_water_m == pytest.approx(np.hypot(1.5, 1.5) * PX, rel=0.35)


def test_disc_of_ice_fills_the_circle():
    n, r = 101, 400.0
    m = np.ones((n, n), np.uint8)
    x, y = _centre(n)
    fc = floe_context(m, 0, 0, _scene(n), (n, n), x, y, r)
    assert fc.floe_area_m2 == pytest.approx(np.pi * r * r, rel=0.01)
    assert fc.floe_diameter_m == pytest.approx(2 * r, rel=0.005)
    assert fc.floe_at_rim and np.isnan(fc.distance_to_water_m)
    assert fc.n_leads_crossing == 0 and fc.n_leads_touching == 0
    # same pixel rule as floeheat.openwater
    s = circle_fractions(m, 0, 0, _scene(n), (n, n), x, y, [r])
    assert fc.n_circle == int(s.n_circle[0]) == int(fc.floe_area_m2 / PX**2)


def test_disc_floe_in_water():
    n, rf = 101, 150.0
    x, y = _centre(n)
    inside = circle_pixels((n, n), 0, 0, _scene(n), x, y, rf)
    m = np.where(inside, 1, 0).astype(np.uint8)
    fc = floe_context(m, 0, 0, _scene(n), (n, n), x, y, 400.0)
    assert fc.floe_area_m2 == pytest.approx(np.pi * rf * rf, rel=0.02)
    assert not fc.floe_at_rim
    assert fc.distance_to_water_m == pytest.approx(rf, abs=PX)


def test_scale_factor_and_buoy_on_water():
    n = 41
    m = np.ones((n, n), np.uint8)
    x, y = _centre(n)
    a = floe_context(m, 0, 0, _scene(n), (n, n), x, y, 150.0)
    b = floe_context(m, 0, 0, _scene(n), (n, n), x, y, 150.0, scale_factor=0.98)
    assert b.floe_area_m2 == pytest.approx(a.floe_area_m2 / 0.98**2)
    m[n // 2, n // 2] = 0
    w = floe_context(m, 0, 0, _scene(n), (n, n), x, y, 150.0)
    assert w.buoy_class == 0 and w.floe_area_m2 == 0.0 and w.distance_to_water_m == 0.0


def test_circle_beyond_scene_edge_is_no_data():
    n = 41
    m = np.ones((n, n), np.uint8)
    ds = scene_floe_context(m, _scene(n), [5.0, -1000.0], [205.0, 205.0], 100.0,
                            buoy=["edge", "away"])
    assert ds.distance_to_nodata_m.sel(buoy="edge") == pytest.approx(PX)
    assert ds.floe_at_rim.sel(buoy="edge")
    assert np.isnan(ds.floe_area_m2.sel(buoy="away"))
    assert int(ds.buoy_class.sel(buoy="away")) == 255


def test_rim_arcs_min_gap():
    lab = np.zeros((7, 7), int)
    rim = np.zeros((7, 7), bool)
    rim[0, :] = rim[-1, :] = rim[:, 0] = rim[:, -1] = True
    lab[0, 2] = lab[0, 4] = 1                      # one pixel apart on the rim
    assert rim_arcs(lab, rim, (3.0, 3.0)) == {1: 1}
    assert rim_arcs(lab, rim, (3.0, 3.0), min_gap_px=1) == {1: 2}


def test_distance_from_pixel_equals_scipy_distance_transform():
    # reference: scipy.ndimage.distance_transform_edt of the complement, read at the
    # pixel, with unequal pixel spacings
    from scipy import ndimage

    rng = np.random.default_rng(5)
    for _trial in range(30):
        target = rng.random((60, 45)) < rng.uniform(0.001, 0.2)
        if not target.any():
            continue
        r, c = rng.integers(0, 60), rng.integers(0, 45)
        sampling = (rng.uniform(5, 50), rng.uniform(5, 50))
        expect = ndimage.distance_transform_edt(~target, sampling=sampling)[r, c]
        assert distance_from_pixel(target, r, c, sampling) == pytest.approx(expect, rel=1e-12)
    assert np.isnan(distance_from_pixel(np.zeros((3, 3), bool), 1, 1))
