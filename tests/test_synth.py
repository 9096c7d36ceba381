"""Tests of the demo synthesizer (floeheat.synth), on the "tiny" size.

Files are checked with netCDF4 / rasterio / csv directly, never through floeheat.io.
"""

from __future__ import annotations

import csv
import hashlib
import json
from dataclasses import replace
from pathlib import Path

import gsw
import netCDF4
import numpy as np
import pyproj
import pytest
import rasterio
from hypothesis import given, settings
from hypothesis import strategies as st

from floeheat.constants import (
    ALBEDO_OPEN_WATER,
    CP0_J_KG_K,
    LATENT_HEAT_FUSION_J_KG,
    MAX_DRIFT_SPEED_M_S,
    RHO_ICE_KG_M3,
    RHO_SNOW_KG_M3,
)
from floeheat.synth import SIZES, SizeSpec, write_archive
from floeheat.synth.ocean import heat_content
from floeheat.synth.scenario import make_scenario
from floeheat.synth.solar import cos_zenith

#: A smaller spec for the tests that write more than one archive.
MICRO = replace(SIZES["tiny"], name="micro", record_days=10.0, window_margin_days=1.0,
                scene_px=120, tile_n=256, scene_every_days=1.5, backscatter_count=2,
                string_spacing_m=0.1, profile_max_dbar=60.0, pm_margin_m=60_000.0)


@pytest.fixture(scope="module")
def tiny(tmp_path_factory):
    root = tmp_path_factory.mktemp("synth") / "archive"
    truth = write_archive(root, seed=1, size="tiny")
    return root, truth, json.loads((truth / "truth.json").read_text())


def _digests(folder: Path) -> dict:
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _rows(path: Path) -> list[dict]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _by_standard_name(ds, name):
    hits = [v for v in ds.variables.values() if getattr(v, "standard_name", None) == name]
    assert hits, f"no variable with standard_name {name}"
    return hits[0]


def _by_role(ds, role):
    hits = [v for v in ds.variables.values() if getattr(v, "role", None) == role]
    assert hits, f"no variable with role {role}"
    return hits[0]


def _times(var) -> np.ndarray:
    t = netCDF4.num2date(var[:], var.units, only_use_cftime_datetimes=False,
                         only_use_python_datetimes=True)
    return np.array(t, dtype="datetime64[ns]")


# ----------------------------------------------------------------------------- sizes

def test_sizes_and_spec():
    assert {"tiny", "demo", "basin"} <= set(SIZES)
    assert SIZES["tiny"].n_deployments == 3 and SIZES["tiny"].n_arrays == 2
    assert 6 <= SIZES["demo"].n_deployments <= 8 and SIZES["demo"].n_arrays == 3
    assert SIZES["basin"].n_deployments >= 100
    assert isinstance(SIZES["basin"].with_scene_px(10000), SizeSpec)


# ----------------------------------------------------------------------------- determinism

def test_same_seed_same_bytes_and_seeds_differ(tmp_path):
    a = write_archive(tmp_path / "a", seed=5, size=MICRO)
    write_archive(tmp_path / "b", seed=5, size=MICRO)
    write_archive(tmp_path / "c", seed=6, size=MICRO)
    da, db, dc = (_digests(tmp_path / k) for k in "abc")
    assert da == db
    assert _digests(a) == _digests(tmp_path / "b.truth")
    differing = [k for k in da if dc.get(k) != da[k]]
    assert len(differing) > 0.8 * len(da)


# ----------------------------------------------------------------------------- layout

def test_truth_outside_archive(tiny):
    root, truth, _ = tiny
    assert truth == root.with_name(root.name + ".truth")
    assert not truth.resolve().is_relative_to(root.resolve())
    assert not any(p.name.startswith("truth") for p in root.rglob("*"))


def test_every_named_file_exists(tiny):
    root, _, meta = tiny
    deps = _rows(root / "deployments.csv")
    assert len(deps) == 3
    assert {d["ice_type"] for d in deps} <= {"first-year", "multiyear"}
    for d in deps:
        for col in ("profile_file", "icemass_file", "shortwave_file"):
            if d[col]:
                assert (root / d[col]).is_file(), d[col]
        assert d["start"] and d["end"]  # tiny sets the window
    assert sum(bool(d["shortwave_file"]) for d in deps) == 1
    scenes = _rows(root / "scenes.csv")
    assert set(scenes[0]) == {"scene_id", "path", "time", "content", "band", "acquisition_id"}
    for s in scenes:
        assert (root / s["path"]).is_file(), s["path"]
    assert {s["content"] for s in scenes} == {"mask", "backscatter"}
    ids = [s["scene_id"] for s in scenes]
    assert len(ids) == len(set(ids))
    for kind in ("shortwave", "concentration"):
        for rel in meta["files"][kind]:
            assert (root / rel).is_file()


# ----------------------------------------------------------------------------- attributes

def test_profile_files_follow_the_format(tiny):
    root, _, meta = tiny
    layouts = set()
    for d in _rows(root / "deployments.csv"):
        path = root / d["profile_file"]
        if path.suffix == ".csv":
            cols = set(_rows(path)[0])
            assert {"profile_id", "time", "latitude", "longitude", "pressure_dbar",
                    "temperature_degC"} <= cols
            assert cols & {"salinity_psu", "conductivity_mS_cm"}
            layouts.add("csv")
            continue
        with netCDF4.Dataset(path) as ds:
            assert ds.featureType == "profile"
            assert _by_standard_name(ds, "sea_water_pressure").units == "dbar"
            assert _by_standard_name(ds, "sea_water_temperature").units == "degC"
            assert _by_standard_name(ds, "latitude").units == "degrees_north"
            assert _by_standard_name(ds, "longitude").units == "degrees_east"
            assert "since" in _by_standard_name(ds, "time").units
            names = {getattr(v, "standard_name", "") for v in ds.variables.values()}
            if "sea_water_electrical_conductivity" in names:
                assert _by_standard_name(ds, "sea_water_electrical_conductivity").units == "S m-1"
            else:
                assert _by_standard_name(ds, "sea_water_practical_salinity").units == "1"
            p = _by_standard_name(ds, "sea_water_pressure")
            if "row_size" in ds.variables:
                assert ds["row_size"].sample_dimension == p.dimensions[0]
                layouts.add("ragged")
            elif p.ndim == 1:
                layouts.add("orthogonal")
            else:
                layouts.add("incomplete")
    assert len(layouts - {"csv"}) >= 2 and "csv" in layouts
    assert "conductivity" in {v["salinity_from"] for v in meta["deployments"].values()}


def test_icemass_files_follow_the_format(tiny):
    root, _, _ = tiny
    kinds = set()
    for d in _rows(root / "deployments.csv"):
        path = root / d["icemass_file"]
        if path.suffix == ".csv":
            cols = list(_rows(path)[0])
            assert cols[:3] == ["time", "latitude", "longitude"]
            depths = [int(c[2:]) for c in cols[3:]]
            assert all(c.startswith("T_") for c in cols[3:]) and min(depths) < 0 < max(depths)
            kinds.add("csv")
            continue
        kinds.add("nc")
        with netCDF4.Dataset(path) as ds:
            t = _by_role(ds, "string_temperature")
            assert t.units == "degC" and t.dimensions == ("time", "sensor")
            z = _by_standard_name(ds, "depth")
            assert z.positive == "down" and z.units == "m"
            assert z.reference in ("initial snow surface", "initial ice surface")
            assert np.all(np.diff(z[:]) > 0.019) and np.all(np.diff(z[:]) < 0.051)
            assert _by_standard_name(ds, "latitude").dimensions == ("time",)
            for role in ("ice_bottom_depth", "heated_temperature_rise"):
                hits = [v for v in ds.variables.values() if getattr(v, "role", "") == role]
                for v in hits:
                    assert v.units in ("m", "K")
    assert kinds == {"csv", "nc"}


def test_gridded_files_follow_the_format(tiny):
    root, _, meta = tiny
    kinds = set()
    for rel in meta["files"]["shortwave"]:
        with netCDF4.Dataset(root / rel) as ds:
            names = {getattr(v, "standard_name", "") for v in ds.variables.values()}
            if "surface_downwelling_shortwave_flux_in_air" in names:
                assert _by_standard_name(ds, "surface_downwelling_shortwave_flux_in_air"
                                         ).units == "W m-2"
                kinds.add("mean")
            else:
                v = _by_standard_name(
                    ds, "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air")
                assert v.units == "J m-2"
                kinds.add("accumulated")
            tb = ds[_by_standard_name(ds, "time").bounds]
            assert tb.shape[1] == 2 and np.allclose(tb[:, 1] - tb[:, 0], 3600.0)
    assert kinds == {"mean", "accumulated"}
    units = set()
    for rel in meta["files"]["concentration"]:
        with netCDF4.Dataset(root / rel) as ds:
            c = _by_standard_name(ds, "sea_ice_area_fraction")
            units.add(c.units)
            gm = ds[c.grid_mapping]
            assert gm.grid_mapping_name == "polar_stereographic"
            assert pyproj.CRS.from_cf(gm.__dict__).to_epsg() == 3413
            assert _by_standard_name(ds, "projection_x_coordinate").units == "m"
            assert "time_bnds" in ds.variables
    assert units == {"1", "%"}


def test_scene_files_are_georeferenced(tiny):
    root, _, _ = tiny
    seen = set()
    for s in _rows(root / "scenes.csv"):
        path = root / s["path"]
        if path.suffix == ".tif":
            with rasterio.open(path) as src:
                assert src.crs.to_epsg() == 3413
                assert src.profile["tiled"] and src.compression is not None
                assert src.tags()["content"] == s["content"]
                assert src.tags()["time_coverage_start"] == s["time"]
                if s["content"] == "mask":
                    assert src.dtypes[0] == "uint8" and src.nodata == 255
                    assert set(np.unique(src.read(1))) <= {0, 1, 255}
                else:
                    pols = s["band"].split()
                    assert list(src.descriptions[:len(pols)]) == pols
                    assert "incidence_angle" in src.descriptions
                    assert src.dtypes[0] == "float32" and src.units[0] == "dB"
            seen.add(("tif", s["content"]))
        else:
            with netCDF4.Dataset(path) as ds:
                assert ds.content == s["content"]
                assert ds["x"].units == "m" and ds["y"].units == "m"
                assert ds["crs"].grid_mapping_name == "polar_stereographic"
                data = [v for v in ds.variables.values() if hasattr(v, "grid_mapping")]
                assert data
                if s["content"] == "backscatter":
                    roles = {v.role for v in data}
                    assert {"sigma0", "incidence_angle", "noise_equivalent_sigma0"} <= roles
                    assert {v.polarisation for v in data if v.role == "sigma0"} == {"HH", "HV"}
            seen.add(("nc", s["content"]))
    assert ("tif", "mask") in seen and ("nc", "mask") in seen
    assert any(k[1] == "backscatter" for k in seen)


# ----------------------------------------------------------------------------- physics

def test_energy_consistency(tiny):
    _, truth, meta = tiny
    for d in meta["deployments"].values():
        assert d["radius_m"] == 15000.0
        assert abs(d["t_season"] - d["transmittance"]) < 0.003
        assert abs(-d["residual_MJ"] / d["sw_in_MJ"] - d["transmittance"]) < 0.003
        assert abs(d["residual_MJ"] - (d["q_ow_MJ"] - d["q_st_MJ"] - d["q_w_MJ"])) < 1e-6
        with netCDF4.Dataset(truth / d["truth_file"]) as ds:
            start = _times(ds["interval_start"])
            end = _times(ds["interval_end"])
            w0 = np.datetime64(d["window_start"][:-1], "ns")
            w1 = np.datetime64(d["window_end"][:-1], "ns")
            inside = (start >= w0) & (end <= w1)
            f = ds["f_ow"][:, 3][inside]
            assert ds["radius"][3] == 15000.0
            sw = ds["sw_down"][:][inside]
            fb, fc = ds["f_b"][:][inside], ds["f_c"][:][inside]
            q_w = np.sum((1 - f) * (fb - fc)) * 3600e-6
            assert q_w == pytest.approx(d["q_w_MJ"], rel=1e-6)
            assert np.sum((1 - f) * sw) * 3600e-6 == pytest.approx(d["sw_in_MJ"], rel=1e-6)
            q_ow = np.sum((1 - ALBEDO_OPEN_WATER) * f * sw) * 3600e-6
            assert q_ow == pytest.approx(d["q_ow_MJ"], rel=1e-6)
            assert np.sum(fb) * 3600e-6 == pytest.approx(d["q_b_MJ"], rel=1e-6)
            node = _times(ds["node_time"])
            zb = ds["z_bottom"][:]
            i0, i1 = np.searchsorted(node, [w0, w1])
            q_b = RHO_ICE_KG_M3 * LATENT_HEAT_FUSION_J_KG * (zb[i0] - zb[i1]) * 1e-6
            assert q_b == pytest.approx(d["q_b_MJ"], rel=1e-9)
            assert -3.0 < fc.min() and fc.max() < 3.0  # conduction, W m-2
            assert 0.0 < d["f_ow_mean"] < 0.3


def _heat_content_test(t, sp, p, lat, lon, draft, z2):
    """Independent H: cp0 * int rho (CT - CT_f) dz, mixed above the first sample."""
    ok = ~np.isnan(t)
    t, sp, p = t[ok], sp[ok], p[ok]
    sa = gsw.SA_from_SP(sp, p, lon, lat)
    ct = gsw.CT_from_t(sa, t, p)
    z = -gsw.z_from_p(p, lat)
    g = gsw.rho(sa, ct, p) * (ct - gsw.CT_freezing(sa, p, 1.0))
    zz = np.concatenate([[draft], z[z < z2], [z2]])
    gg = np.concatenate([[g[0]], g[z < z2], [np.interp(z2, z, g)]])
    return CP0_J_KG_K * np.trapezoid(gg, zz)


def test_storage_from_true_profiles(tiny):
    """Q_st recomputed from the noise-free casts and the string's ice gives the truth."""
    _, truth, meta = tiny
    for d in meta["deployments"].values():
        with netCDF4.Dataset(truth / d["truth_file"]) as ds:
            pt = _times(ds["profile_time"])
            node = _times(ds["node_time"])
            heat = []
            for w in (d["window_start"], d["window_end"]):
                w = np.datetime64(w[:-1], "ns")
                j = int(np.flatnonzero(pt == w)[0])
                k = int(np.flatnonzero(node == w)[0])
                t = ds["temperature"][j].filled(np.nan)
                sp = ds["salinity"][j].filled(np.nan)
                p = np.asarray(ds["pressure"][:], float)
                lat, lon = float(ds["latitude"][k]), float(ds["longitude"][k])
                h_i = float(ds["z_bottom"][k] - ds["z_ice_top"][k])
                h_s = max(float(ds["z_ice_top"][k] - ds["z_snow_top"][k]), 0.0)
                sa0 = gsw.SA_from_SP(sp[0], p[0], lon, lat)
                rho_w = gsw.rho(sa0, gsw.CT_from_t(sa0, t[0], p[0]), p[0])
                draft = (RHO_ICE_KG_M3 * h_i + RHO_SNOW_KG_M3 * h_s) / rho_w
                for z2 in (30.0, 40.0, 55.0):  # insensitive to the bound below 21 m
                    heat.append(_heat_content_test(t, sp, p, lat, lon, draft, z2))
            q_st = (np.array(heat[3:]) - np.array(heat[:3])) * 1e-6
            assert np.allclose(q_st, d["q_st_MJ"], atol=0.3)


def test_masks_match_truth_fraction(tiny):
    """Circle fraction of the written masks at scene times equals the truth f_ow."""
    root, truth, meta = tiny
    scenes = [s for s in _rows(root / "scenes.csv") if s["content"] == "mask"]
    checked = 0
    for d in meta["deployments"].values():
        with netCDF4.Dataset(truth / d["truth_file"]) as ds:
            st = _times(ds["scene_time"])
            cov = ds["coverage_scene"][:, 3]
            f_true = ds["f_ow_scene"][:, 3]
            node = _times(ds["node_time"])
            x, y = ds["x"][:], ds["y"][:]
            lat, lon = ds["latitude"][:], ds["longitude"][:]
        sec = (node - node[0]) / np.timedelta64(1, "s")
        proj = pyproj.Proj("EPSG:3413")
        for j in np.flatnonzero(cov >= 0.999)[:12]:
            s = next(s for s in scenes if np.datetime64(s["time"][:-1], "ns") == st[j])
            tj = (st[j] - node[0]) / np.timedelta64(1, "s")
            bx, by = np.interp(tj, sec, x), np.interp(tj, sec, y)
            k = proj.get_factors(np.interp(tj, sec, lon), np.interp(tj, sec, lat)).meridional_scale
            if s["path"].endswith(".tif"):
                with rasterio.open(root / s["path"]) as src:
                    m = src.read(1)
                    a = src.transform
                    xc = a.c + a.a * (np.arange(src.width) + 0.5)
                    yc = a.f + a.e * (np.arange(src.height) + 0.5)
            else:
                with netCDF4.Dataset(root / s["path"]) as ds:
                    v = _by_role(ds, "ice_water_mask")
                    v.set_auto_maskandscale(False)
                    m = v[:]
                    xc, yc = ds["x"][:], ds["y"][:]
            xs, ys = np.meshgrid(xc, yc)
            inside = (xs - bx) ** 2 + (ys - by) ** 2 <= (15000.0 * k) ** 2
            valid = inside & (m != 255)
            assert valid.sum() == inside.sum()
            f_mask = np.mean(m[valid] == 0)
            assert abs(f_mask - f_true[j]) < 0.01
            checked += 1
    assert checked >= 5


def test_fow_rises_and_hourly_follows_scenes(tiny):
    _, truth, meta = tiny
    d = meta["deployments"]["skua-1"]
    with netCDF4.Dataset(truth / d["truth_file"]) as ds:
        f = ds["f_ow"][:, 3]
        fs = ds["f_ow_scene"][:, 3]
        assert np.all((f >= 0) & (f <= 1))
        assert f.min() >= fs.min() - 1e-9 and f.max() <= fs.max() + 1e-9
        assert np.isfinite(ds["f_ow"][:]).all()


def test_microwave_biased_low_after_melt_onset(tiny):
    root, truth, meta = tiny
    onset = np.datetime64(meta["scenario"]["melt_onset"][:-1], "ns")
    d = meta["deployments"]["skua-1"]
    with netCDF4.Dataset(truth / d["truth_file"]) as ds:
        node = _times(ds["node_time"])
        sec = (node - node[0]) / np.timedelta64(1, "s")
        x, y, f15 = ds["x"][:], ds["y"][:], ds["f_ow"][:, 3]
    bias = []
    for rel in meta["files"]["concentration"]:
        with netCDF4.Dataset(root / rel) as ds:
            c = _by_standard_name(ds, "sea_ice_area_fraction")
            c.set_auto_maskandscale(False)
            vals = c[:].astype(float)
            if c.units == "%":
                vals[np.isin(vals, c.flag_values)] = np.nan
                vals /= 100.0
            vals[(vals < 0) | (vals > 1)] = np.nan
            tb = _times(ds["time"])
            xs, ys = ds["x"][:], ds["y"][:]
        for n, t in enumerate(tb):
            if t < onset + np.timedelta64(6, "D"):
                continue
            ts = (t - node[0]) / np.timedelta64(1, "s")
            i = np.argmin(np.abs(ys - np.interp(ts, sec, y)))
            j = np.argmin(np.abs(xs - np.interp(ts, sec, x)))
            if np.isfinite(vals[n, i, j]) and 0 <= ts <= sec[-1]:
                truth_f = np.interp(ts, sec[:-1] + 1800.0, f15)
                bias.append((1.0 - vals[n, i, j]) - truth_f)
    assert len(bias) > 10
    assert np.mean(bias) > 0.03  # wet surfaces read as water


def test_reported_positions_have_bad_fixes(tiny):
    root, truth, _ = tiny
    with netCDF4.Dataset(root / "icemass" / "skua-1.nc") as ds:
        lat, lon = np.asarray(ds["latitude"][:]), np.asarray(ds["longitude"][:])
        t = np.asarray(ds["time"][:])
    geod = pyproj.Geod(ellps="WGS84")
    _, _, dist = geod.inv(lon[:-1], lat[:-1], lon[1:], lat[1:])
    speed = dist / np.diff(t)
    assert 1 <= np.sum(speed > MAX_DRIFT_SPEED_M_S) <= 12
    assert np.median(speed) < 0.5
    with netCDF4.Dataset(truth / "truth_skua-1.nc") as ds:
        assert 0.02 < ds["u_star"][:].mean() / np.sqrt(5.5e-3) < 0.5


def test_written_profiles_are_truth_plus_noise(tiny):
    root, truth, meta = tiny
    with netCDF4.Dataset(root / "profiles" / "skua-1.nc") as ds, \
            netCDF4.Dataset(truth / "truth_skua-1.nc") as tr:
        t_obs = _by_standard_name(ds, "sea_water_temperature")[:]
        s_obs = _by_standard_name(ds, "sea_water_practical_salinity")[:]
        assert np.abs(t_obs - tr["temperature"][:]).max() < 0.015
        assert np.abs(s_obs - tr["salinity"][:]).max() < 0.02
        # a warm deep layer of older heat below a cold halocline
        p = tr["pressure"][:]
        tt = tr["temperature"][0]
        assert tt[np.argmin(np.abs(p - 105))] > tt[np.argmin(np.abs(p - 40))] + 0.5
    # conductivity deployment: SP recovered with gsw within noise
    dep = next(k for k, v in meta["deployments"].items() if v["salinity_from"] == "conductivity")
    with netCDF4.Dataset(root / "profiles" / f"{dep}.nc") as ds, \
            netCDF4.Dataset(truth / f"truth_{dep}.nc") as tr:
        c = np.asarray(_by_standard_name(ds, "sea_water_electrical_conductivity")[:]) * 10.0
        t = np.asarray(_by_standard_name(ds, "sea_water_temperature")[:])
        p = np.asarray(_by_standard_name(ds, "sea_water_pressure")[:], float)
        sp = gsw.SP_from_C(c, t, p)
        n = ds["row_size"][:]
        first = sp[: n[0]]
        assert np.abs(first - tr["salinity"][0, : n[0]]).max() < 0.02


def test_string_has_dead_sensor_spikes_and_ocean_near_tml(tiny):
    root, truth, _ = tiny
    with netCDF4.Dataset(root / "icemass" / "skua-1.nc") as ds, \
            netCDF4.Dataset(truth / "truth_skua-1.nc") as tr:
        obs = _by_role(ds, "string_temperature")[:].filled(np.nan)
        dead = int(tr["string_temperature"].dead_sensor_index)
        assert np.ptp(obs[:, dead]) == 0.0
        true = tr["string_temperature"][:].filled(np.nan)
        err = np.abs(obs - true)
        err[:, dead] = 0
        assert 1 <= np.sum(err > 3.0) <= 50
        assert np.median(err) < 0.03
        # the deepest sensor sits in the mixed layer
        t_ml = np.asarray(tr["t_ml"][:])
        assert np.abs(np.median(obs[:, -1]) - np.median(t_ml)) < 0.05
        zb = _by_role(ds, "ice_bottom_depth")[:]
        assert zb.compressed()[-1] < zb.compressed()[0]  # basal melt raises the bottom


def test_scenes_have_gaps_and_partial_circles(tiny):
    root, truth, meta = tiny
    cov = []
    for d in meta["deployments"].values():
        with netCDF4.Dataset(truth / d["truth_file"]) as ds:
            cov.extend(ds["coverage_scene"][:, 3].tolist())
        assert d["n_scenes_served"] >= 10
    cov = np.array(cov)
    assert np.any((cov >= 0.5) & (cov < 0.999))  # partly covered circles still serve
    assert np.any(cov >= 0.999)
    gaps = 0
    for s in _rows(root / "scenes.csv"):
        if s["content"] == "mask" and s["path"].endswith(".tif"):
            with rasterio.open(root / s["path"]) as src:
                gaps += bool((src.read(1) == 255).any())
    assert gaps >= 2
    assert set(meta["backscatter_mask_scene"].values()) <= {
        s["scene_id"] for s in _rows(root / "scenes.csv") if s["content"] == "mask"}


def test_demo_scenario_mixes_windows_and_ice_types():
    sc = make_scenario(1, SIZES["demo"], "north")
    assert {d.ice_type for d in sc.deployments} == {"first-year", "multiyear"}
    explicit = [d.window_start is not None for d in sc.deployments]
    assert any(explicit) and not all(explicit)
    assert len({d.transmittance for d in sc.deployments}) == len(sc.deployments)
    assert {d.profile_layout for d in sc.deployments} == {"orthogonal", "incomplete",
                                                          "ragged", "csv"}


def test_refuses_to_overwrite_other_folders(tmp_path):
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "keep.txt").write_text("user data")
    with pytest.raises(FileExistsError):
        write_archive(tmp_path / "data", size=MICRO)
    assert (tmp_path / "data" / "keep.txt").is_file()


@settings(max_examples=25, deadline=None)
@given(excess=st.floats(0.0, 1.0), draft=st.floats(0.5, 3.0), sa=st.floats(28.0, 33.0))
def test_heat_content_of_a_uniform_excess(excess, draft, sa):
    """A uniform excess over freezing gives cp0 * rho * excess * (z2 - draft)."""
    p = np.arange(4.0, 60.0)
    sa_p = np.full(p.shape, sa)
    ct = gsw.CT_freezing(sa_p, p, 1.0) + excess
    h = heat_content(sa_p, ct, p, 80.0, draft, z2_m=40.0)
    rho = gsw.rho(sa_p, ct, p)[:37].mean()
    assert h == pytest.approx(CP0_J_KG_K * rho * excess * (40.0 - draft), rel=2e-3, abs=1.0)


# ----------------------------------------------------------------------------- references

@pytest.mark.parametrize("when, zenith_deg", [
    # pvlib 0.16.1 spa_python apparent zenith at 75N 150W (check-values.md section 7)
    ("2019-06-21T12:00", 79.683569),
    ("2019-08-15T00:00", 62.788288),
])
def test_solar_zenith_against_spa(when, zenith_deg):
    z = np.degrees(np.arccos(cos_zenith(np.array([when], "datetime64[ns]"), 75.0, -150.0)))
    assert abs(z[0] - zenith_deg) < 0.5


def test_solar_zenith_against_pvlib():
    pvlib = pytest.importorskip("pvlib")
    import pandas as pd

    times = pd.date_range("2025-06-01", "2025-06-03", freq="3h", tz="UTC")
    # pvlib.solarposition.get_solarposition (NREL SPA), reference implementation
    ref = pvlib.solarposition.get_solarposition(times, 82.0, -140.0)["zenith"].to_numpy()
    ours = np.degrees(np.arccos(cos_zenith(times.tz_localize(None).to_numpy(), 82.0, -140.0)))
    assert np.abs(ours - ref).max() < 0.5


def test_gsw_round_trips():
    sa = np.array([29.5, 31.0, 34.8])
    p = np.array([5.0, 30.0, 120.0])
    ct = np.array([-1.55, -1.6, -0.6])
    t = gsw.t_from_CT(sa, ct, p)
    assert np.allclose(gsw.CT_from_t(sa, t, p), ct, atol=1e-10)
    sp = gsw.SP_from_SA(sa, p, -140.0, 81.0)
    assert np.allclose(gsw.SA_from_SP(sp, p, -140.0, 81.0), sa, atol=1e-10)
    c = gsw.C_from_SP(sp, t, p)
    assert np.allclose(gsw.SP_from_C(c, t, p), sp, atol=1e-8)
    # TEOS-10 check value: CT_freezing(35.16504, 0, 1) (check-values.md section 1)
    assert gsw.CT_freezing(35.16504, 0.0, 1.0) == pytest.approx(-1.918431173806, abs=1e-10)


# ----------------------------------------------------------------------------- south

def test_south_hemisphere(tmp_path):
    truth = write_archive(tmp_path / "s", seed=2, size=MICRO, hemisphere="south")
    meta = json.loads((truth / "truth.json").read_text())
    assert meta["scenario"]["crs"] == "EPSG:3976"
    assert meta["scenario"]["season_start"].startswith("2025-11-01")
    assert meta["scenario"]["season_end"].startswith("2026-04-01")
    for d in meta["deployments"].values():
        assert abs(d["t_season"] - d["transmittance"]) < 0.003
    s = next(r for r in _rows(tmp_path / "s" / "scenes.csv") if r["path"].endswith(".tif"))
    with rasterio.open(tmp_path / "s" / s["path"]) as src:
        assert src.crs.to_epsg() == 3976
    with netCDF4.Dataset(truth / "truth_skua-1.nc") as ds:
        assert ds["latitude"][:].max() < -60
