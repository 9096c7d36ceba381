"""The workflow on synthesized variants: a track that drifts onto a shelf (advection
screen), mixed ice types (the tiny archive has first-year and multiyear deployments),
a southern-hemisphere season across the year boundary, and the bulk-flux cross-check.

The truth is the synthesizer's forward model (an invented scenario).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from pyproj import Proj

from floeheat.climatology import grid_region_names
from floeheat.synth import write_archive

pytestmark = pytest.mark.workflow


def _truth(archive):
    return json.loads((archive.parent / f"{archive.name}.truth" / "truth.json").read_text())


def _variant_run(tmp_path_factory, run_workflow, name, **variant):
    """(archive, results) of the workflow on a tiny archive of one synthesizer variant."""
    root = tmp_path_factory.mktemp(name) / "archive"
    write_archive(root, seed=1, size="tiny", **variant)
    results = root.parent / "results"
    run_workflow("--config", f"archive={root}", f"results={results}")
    return root, results


@pytest.fixture(scope="module")
def shelf_run(tmp_path_factory, run_workflow):
    return _variant_run(tmp_path_factory, run_workflow, "shelf", variant="shelf")


@pytest.fixture(scope="module")
def south_run(tmp_path_factory, run_workflow):
    return _variant_run(tmp_path_factory, run_workflow, "south", hemisphere="south")


def _true_distance(archive, truth, dep):
    """Ground distance to the bank's 1000 m isobath from the truth track (analytic)."""
    shelf = truth["shelf"]
    t = xr.open_dataset(archive.parent / f"{archive.name}.truth" / f"truth_{dep}.nc")
    k = np.asarray(Proj(shelf["crs"]).get_factors(t["longitude"].values,
                                                  t["latitude"].values).parallel_scale)
    r = np.hypot(t["x"].values - shelf["centre_x_m"], t["y"].values - shelf["centre_y_m"])
    return t["node_time"].values, np.clip(r - shelf["isobath_1000m_radius_m"], 0, None) / k


def test_screen_excludes_the_windows_near_the_shelf(shelf_run):
    archive, results = shelf_run
    truth = _truth(archive)
    limit = 50_000.0  # screen.distance_m default
    grid_half_diagonal = 25_000.0 / np.sqrt(2)  # the bathymetry's 25 km cells
    sw = pd.read_csv(results / "tables" / "screen_windows.csv",
                     parse_dates=["window_start", "window_end"])
    assert len(sw) > 0
    checked = {"in": 0, "out": 0}
    for row in sw.drop_duplicates(["deployment_id", "window_start"]).itertuples():
        t, d = _true_distance(archive, truth, row.deployment_id)
        a, b = (np.datetime64(x.tz_convert(None)) for x in (row.window_start, row.window_end))
        inside = (t >= a) & (t <= b)
        dmin = float(d[inside].min())
        if dmin < limit - grid_half_diagonal:
            assert row.excluded and row.flag_near_shelf, (row.deployment_id, dmin)
            checked["in"] += 1
        elif dmin > limit + grid_half_diagonal:
            assert not row.excluded and not row.flag_near_shelf, (row.deployment_id, dmin)
            checked["out"] += 1
    assert checked["in"] >= 1 and checked["out"] >= 1, checked
    summary = pd.read_csv(results / "tables" / "screen.csv")
    assert summary["advection_screen"].str.startswith("applied").all()
    target = summary.set_index("deployment_id").loc[truth["shelf"]["deployment_id"]]
    assert target["excluded_fraction"] > 0 and target["min_sea_floor_depth_m"] < 1000.0
    # the climatology counts only the windows the screen kept
    kept = sw[~sw["excluded"]]
    clim = pd.read_csv(results / "tables" / "climatology.csv")
    assert clim["n_windows"].sum() == len(kept)
    assert clim["advection_screen"].str.startswith("applied").all()


def test_bulk_flux_recovers_the_synthesizers_exchange_coefficient(shelf_run):
    archive, results = shelf_run
    c_h = _truth(archive)["conventions"]["bulk_flux"]["c_h"]
    table = pd.read_csv(results / "tables" / "bulkflux.csv")
    assert len(table) == len(_truth(archive)["deployments"])
    for row in table.itertuples():
        assert abs(row.c_h_implied / c_h - 1) < 0.20, (row.deployment_id, row.c_h_implied)
        assert not row.disagree
    assert (results / "figures" / "basin_bulkflux.png").is_file()
    assert (results / "figures" / "basin_screen.png").is_file()


def test_ice_type_split_adds_up_to_the_unsplit_climatology(shelf_run):
    archive, results = shelf_run
    split = pd.read_csv(results / "tables" / "climatology.csv")
    unsplit = pd.read_csv(results / "tables" / "climatology_unsplit.csv")
    assert set(split["ice_type"]) == {"first-year", "multiyear"}
    assert "ice_type" not in unsplit.columns
    keys = ["region", "month", "source", "radius_m"]
    summed = split.groupby(keys)[["n_windows", "n_deployments"]].sum()
    both = unsplit.set_index(keys)[["n_windows", "n_deployments"]]
    pd.testing.assert_frame_equal(summed.sort_index(), both.sort_index(), check_dtype=False)
    # shares recombine with the incident solar of each split cell as weights
    windows = pd.read_csv(results / "tables" / "windows.csv",
                          parse_dates=["window_start", "window_end"])
    sw = pd.read_csv(results / "tables" / "screen_windows.csv",
                     parse_dates=["window_start", "window_end"])
    on = ["deployment_id", "source", "radius_m", "window_start", "window_end"]
    windows = windows.merge(sw[on + ["excluded"]], on=on)
    windows = windows[~windows["excluded"]]
    mid = windows["window_start"] + (windows["window_end"] - windows["window_start"]) / 2
    windows["month"] = mid.dt.month
    windows["region"] = grid_region_names(windows["latitude"], windows["longitude"], "north")
    sw_sum = windows.groupby(keys + ["ice_type"])["sw_down_MJ"].sum()
    assert len(unsplit) > 0
    for key, cell in unsplit.groupby(keys):
        parts = split[(split["region"] == key[0]) & (split["month"] == key[1])
                      & (split["source"] == key[2]) & (split["radius_m"] == key[3])]
        w = np.array([sw_sum.get((*key, it), 0.0) for it in parts["ice_type"]])
        assert np.sum(w * parts["share_ow"]) / np.sum(w) == pytest.approx(
            cell["share_ow"].iloc[0], rel=1e-6)
    assert (results / "figures" / "basin_ice_type.png").is_file()


def test_southern_season_runs_across_the_year_boundary(south_run):
    archive, results = south_run
    failures = pd.read_csv(results / "tables" / "failures.csv")
    assert failures.empty, failures.to_string()
    seasonal = pd.read_csv(results / "tables" / "seasonal.csv")
    truth = _truth(archive)
    radar = seasonal[(seasonal["source"] == "radar") & (seasonal["radius_m"] == 15000.0)]
    for row in radar.itertuples():
        true = truth["deployments"][row.deployment_id]
        assert abs(row.t_ice - true["t_season"]) < 0.01, row.deployment_id
    assert (pd.to_datetime(radar["start"]).dt.year == 2025).all()
    assert (pd.to_datetime(radar["end"]).dt.year == 2026).all()
    clim = pd.read_csv(results / "tables" / "climatology.csv")
    assert len(clim) and set(clim["month"]) <= {11, 12, 1, 2, 3}
    assert clim["region"].str.startswith("ease-s200km").all()
    screen = pd.read_csv(results / "tables" / "screen.csv")
    assert (screen["n_windows_excluded"] == 0).all()
