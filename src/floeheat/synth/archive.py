"""Run the forward model and write the archive (format version 1) and its truth.

Truth layout (``<outdir>.truth/``)
----------------------------------
``truth.json``
    ``truth_format``, ``archive_format_version``;
    ``scenario``: name, hemisphere, seed, size, crs, season_start/end, melt_onset,
    records_start/end;
    ``conventions``: truth_radius_m, radii_m, energies (how totals are summed),
    albedo_open_water, bulk_flux (formula, c_h, rho0_kg_m3, cp0_J_kg_K, drag_law, Cd),
    heat_content (z2_m, constant_below_m, rule, draft, nstm_share_of_solar), f_ow (the
    circle rule), backscatter_truth, microwave_wet_bias_max;
    ``backscatter_mask_scene``: backscatter scene_id -> the mask scene_id of the same
    acquisition (its truth);
    ``files``: shortwave and concentration files, bathymetry;
    ``deployments``: per deployment_id: array_id, ice_type, transmittance (prescribed),
    radius_m, window_start, window_end, window_from, sw_in_MJ, q_ow_MJ, q_st_MJ, q_b_MJ,
    q_c_MJ, q_w_MJ, residual_MJ, t_season, f_ow_mean, n_intervals, profile_layout,
    salinity_from, icemass_layout, string_reference, sounder, heated, shortwave_file,
    truth_file, n_scenes_served.
``truth_<deployment_id>.nc``
    dims node (hourly instants), interval (hours between), radius (2, 4, 8, 15 km),
    scene, profile, level, string_time, sensor. Interval series: f_ow(interval, radius),
    sw_down, f_w, f_c, f_b, q_in, u_star, interval_start/end. Node series: node_time,
    heat_content, z_bottom, z_ice_top, z_snow_top, draft, t_ml, ml_excess, latitude,
    longitude, x, y. Scene-time fractions: scene_time, scene_index, f_ow_scene (whole
    circle, noise-free), f_ow_scene_mask (valid pixels of the written mask),
    coverage_scene. True casts: profile_time, pressure, temperature, salinity,
    profile_heat_content, profile_draft. True string: string_time, sensor_depth,
    string_temperature (attribute dead_sensor_index).

Scenes are rendered on forked worker processes (``FLOEHEAT_SYNTH_WORKERS``, default 2;
1 runs everything in this process); the bytes written do not depend on it.
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import gsw
import numpy as np

from floeheat.constants import (
    ALBEDO_OPEN_WATER,
    BULK_HEAT_EXCHANGE_CH,
    CP0_J_KG_K,
    LATENT_HEAT_FUSION_J_KG,
    RADIUS_DEFAULT_M,
    RADIUS_SWEEP_M,
    RHO0_KG_M3,
    RHO_ICE_KG_M3,
)

from . import gridded, icefield, icemass, ocean
from .drift import make_tracks, reported_fixes
from .scenario import (
    DRAG_COEFFICIENT,
    SOLAR_NSTM_SHARE,
    TRUTH_Z2_M,
    Z_CONSTANT_M,
    Scenario,
    make_scenario,
    rng_for,
)
from .sizes import SizeSpec, resolve_size
from .writers import (
    TIME_UNITS,
    cf_grid_mapping,
    encode_time,
    iso,
    write_csv,
    write_csv_table,
    write_geotiff,
    write_netcdf,
)

__all__ = ["write_archive", "truth_dir_for"]

HOUR = np.timedelta64(1, "h")
#: Worker processes for scene work (the output does not depend on it).
_N_WORKERS = max(1, int(os.environ.get("FLOEHEAT_SYNTH_WORKERS", "2")))
#: State inherited by forked workers (set just before a pool starts).
_STATE: dict = {}


def _call(item):
    return _STATE["func"](item)


def _parallel_map(func, items: list) -> list:
    """``[func(x) for x in items]``, in order, on forked worker processes when possible.

    Each item draws from its own seeded generator, so results do not depend on the
    number of workers or the order they finish in.
    """
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor

    if len(items) < 8 or _N_WORKERS < 2 or "fork" not in mp.get_all_start_methods():
        return [func(x) for x in items]
    _STATE["func"] = func
    try:
        with ProcessPoolExecutor(_N_WORKERS, mp_context=mp.get_context("fork")) as pool:
            return list(pool.map(_call, items, chunksize=max(1, len(items) // 32)))
    finally:
        _STATE.clear()
RADII = np.array(RADIUS_SWEEP_M, float)
I_TRUTH = int(np.argmin(np.abs(RADII - RADIUS_DEFAULT_M)))


def truth_dir_for(outdir: Path) -> Path:
    """The truth folder beside an archive: ``<outdir>.truth``.

    Examples
    --------
    >>> truth_dir_for(Path("/tmp/demo")).as_posix()
    '/tmp/demo.truth'
    """
    outdir = Path(outdir)
    return outdir.with_name(outdir.name + ".truth")


def _time_var(name, dim, t, extra=None):
    attrs = {"standard_name": "time", "units": TIME_UNITS, "calendar": "standard", "axis": "T"}
    attrs.update(extra or {})
    return (name, (dim,), encode_time(t), attrs, {"dtype": "f8"})


# --------------------------------------------------------------------------- open water

def _scene_fractions(sc: Scenario, tracks, field_, plans):
    """Circle fractions at every scene time for every deployment it reaches."""
    ext = sc.size.scene_px * sc.size.scene_res_m
    rmax = RADII.max() * 1.1

    def one(item):
        s_idx, p = item
        found = []
        for i, d in enumerate(sc.deployments):
            x, y = tracks.position_at(i, p.time)
            if not (p.x0_m - rmax < x < p.x0_m + ext + rmax and
                    p.y0_m - ext - rmax < y < p.y0_m + rmax):
                continue
            lon, lat = _lonlat(sc, tracks, i, p.time)
            k = icefield.scale_factor(sc.crs, lon, lat)
            fr = icefield.circle_fractions(field_, p, x, y, k, RADII)
            if fr["coverage"].max() <= 0:
                continue
            fr.update(scene=s_idx, time=p.time, x=x, y=y, k=k)
            found.append((d.deployment_id, fr))
        return found

    out = {d.deployment_id: [] for d in sc.deployments}
    for s_idx, found in enumerate(_parallel_map(one, list(enumerate(plans)))):
        for dep_id, fr in found:
            out[dep_id].append(fr)
            plans[s_idx].served[dep_id] = fr
    return out


def _lonlat(sc, tracks, i, t):
    s = (np.datetime64(t, "ns") - tracks.time[0]) / np.timedelta64(1, "s")
    tt = (tracks.time - tracks.time[0]) / np.timedelta64(1, "s")
    return float(np.interp(s, tt, tracks.lon_deg[i])), float(np.interp(s, tt, tracks.lat_deg[i]))


def _hourly_fow(node_time, nodes):
    """f_ow per interval (mid-point) and radius: linear between served scenes."""
    mid = node_time[:-1] + HOUR // 2
    s_mid = encode_time(mid)
    out = np.full((mid.size, RADII.size), np.nan)
    for r in range(RADII.size):
        pts = [(encode_time(n["time"]), n["f_true"][r]) for n in nodes
               if n["coverage"][r] >= icefield.COVERAGE_THRESHOLD]
        if pts:
            ts, vs = np.array(pts).T
            order = np.argsort(ts)
            out[:, r] = np.interp(s_mid, ts[order], vs[order])
    return out


# --------------------------------------------------------------------------- writers

def _write_profiles(root: Path, sc: Scenario, dep, oi, tracks, i_dep, truth):
    size = sc.size
    rng = rng_for(sc.seed, "profiles", sc.hemisphere, dep.deployment_id)
    k0 = int((dep.record_start - sc.sim_start) / HOUR)
    k1 = int((dep.record_end - sc.sim_start) / HOUR)
    nodes = np.arange(k0, k1 + 1, size.profile_step_h)
    keep = rng.random(nodes.size) > 0.04
    keep[[0, -1]] = True
    for w in (dep.window_start, dep.window_end):
        if w is not None:
            keep[nodes == int((w - sc.sim_start) / HOUR)] = True
    nodes = nodes[keep]
    p = np.arange(ocean.P_TOP_DBAR, size.profile_max_dbar + 0.5, 1.0)
    lat_t = tracks.lat_deg[i_dep, nodes]
    lon_t = tracks.lon_deg[i_dep, nodes]
    prof = ocean.true_profiles(sc, dep, oi, nodes, lat_t, lon_t, p)
    t_obs = np.round(prof["t"] + rng.normal(0, 0.002, prof["t"].shape), 4)
    sp_obs = np.round(prof["sp"] + rng.normal(0, 0.003, prof["sp"].shape), 4)
    n_lev = np.full(nodes.size, p.size)
    if dep.profile_layout != "orthogonal":
        short = rng.random(nodes.size) < 0.2
        short[[0, -1]] = False
        n_lev[short] = rng.integers(int(0.4 * p.size), p.size, short.sum())
    lon_r, lat_r = reported_fixes(rng, lon_t, lat_t, n_bad=2)
    times = sc.sim_start + nodes * HOUR
    truth.update(profile_time=times, profile_pressure=p, profile_t=prof["t"],
                 profile_sp=prof["sp"], profile_heat=prof["heat"], profile_draft=prof["draft"],
                 profile_levels=n_lev, profile_node=nodes)
    cond = dep.salinity_from == "conductivity"
    c_obs = np.round(gsw.C_from_SP(sp_obs, t_obs, p) / 10.0, 5)  # mS cm-1 -> S m-1

    if dep.profile_layout == "csv":
        rel = f"profiles/{dep.deployment_id}.csv"
        sel = np.arange(p.size)[None, :] < n_lev[:, None]
        j_idx = np.broadcast_to(np.arange(nodes.size)[:, None], sel.shape)[sel]
        write_csv_table(root / rel, {
            "profile_id": j_idx + 1,
            "time": np.array([iso(t) for t in times])[j_idx],
            "latitude": np.char.mod("%.6f", lat_r[j_idx]),
            "longitude": np.char.mod("%.6f", lon_r[j_idx]),
            "pressure_dbar": np.char.mod("%.1f", np.broadcast_to(p, sel.shape)[sel]),
            "temperature_degC": t_obs[sel],
            "conductivity_mS_cm" if cond else "salinity_psu":
                (c_obs * 10.0)[sel] if cond else sp_obs[sel],
        })
        return rel

    rel = f"profiles/{dep.deployment_id}.nc"
    t_attrs = {"standard_name": "sea_water_temperature", "units": "degC",
               "long_name": "in-situ sea water temperature (ITS-90)"}
    s_attrs = {"standard_name": "sea_water_practical_salinity", "units": "1",
               "long_name": "practical salinity (PSS-78)"}
    c_attrs = {"standard_name": "sea_water_electrical_conductivity", "units": "S m-1",
               "long_name": "electrical conductivity"}
    p_attrs = {"standard_name": "sea_water_pressure", "units": "dbar", "positive": "down",
               "axis": "Z", "long_name": "sea water pressure"}
    per_prof = [
        _time_var("time", "profile", times),
        ("latitude", ("profile",), lat_r, {"standard_name": "latitude",
                                           "units": "degrees_north"}),
        ("longitude", ("profile",), lon_r, {"standard_name": "longitude",
                                            "units": "degrees_east"}),
        ("profile_id", ("profile",), np.arange(1, nodes.size + 1, dtype=np.int32),
         {"cf_role": "profile_id", "long_name": "cast number"}),
    ]
    gattrs = {"Conventions": "CF-1.8", "featureType": "profile",
              "title": f"under-ice CTD profiles, deployment {dep.deployment_id}",
              "deployment_id": dep.deployment_id}
    sal_name, sal_data, sal_attrs = ("conductivity", c_obs, c_attrs) if cond else \
        ("salinity", sp_obs, s_attrs)
    f4 = {"dtype": "f4", "fill_value": np.float32(np.nan)}
    f8 = {"dtype": "f4", "fill_value": np.float32(np.nan)}
    if dep.profile_layout == "orthogonal":
        coords = "time latitude longitude pressure"
        variables = per_prof + [
            ("pressure", ("level",), p, p_attrs, {"dtype": "f4"}),
            ("temperature", ("profile", "level"), t_obs, {**t_attrs, "coordinates": coords}, f8),
            (sal_name, ("profile", "level"), sal_data, {**sal_attrs, "coordinates": coords}, f8),
        ]
        write_netcdf(root / rel, {"profile": nodes.size, "level": p.size}, variables, gattrs)
    elif dep.profile_layout == "incomplete":
        mask = np.arange(p.size)[None, :] >= n_lev[:, None]
        pp = np.where(mask, np.nan, p[None, :])
        coords = "time latitude longitude pressure"
        variables = per_prof + [
            ("pressure", ("profile", "obs"), pp, p_attrs, f4),
            ("temperature", ("profile", "obs"), np.where(mask, np.nan, t_obs),
             {**t_attrs, "coordinates": coords}, f8),
            (sal_name, ("profile", "obs"), np.where(mask, np.nan, sal_data),
             {**sal_attrs, "coordinates": coords}, f8),
        ]
        write_netcdf(root / rel, {"profile": nodes.size, "obs": p.size}, variables, gattrs)
    else:  # contiguous ragged
        sel = np.arange(p.size)[None, :] < n_lev[:, None]
        pp = np.broadcast_to(p, t_obs.shape)[sel]
        coords = "time latitude longitude pressure"
        variables = per_prof + [
            ("row_size", ("profile",), n_lev.astype(np.int32),
             {"long_name": "number of samples in this profile", "sample_dimension": "obs"}),
            ("pressure", ("obs",), pp, p_attrs, {"dtype": "f4"}),
            ("temperature", ("obs",), t_obs[sel], {**t_attrs, "coordinates": coords},
             {"dtype": "f4"}),
            (sal_name, ("obs",), sal_data[sel], {**sal_attrs, "coordinates": coords},
             {"dtype": "f4"}),
        ]
        write_netcdf(root / rel, {"profile": nodes.size, "obs": int(sel.sum())}, variables,
                     gattrs)
    return rel


def _write_icemass(root: Path, sc: Scenario, dep, oi, tracks, i_dep, truth):
    size = sc.size
    rng = rng_for(sc.seed, "icemass", sc.hemisphere, dep.deployment_id)
    k0 = int((dep.string_start - sc.sim_start) / HOUR)
    k1 = int((dep.string_end - sc.sim_start) / HOUR)
    nodes = np.arange(k0, k1 + 1, size.string_step_h)
    depth = icemass.sensor_depths(dep, size.string_spacing_m)
    true_t = icemass.string_truth(oi, nodes, depth)
    csv_layout = dep.icemass_layout == "csv"
    obs, dead = icemass.string_readings(rng, true_t, dead="nan" if csv_layout else "constant")
    lon_r, lat_r = reported_fixes(rng, tracks.lon_deg[i_dep, nodes],
                                  tracks.lat_deg[i_dep, nodes], n_bad=3)
    times = sc.sim_start + nodes * HOUR
    truth.update(string_time=times, string_depth=depth, string_t=true_t, string_dead=dead)
    if csv_layout:
        rel = f"icemass/{dep.deployment_id}.csv"
        cols = {"time": [iso(t) for t in times], "latitude": np.char.mod("%.6f", lat_r),
                "longitude": np.char.mod("%.6f", lon_r)}
        for k, z in enumerate(depth):
            cols[f"T_{int(round(z * 100))}"] = obs[:, k]
        write_csv_table(root / rel, cols)
        return rel
    rel = f"icemass/{dep.deployment_id}.nc"
    variables = [
        _time_var("time", "time", times),
        ("latitude", ("time",), lat_r, {"standard_name": "latitude", "units": "degrees_north"}),
        ("longitude", ("time",), lon_r, {"standard_name": "longitude", "units": "degrees_east"}),
        ("depth", ("sensor",), depth, {"standard_name": "depth", "units": "m", "positive": "down",
                                       "reference": dep.reference, "axis": "Z",
                                       "long_name": f"sensor depth below the {dep.reference}"}),
        ("temperature", ("time", "sensor"), obs,
         {"role": "string_temperature", "units": "degC",
          "long_name": "thermistor string temperature (air, snow, ice, ocean)",
          "coordinates": "time depth"}, {"dtype": "f4", "fill_value": np.float32(np.nan)}),
    ]
    if dep.sounder:
        zb = oi.z_bottom_m[nodes] + rng.normal(0, 0.005, nodes.size)
        zb[rng.random(nodes.size) < 0.03] = np.nan
        variables.append(("ice_bottom_depth", ("time",), np.round(zb, 4),
                          {"role": "ice_bottom_depth", "units": "m", "positive": "down",
                           "reference": dep.reference,
                           "long_name": "ice bottom position from the under-ice sounder"},
                          {"dtype": "f4", "fill_value": np.float32(np.nan)}))
    if dep.heated:
        variables.append(("heated_temperature_rise", ("time", "sensor"),
                          icemass.heated_rise(rng, oi, nodes, depth),
                          {"role": "heated_temperature_rise", "units": "K",
                           "long_name": "temperature rise after the daily heating pulse"},
                          {"dtype": "f4", "fill_value": np.float32(np.nan)}))
    write_netcdf(root / rel, {"time": nodes.size, "sensor": depth.size}, variables,
                 {"Conventions": "CF-1.8", "reference": dep.reference,
                  "title": f"ice mass-balance thermistor string, deployment {dep.deployment_id}",
                  "deployment_id": dep.deployment_id})
    return rel


def _month_groups(times):
    months = np.asarray(times, "datetime64[M]")
    return [(m, np.flatnonzero(months == m)) for m in np.unique(months)]


def _write_shortwave(root: Path, sc: Scenario, grid) -> list[str]:
    files = []
    end = grid.start + HOUR
    groups = _month_groups(grid.start)
    acc_month = groups[1][0] if len(groups) > 1 else None
    for m, idx in groups:
        accumulated = m == acc_month
        rel = f"shortwave/sw_{str(m).replace('-', '')}{'_accum' if accumulated else ''}.nc"
        bnds = np.stack([encode_time(grid.start[idx]), encode_time(end[idx])], axis=1)
        if accumulated:
            var = ("ssrd", ("time", "latitude", "longitude"), grid.values[idx] * 3600.0,
                   {"standard_name":
                    "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air",
                    "units": "J m-2", "cell_methods": "time: sum",
                    "long_name": "surface solar radiation downwards, accumulated over the hour"},
                   {"dtype": "f4", "chunks": (24, grid.lat.size, grid.lon.size)})
        else:
            var = ("rsds", ("time", "latitude", "longitude"), grid.values[idx],
                   {"standard_name": "surface_downwelling_shortwave_flux_in_air",
                    "units": "W m-2", "cell_methods": "time: mean",
                    "long_name": "surface downwelling shortwave, hourly mean"},
                   {"dtype": "f4", "chunks": (24, grid.lat.size, grid.lon.size)})
        variables = [
            _time_var("time", "time", end[idx], {"bounds": "time_bnds"}),
            ("time_bnds", ("time", "nv"), bnds, {"units": TIME_UNITS}, {"dtype": "f8"}),
            ("latitude", ("latitude",), grid.lat, {"standard_name": "latitude",
                                                   "units": "degrees_north", "axis": "Y"}),
            ("longitude", ("longitude",), grid.lon, {"standard_name": "longitude",
                                                     "units": "degrees_east", "axis": "X"}),
            var,
        ]
        write_netcdf(root / rel, {"time": idx.size, "nv": 2, "latitude": grid.lat.size,
                                  "longitude": grid.lon.size}, variables,
                     {"Conventions": "CF-1.8",
                      "title": "synthetic reanalysis-like downwelling shortwave"})
        files.append(rel)
    return files


def _write_concentration(root: Path, sc: Scenario, pm) -> list[str]:
    files = []
    gm = cf_grid_mapping(sc.crs)
    for n, (m, idx) in enumerate(_month_groups(pm.day_start)):
        rel = f"concentration/pm_{str(m).replace('-', '')}.nc"
        start = pm.day_start[idx]
        bnds = np.stack([encode_time(start), encode_time(start + np.timedelta64(1, "D"))], 1)
        c = pm.conc[idx]
        common = {"standard_name": "sea_ice_area_fraction", "grid_mapping": "crs",
                  "long_name": "sea-ice concentration from passive microwave"}
        if n % 2 == 0:
            var = ("sea_ice_concentration", ("time", "y", "x"), c,
                   {**common, "units": "1", "valid_min": 0.0, "valid_max": 1.0,
                    "comment": "1.2 marks land; NaN marks missing data"},
                   {"dtype": "f4", "fill_value": np.float32(np.nan)})
        else:
            pct = np.where(np.isnan(c), 255, np.where(pm.land[None], 254, np.round(c * 100)))
            var = ("sea_ice_concentration", ("time", "y", "x"), pct.astype(np.uint8),
                   {**common, "units": "%", "valid_range": np.array([0, 100], np.uint8),
                    "flag_values": np.array([254, 255], np.uint8),
                    "flag_meanings": "land missing"}, {"dtype": "u1"})
        variables = [
            _time_var("time", "time", start + np.timedelta64(12, "h"), {"bounds": "time_bnds"}),
            ("time_bnds", ("time", "nv"), bnds, {"units": TIME_UNITS}, {"dtype": "f8"}),
            ("x", ("x",), pm.x, {"standard_name": "projection_x_coordinate", "units": "m",
                                 "axis": "X"}),
            ("y", ("y",), pm.y, {"standard_name": "projection_y_coordinate", "units": "m",
                                 "axis": "Y"}),
            ("crs", (), np.int32(0), gm, {"dtype": "i4"}),
            var,
        ]
        write_netcdf(root / rel, {"time": idx.size, "nv": 2, "y": pm.y.size, "x": pm.x.size},
                     variables, {"Conventions": "CF-1.8",
                                 "title": "synthetic daily passive-microwave concentration"})
        files.append(rel)
    rel = "bathymetry/sea_floor_depth.nc"
    write_netcdf(root / rel, {"y": pm.y.size, "x": pm.x.size}, [
        ("x", ("x",), pm.x, {"standard_name": "projection_x_coordinate", "units": "m"}),
        ("y", ("y",), pm.y, {"standard_name": "projection_y_coordinate", "units": "m"}),
        ("crs", (), np.int32(0), gm, {"dtype": "i4"}),
        ("depth", ("y", "x"), pm.depth_m, {"standard_name": "sea_floor_depth_below_geoid",
                                           "units": "m", "positive": "down",
                                           "grid_mapping": "crs"},
         {"dtype": "f4", "fill_value": np.float32(np.nan)}),
    ], {"Conventions": "CF-1.8", "title": "synthetic sea-floor depth"})
    return files


_BS_BANDS = ["HH", "HV", "incidence_angle", "noise_equivalent_sigma0_HH",
             "noise_equivalent_sigma0_HV"]
_BS_UNITS = ["dB", "dB", "degree", "dB", "dB"]


def _scene_nc(path, sc, plan, variables_2d, content):
    xc, yc = plan.centres()
    ch = (min(512, plan.npx), min(512, plan.npx))
    variables = [
        ("x", ("x",), xc, {"standard_name": "projection_x_coordinate", "units": "m", "axis": "X"}),
        ("y", ("y",), yc, {"standard_name": "projection_y_coordinate", "units": "m", "axis": "Y"}),
        ("crs", (), np.int32(0), cf_grid_mapping(sc.crs), {"dtype": "i4"}),
    ]
    for name, data, attrs, opts in variables_2d:
        variables.append((name, ("y", "x"), data, {**attrs, "grid_mapping": "crs"},
                          {**opts, "chunks": ch}))
    write_netcdf(path, {"y": plan.npx, "x": plan.npx}, variables,
                 {"Conventions": "CF-1.8", "content": content,
                  "time_coverage_start": iso(plan.time), "scene_id": plan.scene_id})


def _bs_var(name, data):
    if name in ("HH", "HV"):
        attrs = {"standard_name": "surface_backwards_scattering_coefficient_of_radar_wave",
                 "units": "dB", "role": "sigma0", "polarisation": name,
                 "long_name": f"calibrated sigma0, {name}"}
    elif name == "incidence_angle":
        attrs = {"units": "degree", "role": "incidence_angle",
                 "long_name": "incidence angle at the ground"}
    else:
        attrs = {"units": "dB", "role": "noise_equivalent_sigma0",
                 "polarisation": name.rsplit("_", 1)[1],
                 "long_name": f"noise floor, {name.rsplit('_', 1)[1]}"}
    return (name, data, attrs, {"dtype": "f4", "fill_value": np.float32(np.nan)})


def _write_one_scene(root: Path, sc: Scenario, field_, p, content: str = "mask"
                     ) -> tuple[list, dict]:
    rows = []
    bs_truth = {}
    mask = icefield.render_mask(field_, p)
    kind = p.backscatter
    tags = {"time_coverage_start": iso(p.time), "content": "mask", "scene_id": p.scene_id,
            "mask_codes": "0 open water, 1 ice, 255 no data"}
    if content == "backscatter":          # the acquisition only as backscatter
        kind = kind or ("nc" if p.fmt == "nc" else "tif")
    elif p.fmt == "nc":
        rel = f"scenes/masks/{p.scene_id}.nc"
        _scene_nc(root / rel, sc, p, [(
            "ice_water_mask", mask,
            {"long_name": "classified open water / sea ice", "role": "ice_water_mask",
             "flag_values": np.array([0, 1, 255], np.uint8),
             "flag_meanings": "open_water sea_ice no_data"}, {"dtype": "u1"})], "mask")
    else:
        rel = f"scenes/masks/{p.scene_id}.tif"
        write_geotiff(root / rel, [mask], sc.crs, p.x0_m, p.y0_m, p.res_m,
                      ["ice_water_mask"], tags, nodata=255)
    if content != "backscatter":
        rows.append([p.scene_id, rel, iso(p.time), "mask", "", ""])
    if not kind:
        return rows, bs_truth
    rng = rng_for(sc.seed, "backscatter", sc.hemisphere, p.scene_id)
    bands = icefield.backscatter_from_mask(rng, field_, p, mask)
    btags = {**tags, "content": "backscatter"}
    btags.pop("mask_codes")
    if kind == "split":
        acq = f"{p.scene_id}-acq"
        for pol in ("HH", "HV"):
            sid = f"{p.scene_id}-{pol.lower()}"
            rel = f"scenes/backscatter/{sid}.tif"
            names = [pol, "incidence_angle", f"noise_equivalent_sigma0_{pol}"]
            write_geotiff(root / rel, [bands[n] for n in names], sc.crs, p.x0_m, p.y0_m,
                          p.res_m, names, {**btags, "scene_id": sid}, nodata=np.nan,
                          units=["dB", "degree", "dB"])
            rows.append([sid, rel, iso(p.time), "backscatter", pol, acq])
            bs_truth[sid] = p.scene_id
        return rows, bs_truth
    sid = f"{p.scene_id}-bs"
    if kind == "nc":
        rel = f"scenes/backscatter/{sid}.nc"
        _scene_nc(root / rel, sc, p, [_bs_var(n, bands[n]) for n in _BS_BANDS], "backscatter")
    else:
        rel = f"scenes/backscatter/{sid}.tif"
        write_geotiff(root / rel, [bands[n] for n in _BS_BANDS], sc.crs, p.x0_m, p.y0_m,
                      p.res_m, _BS_BANDS, {**btags, "scene_id": sid}, nodata=np.nan,
                      units=_BS_UNITS)
    rows.append([sid, rel, iso(p.time), "backscatter", "HH HV", ""])
    bs_truth[sid] = p.scene_id
    return rows, bs_truth


def _write_scenes(root: Path, sc: Scenario, field_, plans, content: str = "mask"
                  ) -> tuple[list, dict]:
    """Write every scene (each with its own generator: bytes independent of workers)."""
    rows, bs_truth = [], {}
    for r, b in _parallel_map(lambda p: _write_one_scene(root, sc, field_, p, content), plans):
        rows.extend(r)
        bs_truth.update(b)
    return rows, bs_truth


# --------------------------------------------------------------------------- truth

def _window(sc: Scenario, dep, truth):
    if dep.window_start is not None and dep.window_end is not None:
        return dep.window_start, dep.window_end, "deployments.csv"
    w0 = max(truth["profile_time"][0], truth["string_time"][0], sc.season_start)
    w1 = min(truth["profile_time"][-1], truth["string_time"][-1], sc.season_end)
    return w0, w1, "season and instrument overlap"


def _season_terms(sc, dep, oi, w0, w1) -> dict:
    k0 = int(np.ceil((w0 - sc.sim_start) / HOUR))
    k1 = int(np.floor((w1 - sc.sim_start) / HOUR))
    s = slice(k0, k1)
    dt = 3600.0
    f, sw = oi.f_ow[s], oi.sw_W_m2[s]
    mj = 1e-6
    sw_in = np.sum((1 - f) * sw) * dt * mj
    q_ow = np.sum((1 - ALBEDO_OPEN_WATER) * f * sw) * dt * mj
    q_st = (oi.heat_J_m2[k1] - oi.heat_J_m2[k0]) * mj
    q_b = RHO_ICE_KG_M3 * LATENT_HEAT_FUSION_J_KG * (oi.z_bottom_m[k0] - oi.z_bottom_m[k1]) * mj
    q_c = np.sum(oi.f_c_W_m2[s]) * dt * mj
    q_w = np.sum((1 - f) * oi.f_w_W_m2[s]) * dt * mj
    resid = q_ow - (q_st + q_w)
    return {"sw_in_MJ": sw_in, "q_ow_MJ": q_ow, "q_st_MJ": q_st, "q_b_MJ": q_b, "q_c_MJ": q_c,
            "q_w_MJ": q_w, "residual_MJ": resid, "t_season": -resid / sw_in,
            "f_ow_mean": float(np.mean(f)), "n_intervals": int(k1 - k0)}


def _write_truth_nc(path: Path, sc, dep, oi, fow, nodes, truth):
    n = oi.f_ow.size
    node_t = oi.node_time
    sc_t = np.array([x["time"] for x in nodes], "datetime64[ns]")
    stack = {k: np.array([x[k] for x in nodes]).reshape(-1, RADII.size)
             for k in ("f_true", "f_mask", "coverage")}
    f4 = {"dtype": "f4", "fill_value": np.float32(np.nan)}
    lv = truth["profile_levels"]
    pt = np.where(np.arange(truth["profile_pressure"].size)[None] < lv[:, None], 0, np.nan)
    variables = [
        _time_var("node_time", "node", node_t),
        _time_var("interval_start", "interval", node_t[:-1]),
        _time_var("interval_end", "interval", node_t[1:]),
        ("radius", ("radius",), RADII, {"units": "m", "long_name": "ground radius"}),
        ("f_ow", ("interval", "radius"), fow, {"units": "1", "long_name":
         "open-water fraction at the interval mid-point, linear between served scenes"}, f4),
        ("sw_down", ("interval",), oi.sw_W_m2, {"units": "W m-2", "long_name":
         "downwelling shortwave at the buoy, interval mean"}),
        ("f_w", ("interval",), oi.f_w_W_m2, {"units": "W m-2", "long_name":
         "ocean-to-ice heat flux per unit ice area (bulk formula)"}),
        ("f_c", ("interval",), oi.f_c_W_m2, {"units": "W m-2", "long_name":
         "conductive flux at the ice base, positive down into the interface"}),
        ("f_b", ("interval",), oi.f_w_W_m2 + oi.f_c_W_m2, {"units": "W m-2", "long_name":
         "basal melt energy flux rho_i L dm/dt = F_w + F_c"}),
        ("q_in", ("interval",), oi.q_in_W_m2, {"units": "W m-2", "long_name":
         "solar entering the ocean (open water plus through ice)"}),
        ("u_star", ("interval",), oi.u_star_m_s, {"units": "m s-1"}),
        ("heat_content", ("node",), oi.heat_J_m2, {"units": "J m-2", "long_name":
         f"H from the ice base to {TRUTH_Z2_M} m"}),
        ("z_bottom", ("node",), oi.z_bottom_m, {"units": "m", "positive": "down",
                                                 "reference": dep.reference}),
        ("z_ice_top", ("node",), oi.z_ice_top_m, {"units": "m", "positive": "down"}),
        ("z_snow_top", ("node",), oi.z_snow_top_m, {"units": "m", "positive": "down"}),
        ("draft", ("node",), oi.draft_m, {"units": "m", "long_name": "ice base below sea level"}),
        ("t_ml", ("node",), oi.t_ml_degC, {"units": "degC", "long_name":
         "mixed-layer in-situ temperature"}),
        ("ml_excess", ("node",), oi.excess_K, {"units": "K", "long_name":
         "mixed-layer conservative temperature above its surface freezing point"}),
        ("latitude", ("node",), truth["lat"], {"units": "degrees_north"}),
        ("longitude", ("node",), truth["lon"], {"units": "degrees_east"}),
        ("x", ("node",), truth["x"], {"units": "m", "long_name": f"x in {sc.crs}"}),
        ("y", ("node",), truth["y"], {"units": "m", "long_name": f"y in {sc.crs}"}),
        _time_var("scene_time", "scene", sc_t),
        ("scene_index", ("scene",), np.array([x["scene"] for x in nodes], np.int32), {}),
        ("f_ow_scene", ("scene", "radius"), stack["f_true"], {"units": "1", "long_name":
         "open-water fraction of the whole circle, noise-free field"}, f4),
        ("f_ow_scene_mask", ("scene", "radius"), stack["f_mask"], {"units": "1", "long_name":
         "water / valid pixels of the written mask"}, f4),
        ("coverage_scene", ("scene", "radius"), stack["coverage"], {"units": "1"}, f4),
        _time_var("profile_time", "profile", truth["profile_time"]),
        ("pressure", ("level",), truth["profile_pressure"], {"units": "dbar"}),
        ("temperature", ("profile", "level"), truth["profile_t"] + pt, {"units": "degC",
         "long_name": "noise-free in-situ temperature"}, f4),
        ("salinity", ("profile", "level"), truth["profile_sp"] + pt, {"units": "1",
         "long_name": "noise-free practical salinity"}, f4),
        ("profile_heat_content", ("profile",), truth["profile_heat"], {"units": "J m-2"}),
        ("profile_draft", ("profile",), truth["profile_draft"], {"units": "m"}),
        _time_var("string_time", "string_time", truth["string_time"]),
        ("sensor_depth", ("sensor",), truth["string_depth"], {"units": "m", "positive": "down"}),
        ("string_temperature", ("string_time", "sensor"), truth["string_t"],
         {"units": "degC", "long_name": "noise-free string temperature",
          "dead_sensor_index": np.int32(truth["string_dead"])}, f4),
    ]
    dims = {"node": n + 1, "interval": n, "radius": RADII.size, "scene": len(nodes),
            "profile": truth["profile_time"].size, "level": truth["profile_pressure"].size,
            "string_time": truth["string_time"].size, "sensor": truth["string_depth"].size}
    write_netcdf(path, dims, variables, {"deployment_id": dep.deployment_id,
                                         "title": "noise-free truth of the synthetic archive"})


# --------------------------------------------------------------------------- main

def write_archive(outdir: Path, seed: int = 1, size: str | SizeSpec = "demo",
                  hemisphere: str = "north", variant: str = "none",
                  scene_content: str = "mask") -> Path:
    """Write a synthetic archive (format version 1) and its truth; return the truth folder.

    Parameters
    ----------
    outdir : Path
        Archive root to create. An earlier synthetic archive there (and its truth) is
        replaced; any other non-empty folder is refused with ``FileExistsError``.
    seed : int
        Random seed; the same seed gives the same bytes.
    size : str or SizeSpec
        A name from :data:`floeheat.synth.SIZES` or a custom :class:`SizeSpec`.
    hemisphere : {"north", "south"}
        Which invented scenario.
    variant : {"none", "shelf"}
        ``shelf``: the arrays start at least 300 km apart and a shallow bank (sea floor
        rising to 150 m) is centred where the last deployment's record ends, so that its
        track drifts onto the shelf while the other array stays over deep water; the
        truth records the bank (``shelf``). ``none`` writes the plain scenario.
    scene_content : {"mask", "backscatter"}
        ``mask``: every acquisition as an ice/water mask, a few also as calibrated
        backscatter (``SizeSpec.backscatter_count``). ``backscatter``: every acquisition
        only as backscatter (same grids, times and random draws; the masks are not
        written, ``backscatter_mask_scene`` still names the acquisition), for runs of
        the classification stage on a whole archive.

    Returns
    -------
    Path
        ``<outdir>.truth``, beside (never inside) the archive.
    """
    outdir = Path(outdir)
    spec = resolve_size(size)
    if variant not in ("none", "shelf"):
        raise ValueError(f"variant must be 'none' or 'shelf', not {variant!r}")
    if scene_content not in ("mask", "backscatter"):
        raise ValueError(f"scene_content must be 'mask' or 'backscatter', not {scene_content!r}")
    if variant == "shelf":
        from dataclasses import replace

        spec = replace(spec, array_spacing_m=max(spec.array_spacing_m, 300_000.0))
    sc = make_scenario(int(seed), spec, hemisphere)
    truth_dir = truth_dir_for(outdir)
    for d, marker in ((outdir, "deployments.csv"), (truth_dir, "truth.json")):
        if d.exists() and any(d.iterdir()):
            if not (d / marker).is_file():
                raise FileExistsError(f"{d} exists and does not hold a synthetic archive or "
                                      "truth; choose a new folder")
            shutil.rmtree(d)
        d.mkdir(parents=True, exist_ok=True)

    tracks = make_tracks(sc)
    field_ = icefield.make_icefield(sc, tracks)
    plans = icefield.plan_scenes(sc, tracks)
    scene_nodes = _scene_fractions(sc, tracks, field_, plans)
    grid = gridded.make_shortwave(sc, tracks.lat_deg, tracks.lon_deg)

    dep_rows = []
    truth_deps = {}
    for i, dep in enumerate(sc.deployments):
        fow = _hourly_fow(tracks.time, scene_nodes[dep.deployment_id])
        lat_mid = 0.5 * (tracks.lat_deg[i, 1:] + tracks.lat_deg[i, :-1])
        lon_mid = 0.5 * (tracks.lon_deg[i, 1:] + tracks.lon_deg[i, :-1])
        sw = gridded.bilinear_latlon(grid, lat_mid, lon_mid)
        if dep.shortwave_csv:
            sw = np.round(sw, 1)
        oi = ocean.simulate(sc, dep, tracks.lat_deg[i], tracks.lon_deg[i], tracks.speed_m_s[i],
                            fow[:, I_TRUTH], sw)
        truth = {"lat": tracks.lat_deg[i], "lon": tracks.lon_deg[i], "x": tracks.x_m[i],
                 "y": tracks.y_m[i]}
        prof_rel = _write_profiles(outdir, sc, dep, oi, tracks, i, truth)
        ice_rel = _write_icemass(outdir, sc, dep, oi, tracks, i, truth)
        sw_rel = ""
        if dep.shortwave_csv:
            sw_rel = f"shortwave/{dep.deployment_id}_sw.csv"
            write_csv(outdir / sw_rel, ["time", "sw_down_W_m2"],
                      [[iso(t), f"{v:.1f}"] for t, v in zip(tracks.time[1:], sw, strict=True)])
        w0, w1, w_from = _window(sc, dep, truth)
        terms = _season_terms(sc, dep, oi, w0, w1)
        truth_file = f"truth_{dep.deployment_id}.nc"
        _write_truth_nc(truth_dir / truth_file, sc, dep, oi, fow, scene_nodes[dep.deployment_id],
                        truth)
        truth_deps[dep.deployment_id] = {
            "array_id": dep.array_id, "ice_type": dep.ice_type,
            "transmittance": dep.transmittance, "radius_m": float(RADIUS_DEFAULT_M),
            "window_start": iso(w0), "window_end": iso(w1), "window_from": w_from,
            **{k: (round(float(v), 9) if isinstance(v, float) else v) for k, v in terms.items()},
            "profile_layout": dep.profile_layout, "salinity_from": dep.salinity_from,
            "icemass_layout": dep.icemass_layout, "string_reference": dep.reference,
            "sounder": dep.sounder, "heated": dep.heated,
            "shortwave_file": sw_rel, "truth_file": truth_file,
            "n_scenes_served": int(sum(n["coverage"][I_TRUTH] >= icefield.COVERAGE_THRESHOLD
                                       for n in scene_nodes[dep.deployment_id])),
        }
        explicit = dep.window_start is not None
        dep_rows.append([dep.deployment_id, dep.array_id, prof_rel, ice_rel, sw_rel,
                         iso(dep.window_start) if explicit else "",
                         iso(dep.window_end) if explicit else "", dep.ice_type])

    sw_files = _write_shortwave(outdir, sc, grid)
    pm = gridded.make_microwave(sc, field_, tracks.x_m, tracks.y_m)
    shelf = None
    if variant == "shelf":
        centre = (float(tracks.x_m[-1, -1]), float(tracks.y_m[-1, -1]))
        pm = gridded.with_shelf(pm, centre)
        shelf = {"deployment_id": sc.deployments[-1].deployment_id, "crs": sc.crs,
                 "centre_x_m": centre[0], "centre_y_m": centre[1],
                 "shelf_depth_m": gridded.SHELF_DEPTH_M,
                 "isobath_1000m_radius_m": gridded.shelf_isobath_radius_m(1000.0),
                 "distance_rule": "ground distance to the 1000 m isobath = (projected distance"
                                  " to the centre - isobath radius) / local scale factor"}
    pm_files = _write_concentration(outdir, sc, pm)
    scene_rows, bs_truth = _write_scenes(outdir, sc, field_, plans, scene_content)
    write_csv(outdir / "deployments.csv", ["deployment_id", "array_id", "profile_file",
                                           "icemass_file", "shortwave_file", "start", "end",
                                           "ice_type"], dep_rows)
    write_csv(outdir / "scenes.csv", ["scene_id", "path", "time", "content", "band",
                                      "acquisition_id"], scene_rows)

    meta = {
        "truth_format": 1, "archive_format_version": 1,
        "scenario": {"name": sc.name, "hemisphere": sc.hemisphere, "seed": int(seed),
                     "size": spec.name, "crs": sc.crs, "season_start": iso(sc.season_start),
                     "season_end": iso(sc.season_end), "melt_onset": iso(sc.melt_onset),
                     "records_start": iso(sc.sim_start), "records_end": iso(sc.sim_end)},
        "conventions": {
            "truth_radius_m": float(RADIUS_DEFAULT_M), "radii_m": RADII.tolist(),
            "energies": "MJ m-2; season totals sum the hourly forcing intervals entirely inside"
                        " the window; q_b and q_c per unit ice area, the others per unit surface",
            "albedo_open_water": ALBEDO_OPEN_WATER,
            "bulk_flux": {"formula": "F_w = rho0 cp0 c_h u* (Theta_ml - Theta_f)",
                          "c_h": BULK_HEAT_EXCHANGE_CH, "rho0_kg_m3": RHO0_KG_M3,
                          "cp0_J_kg_K": CP0_J_KG_K,
                          "drag_law": "u* = sqrt(Cd) * |u_ice|", "Cd": DRAG_COEFFICIENT},
            "heat_content": {"z2_m": TRUTH_Z2_M, "constant_below_m": Z_CONSTANT_M,
                             "rule": "cp0 * trapezoid over depth (gsw.z_from_p) of in-situ rho"
                                     " (Theta - Theta_f(S_A, p, saturation 1)) from the"
                                     " isostatic draft to z2; water between the ice base and"
                                     " the shallowest sample takes that sample's value",
                             "draft": "(rho_i h_i + rho_s h_s) / rho_w, rho_w in-situ density"
                                      " of the shallowest sample",
                             "nstm_share_of_solar": SOLAR_NSTM_SHARE},
            "f_ow": "truth f_ow at a scene time is the water fraction of all pixel centres of"
                    " the scene grid within radius * local scale factor (pyproj get_factors)"
                    " from the noise-free field; hourly values are linear between scenes"
                    " whose written-mask coverage is at least 0.5, constant beyond the ends",
            "backscatter_truth": "each backscatter scene's true mask is the mask scene of the"
                                 " same acquisition (same grid, same no-data)",
            "microwave_wet_bias_max": gridded.WET_BIAS_MAX,
        },
        "backscatter_mask_scene": bs_truth,
        "files": {"shortwave": sw_files, "concentration": pm_files,
                  "bathymetry": "bathymetry/sea_floor_depth.nc"},
        "deployments": truth_deps,
    }
    if scene_content != "mask":
        meta["scenario"]["scene_content"] = scene_content
    if shelf is not None:
        meta["scenario"]["variant"] = variant
        meta["shelf"] = shelf
    (truth_dir / "truth.json").write_text(json.dumps(meta, indent=2, sort_keys=False) + "\n")
    return truth_dir
