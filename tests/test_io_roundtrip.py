"""The tiny demo archive read back through the reader layer equals the synthesizer's
truth within the noise the synthesizer added (floeheat.synth; noise levels from its
code: CTD temperature 0.002 K and salinity 0.003, thermistors 0.02 K plus one dead
sensor and a few spikes, position fixes 4e-5 degrees plus a few bad fixes, sounder
0.005 m; shortwave and concentration are written without noise beyond rounding).

The truth folder holds the noise-free casts, string temperatures, track and the
shortwave at the buoy; the gridded fields themselves are drawn again from the
synthesizer's seeded generators (deterministic for a seed).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from broken_archives import tiny_clean
from floeheat import openwater
from floeheat.io import (
    open_concentration,
    open_scene,
    open_shortwave,
    read_deployments,
    read_icemass,
    read_profiles,
    read_scene_table,
    read_shortwave_csv,
)
from floeheat.shortwave import sample_at_tracks
from floeheat.synth import SIZES
from floeheat.synth.drift import make_tracks
from floeheat.synth.scenario import make_scenario

SEED, SIZE = 1, "tiny"
SCENARIO = make_scenario(SEED, SIZES[SIZE], "north")
DEPLOYMENTS = [d.deployment_id for d in SCENARIO.deployments]
#: Noise the synthesizer adds (floeheat/synth/archive.py, icemass.py, drift.py).
SIGMA_T_CTD, SIGMA_S_CTD = 0.002, 0.003
SIGMA_STRING = 0.02
SIGMA_FIX_DEG = 4e-5
SIGMA_SOUNDER_M = 0.005
BAD_FIXES = {"profiles": 2, "icemass": 3}


@pytest.fixture(scope="session")
def archive(tmp_path_factory) -> Path:
    return tiny_clean(tmp_path_factory)


@pytest.fixture(scope="session")
def truth_dir(archive) -> Path:
    return archive.with_name("archive.truth")


@pytest.fixture(scope="session")
def meta(truth_dir) -> dict:
    return json.loads((truth_dir / "truth.json").read_text())


@pytest.fixture(scope="session")
def table(archive) -> pd.DataFrame:
    return read_deployments(archive).set_index("deployment_id")


def _truth(truth_dir: Path, dep: str) -> xr.Dataset:
    return xr.load_dataset(truth_dir / f"truth_{dep}.nc")


@pytest.fixture(scope="session")
def forward():
    """The synthesizer's tracks, and its gridded fields drawn again from the seed."""
    from floeheat.synth import gridded, icefield

    tracks = make_tracks(SCENARIO)
    field_ = icefield.make_icefield(SCENARIO, tracks)
    return {"tracks": tracks,
            "shortwave": gridded.make_shortwave(SCENARIO, tracks.lat_deg, tracks.lon_deg),
            "microwave": gridded.make_microwave(SCENARIO, field_, tracks.x_m, tracks.y_m)}


def _noise_ok(diff: np.ndarray, sigma: float) -> None:
    """Differences look like the added noise: centred, of its spread, no outliers."""
    d = np.asarray(diff, float).ravel()
    d = d[np.isfinite(d)]
    assert d.size > 100
    assert abs(np.median(d)) < 0.2 * sigma
    assert np.median(np.abs(d)) < 3 * sigma
    assert 0.8 * sigma < np.std(d) < 1.2 * sigma
    assert np.max(np.abs(d)) < 6.5 * sigma


def _on_nodes(node_time, times) -> np.ndarray:
    """Indices of ``times`` among the truth's hourly nodes (they are nodes exactly)."""
    idx = np.searchsorted(node_time, times)
    assert np.array_equal(node_time[idx], times)
    return idx


# ---------------------------------------------------------------- profiles


@pytest.mark.parametrize("dep", DEPLOYMENTS)
def test_profiles_match_true_casts(dep, archive, truth_dir, table, meta):
    ds = read_profiles(archive / table.loc[dep, "profile_file"])
    tr = _truth(truth_dir, dep)
    assert ds.attrs["layout"] == meta["deployments"][dep]["profile_layout"]
    assert ds.attrs["salinity_from"] == meta["deployments"][dep]["salinity_from"]
    assert np.array_equal(ds["time"].values, tr["profile_time"].values)
    levels = np.isfinite(tr["temperature"].values)
    n_lev = levels.sum(axis=1)
    assert np.array_equal(np.isfinite(ds["pressure"].values).sum(axis=1), n_lev)
    width = ds.sizes["level"]
    p_true = np.where(levels, tr["pressure"].values[None, :], np.nan)[:, :width]
    np.testing.assert_allclose(ds["pressure"].values, p_true, atol=1e-4)
    _noise_ok(ds["temperature"].values - tr["temperature"].values[:, :width], SIGMA_T_CTD)
    _noise_ok(ds["salinity"].values - tr["salinity"].values[:, :width], SIGMA_S_CTD)


# ---------------------------------------------------------------- thermistor strings


@pytest.mark.parametrize("dep", DEPLOYMENTS)
def test_string_temperatures_match_truth(dep, archive, truth_dir, table):
    ds = read_icemass(archive / table.loc[dep, "icemass_file"])
    tr = _truth(truth_dir, dep)
    assert np.array_equal(ds["time"].values, tr["string_time"].values)
    np.testing.assert_allclose(ds["depth"].values, tr["sensor_depth"].values, atol=1e-6)
    truth_t = tr["string_temperature"].values
    dead = int(tr["string_temperature"].attrs["dead_sensor_index"])
    obs = ds["temperature"].values
    # the dead sensor reads a constant (NetCDF) or nothing (CSV)
    assert np.all(np.isnan(obs[:, dead])) or np.ptp(obs[:, dead]) == 0
    alive = np.delete(obs, dead, axis=1) - np.delete(truth_t, dead, axis=1)
    spikes = np.abs(alive) > 1.0
    assert spikes.sum() <= max(3, truth_t.size // 20000)
    _noise_ok(np.where(spikes, np.nan, alive), SIGMA_STRING)


def test_sounder_matches_true_ice_bottom(archive, truth_dir, table, meta):
    deps = [d for d, t in meta["deployments"].items() if t["sounder"]]
    assert deps
    for dep in deps:
        ds = read_icemass(archive / table.loc[dep, "icemass_file"])
        tr = _truth(truth_dir, dep)
        idx = _on_nodes(tr["node_time"].values, ds["time"].values)
        diff = ds["ice_bottom_depth"].values - tr["z_bottom"].values[idx]
        assert np.isnan(diff).mean() < 0.1  # about 3 % of soundings are missing
        assert 0.8 * SIGMA_SOUNDER_M < np.nanstd(diff) < 1.2 * SIGMA_SOUNDER_M


# ---------------------------------------------------------------- positions


@pytest.mark.parametrize("dep", DEPLOYMENTS)
@pytest.mark.parametrize("kind", ["profiles", "icemass"])
def test_positions_match_true_track(kind, dep, archive, truth_dir, table):
    column = "profile_file" if kind == "profiles" else "icemass_file"
    reader = read_profiles if kind == "profiles" else read_icemass
    ds = reader(archive / table.loc[dep, column])
    tr = _truth(truth_dir, dep)
    idx = _on_nodes(tr["node_time"].values, ds["time"].values)
    lat_t, lon_t = tr["latitude"].values[idx], tr["longitude"].values[idx]
    dlat = ds["latitude"].values - lat_t
    dlon = ((ds["longitude"].values - lon_t + 180) % 360 - 180) * np.cos(np.radians(lat_t))
    bad = (np.abs(dlat) > 0.01) | (np.abs(dlon) > 0.01)
    assert bad.sum() == BAD_FIXES[kind]  # the jumps the synthesizer puts in
    for d in (dlat[~bad], dlon[~bad]):
        assert np.median(np.abs(d)) < 3 * SIGMA_FIX_DEG
        assert 0.7 * SIGMA_FIX_DEG < np.std(d) < 1.3 * SIGMA_FIX_DEG


# ---------------------------------------------------------------- shortwave


@pytest.fixture(scope="session")
def shortwave(archive, meta) -> xr.Dataset:
    return open_shortwave([archive / f for f in meta["files"]["shortwave"]]).load()


def test_shortwave_grid_matches_forward_model(shortwave, forward):
    grid = forward["shortwave"]
    np.testing.assert_allclose(shortwave["latitude"].values, grid.lat)
    np.testing.assert_allclose(shortwave["longitude"].values, grid.lon)
    np.testing.assert_array_equal(shortwave["time_bnds"].values[:, 0], grid.start)
    np.testing.assert_array_equal(shortwave["time_bnds"].values[:, 1],
                                  grid.start + np.timedelta64(1, "h"))
    # one month is stored as accumulated energy in float32: W m-2 back to ~1e-4
    np.testing.assert_allclose(shortwave["sw_down"].values, grid.values, rtol=1e-6, atol=1e-3)


@pytest.mark.parametrize("dep", DEPLOYMENTS)
def test_shortwave_at_buoy_matches_truth(dep, archive, truth_dir, table, shortwave):
    tr = _truth(truth_dir, dep)
    sw_true = tr["sw_down"].values
    t0, t1 = tr["interval_start"].values, tr["interval_end"].values
    csv_file = table.loc[dep, "shortwave_file"]
    if isinstance(csv_file, str):
        sw = read_shortwave_csv(archive / csv_file)
        np.testing.assert_array_equal(sw["time_bnds"].values, np.stack([t0, t1], axis=1))
        np.testing.assert_allclose(sw["sw_down"].values, sw_true, atol=1e-9)
        return
    # the truth is the grid, bilinear at the buoy's position at each interval's midpoint
    lat, lon = tr["latitude"].values, tr["longitude"].values
    coords = {"time": t1}
    out = sample_at_tracks(shortwave,
                           xr.DataArray(0.5 * (lat[1:] + lat[:-1]), dims="time", coords=coords),
                           xr.DataArray(0.5 * (lon[1:] + lon[:-1]), dims="time", coords=coords))
    np.testing.assert_allclose(out["sw_down"].values[0], sw_true, atol=0.01)


# ---------------------------------------------------------------- concentration


def test_concentration_matches_forward_model(archive, meta, forward):
    pm = forward["microwave"]
    ci = open_concentration([archive / f for f in meta["files"]["concentration"]]).load()
    np.testing.assert_allclose(ci["x"].values, pm.x)
    np.testing.assert_allclose(ci["y"].values, pm.y[::-1])  # sorted ascending
    np.testing.assert_array_equal(ci["time_bnds"].values[:, 0], pm.day_start)
    expected = np.where(pm.land[None], np.nan, pm.conc)[:, ::-1, :]
    got = ci["sea_ice_area_fraction"].values
    np.testing.assert_array_equal(np.isnan(got), np.isnan(expected))  # land, gaps
    # files in % hold whole percent
    assert np.nanmax(np.abs(got - expected)) <= 0.005 + 1e-6
    months = np.asarray(pm.day_start, "datetime64[M]")
    first = months == months[0]  # the first month is stored as a fraction (float)
    np.testing.assert_allclose(got[first], expected[first], atol=1e-6)


# ---------------------------------------------------------------- radar masks


@pytest.mark.parametrize("dep", DEPLOYMENTS)
def test_mask_fractions_match_truth(dep, archive, truth_dir):
    """Water/valid pixels of the written masks, read back through open_scene, at the
    truth's scene times and positions."""
    tr = _truth(truth_dir, dep)
    scenes = read_scene_table(archive)
    masks = scenes[scenes["content"] == "mask"].set_index("scene_id")
    node_s = tr["node_time"].values.astype("datetime64[ns]").astype("int64")
    radii = tr["radius"].values
    checked = 0
    for j, k in enumerate(tr["scene_index"].values):
        sid = next(s for s in masks.index if s.endswith(f"-{int(k):04d}"))
        t = tr["scene_time"].values[j].astype("datetime64[ns]").astype("int64")
        x = float(np.interp(t, node_s, tr["x"].values))
        y = float(np.interp(t, node_s, tr["y"].values))
        lon = float(np.interp(t, node_s, tr["longitude"].values))
        lat = float(np.interp(t, node_s, tr["latitude"].values))
        with open_scene(archive / masks.loc[sid, "path"], "mask") as sc:
            r_proj = openwater.projected_radius(radii, sc.crs, lon, lat)
            window = openwater.circle_window(sc.transform, sc.shape, x, y, r_proj.max())
            if window is None:
                continue
            stats = openwater.circle_fractions(sc.read_window(*window), window[0].start,
                                               window[1].start, sc.transform, sc.shape, x, y,
                                               r_proj)
        np.testing.assert_allclose(stats.coverage, tr["coverage_scene"].values[j], atol=0.01)
        ok = np.isfinite(tr["f_ow_scene_mask"].values[j]) & np.asarray(stats.accepted)
        np.testing.assert_allclose(np.asarray(stats.f_ow)[ok],
                                   tr["f_ow_scene_mask"].values[j][ok], atol=0.01)
        checked += 1
    assert checked > 10
