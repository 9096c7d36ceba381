"""Tests of floeheat.climatology: regions, bootstrap by array, the climatology table."""

import numpy as np
import pandas as pd
import pytest
from shapely.geometry import box

from floeheat import climatology as cl


def _windows(n_arrays=3, per_array=2, t_values=None):
    rows = []
    k = 0
    for a in range(n_arrays):
        for d in range(per_array):
            t = t_values[k] if t_values is not None else 0.02 * (k + 1)
            rows.append(dict(
                deployment_id=f"D{a}{d}", array_id=f"A{a}", ice_type="", source="radar",
                radius_m=15000.0, window_start=pd.Timestamp("2024-07-01"),
                window_end=pd.Timestamp("2024-07-16"), latitude=85.0, longitude=10.0,
                f_ow_mean=0.1, t_ice=t, sw_down_MJ=300.0, q_ow_MJ=28.0, q_tr_MJ=12.0,
                q_st_MJ=15.0, q_w_MJ=25.0))
            k += 1
    return pd.DataFrame(rows)


def test_grid_cell_of_a_point_matches_lambert_azimuthal_equal_area_on_the_sphere():
    # Snyder (1987), Map Projections - A Working Manual, USGS PP 1395, eq. 24-1..24-4
    # (polar aspect): rho = 2 R sin((90 - lat) / 2). With the authalic radius
    # R = 6371007.2 m (EASE-Grid 2.0 uses the WGS 84 ellipsoid; the spherical formula is
    # within a few hundred metres at these latitudes, far inside a 200 km cell).
    lat, lon = 86.0, 0.0
    rho = 2 * 6371007.2 * np.sin(np.radians((90 - lat) / 2))
    # lon 0 lies on the negative y axis of the north polar aspect (x = rho sin(lon),
    # y = -rho cos(lon)): rho is about 445 km, so the cell is y index -3.
    assert -600e3 < -rho < -400e3
    assert cl.grid_region_names([lat], [lon]).tolist() == ["ease-n200km_x0_y-3"]


def test_polygon_regions_accept_both_longitude_conventions():
    regions = [("east", box(170, 80, 190, 85))]
    names = cl.polygon_region_names([82.0, 82.0, 70.0], [-175.0, 175.0, 175.0], regions)
    assert names.tolist() == ["east", "east", ""]


def test_bootstrap_with_one_array_collapses_to_its_median():
    # Resampling whole arrays: with a single array every replicate holds the same values.
    lo, hi = cl.bootstrap_median_by_array([0.01, 0.03, 0.08], ["A", "A", "A"], 100,
                                          np.random.default_rng(1))
    assert lo == hi == pytest.approx(0.03)


def test_bootstrap_interval_widens_with_spread_between_arrays():
    rng = np.random.default_rng(3)
    narrow = cl.bootstrap_median_by_array([0.05, 0.05, 0.051, 0.051], list("aabb"), 500, rng)
    wide = cl.bootstrap_median_by_array([0.01, 0.01, 0.09, 0.09], list("aabb"), 500, rng)
    assert (wide[1] - wide[0]) > 10 * (narrow[1] - narrow[0])


def test_climatology_table_counts_and_shares():
    t = cl.climatology_table(_windows(), ["r"] * 6, n_boot=200, seed=4)
    assert len(t) == 1
    row = t.iloc[0]
    assert row["n_deployments"] == 6 and row["n_windows"] == 6
    assert row["month"] == 7
    # medians and quartiles as numpy defines them (linear interpolation)
    vals = 0.02 * np.arange(1, 7)
    assert row["t_ice_median"] == pytest.approx(np.median(vals))
    assert row["t_ice_p25"] == pytest.approx(np.percentile(vals, 25))
    assert row["t_ice_ci_lo"] <= row["t_ice_median"] <= row["t_ice_ci_hi"]
    assert row["share_ow"] == pytest.approx(28.0 / 300.0)
    assert row["share_tr"] == pytest.approx(12.0 / 300.0)
    assert row["share_stored"] == pytest.approx(15.0 / 40.0)
    assert row["share_to_ice"] == pytest.approx(25.0 / 40.0)


def test_climatology_is_seeded_and_reproducible():
    w = _windows()
    a = cl.climatology_table(w, ["r"] * 6, n_boot=100, seed=9)
    b = cl.climatology_table(w.sample(frac=1.0, random_state=2), ["r"] * 6, n_boot=100,
                             seed=9)
    pd.testing.assert_frame_equal(a, b)


def test_ice_type_split_adds_up_to_the_unsplit_counts():
    w = _windows()
    w.loc[::2, "ice_type"] = "first-year"
    w.loc[1::2, "ice_type"] = "multiyear"
    split = cl.climatology_table(w, ["r"] * 6, n_boot=50, split_ice_type=True)
    whole = cl.climatology_table(w, ["r"] * 6, n_boot=50)
    assert split["n_windows"].sum() == whole["n_windows"].sum()
    assert set(split["ice_type"]) == {"first-year", "multiyear"}


def test_replicate_medians_equal_numpy_median_of_each_replicate():
    # reference: numpy.median of each replicate's concatenated records, odd and even
    # counts and groups of unequal size
    from floeheat.climatology import replicate_medians

    rng = np.random.default_rng(4)
    values = rng.normal(size=(23, 5))
    rows = [np.arange(0, 7), np.arange(7, 8), np.arange(8, 20), np.arange(20, 23)]
    picks = rng.integers(0, 4, size=(300, 4))
    member = rng.integers(0, 5, size=300)
    expect = [np.median(values[np.concatenate([rows[k] for k in p]), m])
              for p, m in zip(picks, member)]
    np.testing.assert_array_equal(replicate_medians(values, rows, picks, member), expect)
    expect_1d = [np.median(values[np.concatenate([rows[k] for k in p]), 0]) for p in picks]
    np.testing.assert_array_equal(replicate_medians(values[:, 0], rows, picks), expect_1d)
