"""Stage ``insitu``: one deployment's track, ice base and heat storage.

The two instruments' files are read once: positions of both make the drift track; the
thermistor string gives the ice bottom, top surface, conduction and melt; the profiles
give the heat content, with the ice base at the isostatic draft from the string's
thickness. The analysis window is settled here too (it needs both records).
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from floeheat import icebase
from floeheat import track as trk
from floeheat.budget import analysis_window
from floeheat.bulkflux import shallowest_samples
from floeheat.errors import ArchiveError
from floeheat.io.icemass import read_icemass
from floeheat.io.profiles import read_profiles
from floeheat.steps.status import StageFailed, atomic_path, run_stage
from floeheat.storage import heat_storage, surface_freezing_temperature

__all__ = ["run_insitu", "write_netcdf"]

log = logging.getLogger(__name__)


def write_netcdf(ds: xr.Dataset, path: Path) -> None:
    """Write a small intermediate Dataset atomically (NetCDF-4, compressed)."""
    encoding = {name: {"zlib": True, "complevel": 4} for name, v in ds.data_vars.items()
                if v.dtype.kind in "fiu"}
    with atomic_path(path) as tmp:
        ds.to_netcdf(tmp, engine="netcdf4", encoding=encoding)


def _archive_file(archive: Path, rel, what: str, column: str) -> Path | None:
    if rel is None or (isinstance(rel, float) and np.isnan(rel)) or str(rel) == "":
        return None
    path = archive / str(rel)
    if not path.exists():
        raise ArchiveError.at(str(archive / "deployments.csv"), f"column {column}",
                              f"the {what} file {rel} does not exist",
                              "correct the path (relative to the archive root) or add the file")
    return path


def _nat(value) -> pd.Timestamp | None:
    if value is None or value == "" or pd.isna(value):
        return None
    return pd.Timestamp(value)


def _work(archive: Path, row: dict, work_dir: Path, track_cfg: dict, ice_cfg: dict,
          storage_cfg: dict, season: dict) -> dict:
    dep = row["deployment_id"]
    profile_path = _archive_file(archive, row.get("profile_file"), "profile", "profile_file")
    icemass_path = _archive_file(archive, row.get("icemass_file"), "ice mass-balance",
                                 "icemass_file")
    if profile_path is None and icemass_path is None:
        raise StageFailed(f"deployment {dep} has neither a profile nor an ice mass-balance "
                          "file; give at least one in deployments.csv")
    profiles = read_profiles(profile_path) if profile_path else None
    icemass = read_icemass(icemass_path) if icemass_path else None

    fixes = []
    if icemass is not None:
        fixes.append((icemass["time"].values, icemass["latitude"].values,
                      icemass["longitude"].values))
    if profiles is not None:
        fixes.append((profiles["time"].values, profiles["latitude"].values,
                      profiles["longitude"].values))
    track = trk.clean_track(fixes, max_speed_m_s=track_cfg["max_speed_m_s"])
    if track.sizes["time"] < 2:
        raise StageFailed(f"deployment {dep}: fewer than two valid position fixes; the "
                          "instrument files carry no usable latitude/longitude")
    hemi = trk.hemisphere(track["latitude"].values)
    try:
        start, end = analysis_window(
            _nat(row.get("start")), _nat(row.get("end")),
            profiles["time"].values if profiles is not None else None,
            icemass["time"].values if icemass is not None else None,
            season[hemi])
    except ValueError as exc:
        raise StageFailed(f"deployment {dep}: {exc}") from exc

    products: dict = {"hemisphere": hemi, "window_start": str(start),
                      "window_end": str(end), "crs": track.attrs["crs"],
                      "n_rejected_fixes": int(track.attrs["n_rejected"])}
    work_dir.mkdir(parents=True, exist_ok=True)
    track_path = work_dir / "track.csv"
    frame = pd.DataFrame({"time": track["time"].values, "latitude": track["latitude"].values,
                          "longitude": track["longitude"].values, "x_m": track["x_m"].values,
                          "y_m": track["y_m"].values})
    with atomic_path(track_path) as tmp:
        frame.to_csv(tmp, index=False, float_format="%.10g",
                     date_format="%Y-%m-%dT%H:%M:%S")
    products["track"] = str(track_path)

    ice = None
    if icemass is not None:
        # the ice base sits at the freezing point of the water below it (from the
        # profiler's shallowest salinity where there is one)
        t_freeze = (surface_freezing_temperature(
            profiles, saturation_fraction=storage_cfg["saturation_fraction"])
            if profiles is not None else None)
        ice = icebase.ice_base(
            icemass, smooth_hours=ice_cfg["smooth_hours"], fit_span_m=ice_cfg["fit_span_m"],
            conductivity=ice_cfg["conductivity"], k_ice_W_m_K=ice_cfg["k_ice_W_m_K"],
            latent_heat=ice_cfg["latent_heat"], rho_i_kg_m3=ice_cfg["rho_i_kg_m3"],
            latent_heat_J_kg=ice_cfg["latent_heat_J_kg"],
            bulk_salinity_ppt=ice_cfg["bulk_salinity"], freezing_temperature_degC=t_freeze)
        ice_path = work_dir / "ice.nc"
        write_netcdf(ice, ice_path)
        products["ice"] = str(ice_path)
        # the string's sensor spacing sets the ice-bottom pick error of the ensemble
        spacing = np.diff(np.sort(np.asarray(icemass["depth"].values, dtype=float)))
        if np.isfinite(spacing).any():
            products["sensor_spacing_m"] = float(np.nanmedian(spacing))

    if profiles is not None:
        # the profiler's shallowest samples, for the bulk-flux cross-check (rule bulkflux)
        surface_path = work_dir / "surface.csv"
        with atomic_path(surface_path) as tmp:
            # full precision (the bulk-flux table must not depend on this hop)
            shallowest_samples(profiles).to_csv(tmp, index=False)
        products["surface"] = str(surface_path)
        in_window = (profiles["time"] >= np.datetime64(start)) & \
            (profiles["time"] <= np.datetime64(end))
        window_profiles = profiles.isel(profile=np.flatnonzero(in_window.values))
        if window_profiles.sizes["profile"] < 2:
            raise StageFailed(f"deployment {dep}: fewer than two profiles inside the analysis "
                              f"window {start} to {end}; check the window or the profile file")
        thickness = None
        if ice is not None and np.isfinite(ice["ice_thickness"]).any():
            # The string does not separate snow from ice: the whole column above the
            # base counts as ice in the draft (summer snow is thin; a choice recorded in
            # the contributor guide).
            thickness = ice["ice_thickness"]
        method = storage_cfg["z2_method"]
        heat = heat_storage(
            window_profiles, method=method, ice_thickness_m=thickness,
            z2_m=storage_cfg["fixed_depth_m"] if method == "fixed" else None,
            sigma0_kg_m3=storage_cfg["isopycnal_sigma0_kg_m3"] if method == "isopycnal"
            else None,
            delta_sigma_kg_m3=storage_cfg["delta_sigma_kg_m3"],
            margin_m=storage_cfg["margin_m"], offset_m=storage_cfg["sensitivity_offset_m"],
            density=storage_cfg["density"],
            saturation_fraction=storage_cfg["saturation_fraction"])
        heat_path = work_dir / "storage.nc"
        write_netcdf(heat, heat_path)
        products["storage"] = str(heat_path)
        products["z2_m"] = float(heat["z2"])
    return products


def run_insitu(archive: str, row: dict, status_path: str, *, track: dict, ice: dict,
               storage: dict, season: dict) -> dict:
    """Run the stage for one deployment and write its status record."""
    status = Path(status_path)
    work_dir = status.parent.parent / "work"
    return run_stage("insitu", row["deployment_id"], status,
                     lambda: _work(Path(archive), row, work_dir, track, ice, storage, season))
