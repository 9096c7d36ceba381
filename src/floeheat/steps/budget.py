"""Stage ``budget``: the budget terms of a part's deployments, each into its ``budget.zarr``.

Samples the shortwave store (or a deployment's own CSV series) and the concentration
store along the tracks of all the part's deployments in one pass over each store
(:func:`sample_part_forcing`), then for each deployment builds f_ow per source and
radius on the forcing intervals, assembles the budget
(:func:`floeheat.budget.assemble_budget`) and writes the store of the output contract
plus the deployment's seasonal rows and window records.
"""

from __future__ import annotations

import functools
import json
import logging
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from floeheat import ARCHIVE_FORMAT_VERSION, __version__
from floeheat.budget import assemble_budget, seasonal_table, window_table
from floeheat.climatology import WINDOW_COLUMNS
from floeheat.io.gridded import read_shortwave_csv
from floeheat.microwave import fraction_at_buoys, interpolate_daily
from floeheat.openwater import per_scene_arrays, radar_time_series
from floeheat.shortwave import sample_at_tracks
from floeheat.steps.ensemble import budget_ensemble, write_attribution_rows, write_window_members
from floeheat.steps.parts import run_part
from floeheat.steps.scenes import position_at, read_track
from floeheat.steps.status import StageFailed, atomic_path, attempt, read_status, run_stage

__all__ = ["run_budget", "run_budget_part", "sample_part_forcing", "DeploymentForcing",
           "Positions", "radar_fraction_series", "microwave_fraction_series", "shortwave_at_track",
           "shortwave_positions", "microwave_positions", "shortwave_at_tracks",
           "microwave_at_tracks", "write_budget_store"]

log = logging.getLogger(__name__)

_DAY = np.timedelta64(1, "D")


@functools.lru_cache(maxsize=4)
def _open_store(path: str) -> xr.Dataset | None:
    """The forcing store, opened lazily once per process (a part's deployments share it)."""
    ds = xr.open_zarr(path, consolidated=True)
    return None if ds.attrs.get("absent") else ds


def _midpoints(time_bnds) -> np.ndarray:
    b = np.asarray(time_bnds, dtype="datetime64[ns]")
    return b[:, 0] + (b[:, 1] - b[:, 0]) / 2


def _bounds(store: xr.Dataset) -> np.ndarray:
    return np.asarray(store["time_bnds"].values, dtype="datetime64[ns]")


# --- positions of a track on a store's intervals --------------------------------------

@dataclass(frozen=True)
class Positions:
    """One deployment's positions on some intervals of a forcing store."""

    #: Interval numbers in the store (increasing).
    index: np.ndarray
    #: Track latitude and longitude at those intervals [degrees].
    lat: np.ndarray
    lon: np.ndarray


def shortwave_positions(bnds, track: pd.DataFrame, start, end) -> Positions:
    """The track at the midpoints of the shortwave intervals overlapping the window.

    ``bnds`` are the store's ``time_bnds`` (n, 2). Raises StageFailed when no interval
    overlaps the window.
    """
    bnds = np.asarray(bnds, dtype="datetime64[ns]")
    keep = (bnds[:, 1] > np.datetime64(start)) & (bnds[:, 0] < np.datetime64(end))
    if not keep.any():
        raise StageFailed(f"the gridded shortwave does not cover the analysis window {start} "
                          f"to {end}; add shortwave files for that period")
    idx = np.flatnonzero(keep)
    lat, lon, _, _ = position_at(track, _midpoints(bnds[idx]), "EPSG:4326")
    return Positions(idx, lat, lon)


def microwave_positions(bnds, track: pd.DataFrame, start, end) -> Positions | None:
    """The track on the concentration days around the window (None: no day).

    Days overlapping the window widened by a day stand at their midpoints (science.md);
    a day that overlaps the track but whose midpoint lies beyond its first or last fix
    (a deployment starting or ending mid-day) is sampled at the track's end position:
    its value still describes the buoy's surroundings that day. Days without a position
    are left out.
    """
    bnds = np.asarray(bnds, dtype="datetime64[ns]")
    keep = (bnds[:, 1] > np.datetime64(start) - _DAY) & (bnds[:, 0] < np.datetime64(end) + _DAY)
    if not keep.any():
        return None
    idx = np.flatnonzero(keep)
    sb = bnds[idx]
    mid = _midpoints(sb)
    t_track = pd.to_datetime(track["time"]).values.astype("datetime64[ns]")
    overlaps = (sb[:, 1] > t_track.min()) & (sb[:, 0] < t_track.max())
    at = np.where(overlaps, np.clip(mid, t_track.min(), t_track.max()), mid)
    lat, lon, _, _ = position_at(track, at, "EPSG:4326")
    ok = np.isfinite(lat)
    if not ok.any():
        return None
    return Positions(idx[ok], lat[ok], lon[ok])


def _joint(positions: list[Positions]) -> tuple[np.ndarray, np.ndarray, np.ndarray, list]:
    """The union of the intervals of several tracks and their positions on it (NaN
    where a track needs no value), with each track's columns in the union."""
    union = np.unique(np.concatenate([p.index for p in positions]))
    lat = np.full((len(positions), union.size), np.nan)
    lon = np.full_like(lat, np.nan)
    cols = []
    for k, p in enumerate(positions):
        c = np.searchsorted(union, p.index)
        lat[k, c], lon[k, c] = p.lat, p.lon
        cols.append(c)
    return union, lat, lon, cols


# --- sampling, every track of a part in one pass ---------------------------------------

def shortwave_at_tracks(store: xr.Dataset, positions: dict[str, Positions]
                        ) -> dict[str, xr.Dataset]:
    """Shortwave at several tracks, each store chunk read once for all of them.

    Returns, per key of ``positions``, ``sw_down(time)`` [W m-2, mean over each
    interval] with ``time_bnds`` on that track's intervals.
    """
    if not positions:
        return {}
    keys = list(positions)
    union, lat, lon, cols = _joint([positions[k] for k in keys])
    sub = store.isel(time=union)
    t = sub["time"].values
    out = sample_at_tracks(sub, xr.DataArray(lat, dims=("track", "time"), coords={"time": t}),
                           xr.DataArray(lon, dims=("track", "time"), coords={"time": t}))
    values, bnds = out["sw_down"].values, out["time_bnds"].values
    return {key: xr.Dataset({"sw_down": ("time", values[k, c], {"units": "W m-2"}),
                             "time_bnds": (("time", "nv"), bnds[c])},
                            coords={"time": t[c]})
            for k, (key, c) in enumerate(zip(keys, cols, strict=True))}


def microwave_at_tracks(store: xr.Dataset, positions: dict[str, Positions],
                        settings: dict) -> dict[str, xr.DataArray]:
    """Daily microwave f_ow(time, radius) at several tracks, each store chunk read once
    for all of them (``settings``: config ``microwave``, its ``radii_m`` and ``method``)."""
    if not positions:
        return {}
    keys = list(positions)
    union, lat, lon, cols = _joint([positions[k] for k in keys])
    daily = fraction_at_buoys(store.isel(time=union), lat, lon,
                              radii_m=sorted(settings["radii_m"]), method=settings["method"])
    return {key: daily.isel(track=k, time=c).drop_vars("track", errors="ignore")
            for k, (key, c) in enumerate(zip(keys, cols, strict=True))}


def shortwave_at_track(store: xr.Dataset, track: pd.DataFrame, start, end) -> xr.Dataset:
    """Shortwave at the buoy from the gridded store, on the intervals overlapping the window."""
    return shortwave_at_tracks(store, {"": shortwave_positions(_bounds(store), track, start,
                                                               end)})[""]


def microwave_fraction_series(store: xr.Dataset, track: pd.DataFrame, start, end,
                              target_time, settings: dict, max_gap_days: float
                              ) -> xr.DataArray | None:
    """Microwave f_ow(time, radius) at ``target_time``: daily values stand at their
    interval midpoints, linear between them (science.md); days missing at the buoy are
    bridged up to ``max_gap_days`` (the radar rule's gap, so both sources are held to
    the same standard)."""
    pos = microwave_positions(_bounds(store), track, start, end)
    if pos is None:
        return None
    daily = microwave_at_tracks(store, {"": pos}, settings)[""]
    return interpolate_daily(daily, target_time, max_gap=pd.Timedelta(days=max_gap_days))


@dataclass
class DeploymentForcing:
    """What a deployment's budget needs from the forcing, sampled before its budget."""

    track: pd.DataFrame | None = None
    #: ``sw_down(time)`` with ``time_bnds``: the intervals overlapping the window.
    shortwave: xr.Dataset | None = None
    #: Daily microwave f_ow(time, radius) at the buoy (None: no store or no day).
    microwave_daily: xr.DataArray | None = None
    #: Why the forcing could not be had: raised by the deployment's budget.
    error: Exception | None = None


def sample_part_forcing(insitu: dict[str, dict], shortwave_store: str, concentration_store: str,
                        shortwave_csv: dict[str, list[str]], microwave: dict
                        ) -> dict[str, DeploymentForcing]:
    """Shortwave and daily microwave f_ow for every deployment of a part whose insitu
    stage succeeded, each forcing store read in one pass for all of them.

    ``insitu`` maps deployment -> its insitu status record; ``shortwave_csv`` maps
    deployment -> its point shortwave files (a deployment with one uses it instead of
    the gridded store). A deployment whose track, window or files fail gets the error
    in its :class:`DeploymentForcing` and the others are sampled as usual; a failure of
    the joint read reaches every deployment that needed it.
    """
    forcing: dict[str, DeploymentForcing] = {}
    sw_store, ci_store = _open_store(shortwave_store), _open_store(concentration_store)
    sw_bnds = _bounds(sw_store) if sw_store is not None else None
    ci_bnds = _bounds(ci_store) if ci_store is not None else None
    sw_pos: dict[str, Positions] = {}
    ci_pos: dict[str, Positions] = {}
    for dep, record in insitu.items():
        if not record.get("ok"):
            continue

        def prepare(dep=dep, record=record) -> DeploymentForcing:
            start, end = (pd.Timestamp(record["window_start"]),
                          pd.Timestamp(record["window_end"]))
            f = DeploymentForcing(track=read_track(record["track"]))
            if shortwave_csv.get(dep):
                f.shortwave = read_shortwave_csv(shortwave_csv[dep][0])
            elif sw_store is None:
                raise StageFailed(f"deployment {dep} has no shortwave: the archive has no "
                                  "gridded shortwave files and deployments.csv names no "
                                  "shortwave_file")
            else:
                sw_pos[dep] = shortwave_positions(sw_bnds, f.track, start, end)
            if ci_store is not None:
                pos = microwave_positions(ci_bnds, f.track, start, end)
                if pos is not None:
                    ci_pos[dep] = pos
            return f

        f, message = attempt("budget", dep, prepare)
        forcing[dep] = f if f is not None else DeploymentForcing(error=StageFailed(message))
    for store, pos, sample, key, what in (
            (sw_store, sw_pos, shortwave_at_tracks, "shortwave", "shortwave"),
            (ci_store, ci_pos, functools.partial(microwave_at_tracks, settings=microwave),
             "microwave_daily", "concentration")):
        pos = {dep: p for dep, p in pos.items() if forcing[dep].error is None}
        if not pos:
            continue
        got, message = attempt("budget", ", ".join(pos),
                               functools.partial(sample, store, pos))
        for dep in pos:
            if got is None:
                forcing[dep].error = StageFailed(f"reading the gridded {what} at the "
                                                 f"part's tracks failed: {message}")
            else:
                setattr(forcing[dep], key, got[dep])
    return forcing


def radar_fraction_series(fractions_csv: str, target_time, radii_m, max_gap_days: float
                          ) -> xr.DataArray | None:
    """Radar f_ow(time, radius) at ``target_time`` from the per-scene table."""
    table = pd.read_csv(fractions_csv, parse_dates=["time"])
    if table.empty:
        return None
    table["value"] = table["f_ow"].where(table["accepted"].astype(bool))
    times, wide = per_scene_arrays(table, ["value"], sorted(radii_m))
    return radar_time_series(times, wide["value"], target_time, sorted(radii_m),
                             max_gap=pd.Timedelta(days=max_gap_days))


def _combine(series: dict[str, xr.DataArray], target_time) -> xr.DataArray:
    radii = sorted({float(r) for da in series.values() for r in da["radius"].values})
    parts = []
    for source, da in series.items():
        da = da.drop_vars([c for c in da.coords if c not in ("time", "radius")])
        da = da.assign_coords(time=target_time).reindex(radius=radii)
        parts.append(da.expand_dims(source=[source]))
    return xr.concat(parts, dim="source").transpose("time", "source", "radius")


def write_budget_store(ds: xr.Dataset, path: Path) -> None:
    """Write the budget Dataset as a consolidated Zarr (format 3) store, atomically.

    String variables (per-source reasons) go to attributes; every chunk spans the whole
    series (the store is read whole, by the figures). The store is built in
    memory and then written out as files, the same files Zarr writes to a folder: Zarr
    passes every step of a local write through its event-loop thread, which costs more
    than the writes themselves for a store of many small arrays.
    """
    from zarr.storage import MemoryStore

    ds = ds.copy()
    for name in list(ds.data_vars):
        if ds[name].dtype.kind in "UOS":
            ds.attrs[name] = json.dumps(
                {f"{s}/{float(r):g}": str(ds[name].sel(source=s, radius=r).item())
                 for s in ds["source"].values for r in ds["radius"].values}
                if set(ds[name].dims) == {"source", "radius"} else ds[name].values.tolist())
            ds = ds.drop_vars(name)
        elif ds[name].dtype == bool:
            ds[name] = ds[name].astype("int8")
    ds["source"] = ds["source"].astype(str)
    for var in ds.variables.values():
        var.encoding = {}
    files: dict = {}
    ds.to_zarr(MemoryStore(store_dict=files), zarr_format=3, consolidated=True, mode="w")
    with atomic_path(path) as tmp:
        for key, buffer in sorted(files.items()):
            target = tmp / key
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_bytes(buffer.to_bytes())


def _windows(ds: xr.Dataset, track: pd.DataFrame, row: dict) -> pd.DataFrame:
    w = window_table(ds)
    if w.empty:
        return pd.DataFrame(columns=list(WINDOW_COLUMNS))
    mid = w["window_start"] + (w["window_end"] - w["window_start"]) / 2
    lat, lon, _, _ = position_at(track, mid.values, "EPSG:4326")
    w["latitude"], w["longitude"] = lat, lon
    w["deployment_id"] = row["deployment_id"]
    w["array_id"] = row.get("array_id") or row["deployment_id"]
    w["ice_type"] = row.get("ice_type") or ""
    # energies of each window from its shares (budget.window_table defines them)
    w["sw_down_MJ"] = w["sw_total_MJ"]
    w["q_ow_MJ"] = w["share_ow"] * w["sw_total_MJ"]
    w["q_tr_MJ"] = w["share_tr"] * w["sw_total_MJ"]
    entered = w["q_ow_MJ"] + w["q_tr_MJ"]
    w["q_st_MJ"] = w["share_stored"] * entered
    w["q_w_MJ"] = w["share_to_ice"] * entered
    return w[list(WINDOW_COLUMNS)]


def _work(row: dict, insitu: dict, radar: dict | None, forcing: DeploymentForcing,
          out_dir: Path, work_dir: Path, radar_max_gap_days: float, microwave: dict,
          budget: dict, provenance: dict) -> dict:
    dep = row["deployment_id"]
    if forcing.error is not None:
        raise forcing.error
    start, end = pd.Timestamp(insitu["window_start"]), pd.Timestamp(insitu["window_end"])
    track, sw = forcing.track, forcing.shortwave
    bnds = sw["time_bnds"].values
    inside = (bnds[:, 0] >= np.datetime64(start)) & (bnds[:, 1] <= np.datetime64(end))
    target = _midpoints(bnds[inside]) if inside.any() else np.array([], "datetime64[ns]")
    if target.size == 0:
        raise StageFailed(f"deployment {dep}: no shortwave interval lies inside the analysis "
                          f"window {start} to {end}")

    series: dict[str, xr.DataArray] = {}
    radar_radii = provenance["radar_radii_m"]
    if radar and radar.get("radar_fractions"):
        f = radar_fraction_series(radar["radar_fractions"], target, radar_radii,
                                  radar_max_gap_days)
        if f is not None:
            series["radar"] = f
    if forcing.microwave_daily is not None:
        series["microwave"] = interpolate_daily(forcing.microwave_daily, target,
                                                max_gap=pd.Timedelta(days=radar_max_gap_days))
    f_ow = _combine(series, target) if series else None

    storage = xr.open_dataset(insitu["storage"]).load() if insitu.get("storage") else None
    ice = xr.open_dataset(insitu["ice"]).load() if insitu.get("ice") else None
    ds = assemble_budget(
        sw.isel(time=np.flatnonzero(inside)), start, end, f_ow=f_ow, storage=storage, ice=ice,
        albedo_ow=budget["albedo_ow"], window_days=budget["window_days"],
        weight_by_ice_fraction=budget["weight_by_ice_fraction"], deployment_id=dep)
    ds.attrs.update({
        "deployment_id": dep, "array_id": row.get("array_id") or "",
        "window_start": str(start), "window_end": str(end),
        "floeheat_version": __version__, "archive_format_version": ARCHIVE_FORMAT_VERSION,
        "radar_input": (radar or {}).get("radar_input", "none"),
        "settings": json.dumps(provenance["settings"], sort_keys=True),
    })
    ens = provenance.get("ensemble") or {}
    ds, window_members = budget_ensemble(
        ds, ens.get("settings") or {"members": 0}, deployment_id=dep,
        radar_fractions_csv=(radar or {}).get("radar_fractions") or None,
        radar_max_gap_days=radar_max_gap_days, coverage_threshold=ens.get("coverage_threshold"),
        ice_settings=ens.get("ice"), ice=ice, sensor_spacing_m=insitu.get("sensor_spacing_m"),
        threads=ens.get("threads", 1))
    store_path = out_dir / "budget.zarr"
    write_budget_store(ds, store_path)

    wanted = {("radar", float(r)) for r in radar_radii} | \
        {("microwave", float(r)) for r in microwave["radii_m"]}
    seasonal = seasonal_table(ds, deployment_id=dep, array_id=row.get("array_id") or "")
    seasonal = seasonal[[(s, float(r)) in wanted for s, r in
                         zip(seasonal["source"], seasonal["radius_m"])]]
    windows = _windows(ds, track, row)
    windows = windows[[(s, float(r)) in wanted for s, r in
                       zip(windows["source"], windows["radius_m"])]]
    paths = {"seasonal": work_dir / "seasonal.csv", "windows": work_dir / "windows.csv"}
    for key, table in (("seasonal", seasonal), ("windows", windows)):
        with atomic_path(paths[key]) as tmp:
            table.to_csv(tmp, index=False, float_format="%.10g", lineterminator="\n")
    return {"budget_zarr": str(store_path), "seasonal": str(paths["seasonal"]),
            "windows": str(paths["windows"]), "track": insitu["track"],
            "radar_fractions": (radar or {}).get("radar_fractions", ""),
            "floe_context": (radar or {}).get("floe_context", ""),
            "sources": sorted(series),
            **write_window_members(window_members, work_dir / "window_members.csv", dep),
            **write_attribution_rows(ds, work_dir / "attribution.csv", dep)}


def run_budget(row: dict, insitu_status: str, radar_status: str, forcing: DeploymentForcing,
               status_path: str, *, radar_max_gap_days: float, microwave: dict, budget: dict,
               radar_radii_m: list[float], ensemble: dict | None = None,
               ice: dict | None = None, coverage_threshold: float | None = None,
               threads: int = 1) -> dict:
    """Run the stage for one deployment, its forcing already sampled
    (:func:`sample_part_forcing`), and write its status record.

    ``ensemble`` (config ``ensemble``), ``ice`` (config ``ice``, the central constants)
    and ``coverage_threshold`` (config ``radar.coverage_threshold``) drive the
    uncertainty ensemble (:func:`floeheat.steps.ensemble.budget_ensemble`); without
    ``ensemble`` the budget has no ensemble.
    """
    status = Path(status_path)
    out_dir = status.parent.parent
    work_dir = out_dir / "work"
    settings = {"radar_max_gap_days": radar_max_gap_days, "microwave": microwave,
                "budget": budget, "radar_radii_m": list(radar_radii_m)}
    if ensemble is not None:
        settings["ensemble"] = ensemble

    def work() -> dict:
        insitu = read_status(insitu_status)
        radar = read_status(radar_status)
        if not radar.get("ok"):
            log.warning("radar stage failed (%s); the budget goes on without it",
                        radar.get("message"))
            radar = None
        return _work(row, insitu, radar, forcing, out_dir, work_dir, radar_max_gap_days,
                     microwave, budget,
                     {"radar_radii_m": list(radar_radii_m), "settings": settings,
                      "ensemble": {"settings": ensemble, "ice": ice, "threads": threads,
                                   "coverage_threshold": coverage_threshold}})

    return run_stage("budget", row["deployment_id"], status, work,
                     upstream=[Path(insitu_status)])


def run_budget_part(rows: list[dict], insitu_status: dict[str, str],
                    radar_status: dict[str, str], shortwave_store: str,
                    concentration_store: str, shortwave_csv: dict[str, list[str]],
                    status: dict[str, str], record: str, **settings) -> dict:
    """The stage for one part: the forcing of all its deployments sampled in one pass
    (:func:`sample_part_forcing`), then each deployment's budget (:func:`run_budget`,
    ``settings`` its keyword arguments), then the part's record."""
    by_id = {row["deployment_id"]: dict(row) for row in rows}
    insitu = {dep: read_status(path) for dep, path in insitu_status.items()}
    forcing = sample_part_forcing(insitu, shortwave_store, concentration_store, shortwave_csv,
                                  settings["microwave"])
    return run_part("budget", status,
                    lambda dep: run_budget(by_id[dep], insitu_status[dep], radar_status[dep],
                                           forcing.get(dep, DeploymentForcing()), status[dep],
                                           **settings),
                    record)
