"""The window screen (run-wide, the first step of rule tables): where the one-dimensional
budget holds.

Reads every deployment's track and window records (from the budget records) and the
archive's bathymetry grid when there is one, flags each window (:mod:`floeheat.screen`)
and writes ``tables/screen.csv`` (one row per deployment: what was screened and how
much was excluded), ``tables/screen_windows.csv`` (one row per window record, the flags
and ``excluded``) and ``tables/screen_track.csv`` (sea-floor depth and distance to the
isobath along each track). The tables stage leaves the excluded windows out of the
climatology. Without a bathymetry grid the near-shelf screen is not applied, and the
tables say so.
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import pandas as pd

from floeheat import screen as scr
from floeheat import track as trk
from floeheat.steps.scenes import read_track
from floeheat.steps.status import read_status

__all__ = ["run_screen", "SCREEN_COLUMNS", "SCREEN_WINDOW_COLUMNS", "screen_label",
           "apply_screen"]

log = logging.getLogger(__name__)

#: tables/screen.csv columns.
SCREEN_COLUMNS = (
    "deployment_id", "array_id", "advection_screen", "isobath_m", "distance_limit_m",
    "min_sea_floor_depth_m", "min_distance_to_isobath_m", "near_shelf_days", "window_days",
    "n_windows", "n_windows_excluded", "excluded_days", "excluded_fraction",
    "n_windows_near_shelf", "n_windows_fast_drift", "n_windows_shear",
    "n_windows_residual_outlier", "excluded_by",
)
#: tables/screen_windows.csv columns.
SCREEN_WINDOW_COLUMNS = (
    "deployment_id", "array_id", "source", "radius_m", "window_start", "window_end",
    "min_distance_to_isobath_m", "near_shelf_hours", "flag_near_shelf",
    "max_daily_speed_m_s", "flag_fast_drift", "max_separation_change_m", "flag_shear",
    "f_tr_W_m2", "f_tr_peer_median_W_m2", "n_peers", "flag_residual_outlier",
    "excluded", "excluded_by",
)
_NO_GRID = "not applied: no bathymetry grid in the archive"
#: The bathymetry is read only within this distance beyond the screening distance of
#: the tracks; farther distances to the isobath are not exact (they exceed it anyway).
_MARGIN_M = 200_000.0


def _around_tracks(depth, budget_status: list[str], margin_m: float):
    """The part of a (lazy) bathymetry grid within ``margin_m`` of every track."""
    lats, lons = [], []
    for path in budget_status:
        record = read_status(path)
        if record.get("ok"):
            t = read_track(record["track"])
            lats.append(t["latitude"].to_numpy(float))
            lons.append(t["longitude"].to_numpy(float))
    if not lats:
        return depth
    lat, lon = np.concatenate(lats), np.concatenate(lons)
    if "latitude" in depth.dims:
        dlat = margin_m / 111_000.0
        lo, hi = np.nanmin(lat) - dlat, np.nanmax(lat) + dlat
        return depth.sel(latitude=slice(max(lo, -90.0), min(hi, 90.0)))
    from pyproj import CRS, Transformer

    tr = Transformer.from_crs("EPSG:4326", CRS.from_wkt(depth.attrs["crs_wkt"]),
                              always_xy=True)
    x, y = tr.transform(lon, lat)
    return depth.sel(x=slice(np.nanmin(x) - margin_m, np.nanmax(x) + margin_m),
                     y=slice(np.nanmin(y) - margin_m, np.nanmax(y) + margin_m))


def screen_label(bathymetry_given: bool, isobath_m: float, distance_m: float) -> str:
    """How the advection screen was applied, as the tables state it.

    Examples
    --------
    >>> screen_label(True, 1000.0, 50000.0)
    'applied: within 50 km of the 1000 m isobath'
    >>> screen_label(False, 1000.0, 50000.0)
    'not applied: no bathymetry grid in the archive'
    """
    if not bathymetry_given:
        return _NO_GRID
    return f"applied: within {distance_m / 1000:g} km of the {isobath_m:g} m isobath"


def _exclusion(flags: pd.DataFrame, exclude: list[str]) -> tuple[pd.Series, pd.Series]:
    hit = pd.DataFrame({f: flags[f"flag_{f}"].astype(bool) for f in scr.SCREEN_FLAGS
                        if f in exclude}, index=flags.index)
    if hit.empty or not len(hit.columns):
        return pd.Series(False, index=flags.index), pd.Series("", index=flags.index)
    by = hit.apply(lambda r: " ".join(c for c in hit.columns if r[c]), axis=1)
    return hit.any(axis=1), by.astype(str)


def run_screen(budget_status: list[str], bathymetry: list[str], screen_csv: str,
               windows_csv: str, track_csv: str, *, settings: dict) -> None:
    """Flag every deployment's windows and write the screen tables."""
    from floeheat.steps.tables import write_table

    exclude = list(settings.get("exclude") or [])
    unknown = sorted(set(exclude) - set(scr.SCREEN_FLAGS))
    if unknown:
        raise ValueError(f"config screen.exclude names unknown flags {unknown}; choose from "
                         f"{list(scr.SCREEN_FLAGS)}")
    depth_grid = None
    if bathymetry:
        from floeheat.io.gridded import open_bathymetry

        depth_grid = _around_tracks(open_bathymetry(bathymetry[0]), budget_status,
                                    settings["distance_m"] + _MARGIN_M).load()
        if len(bathymetry) > 1:
            log.warning("several bathymetry grids; using %s", bathymetry[0])
    label = screen_label(depth_grid is not None, settings["isobath_m"], settings["distance_m"])

    tracks, windows, arrays = {}, [], {}
    for path in sorted(budget_status):
        record = read_status(path)
        if not record.get("ok"):
            continue
        dep = record["deployment_id"]
        tracks[dep] = read_track(record["track"])
        w = pd.read_csv(record["windows"], parse_dates=["window_start", "window_end"])
        windows.append(w)
        arrays[dep] = str(w["array_id"].iloc[0]) if len(w) else dep
    win = pd.concat(windows, ignore_index=True) if windows else pd.DataFrame(
        columns=["deployment_id", "array_id", "source", "radius_m", "window_start",
                 "window_end", "q_tr_MJ"])

    # each track projected once, for every window and every mate it is compared with
    projected = {dep: trk.project_track(t["time"].values, t["latitude"].values,
                                        t["longitude"].values) for dep, t in tracks.items()}
    along, flag_parts = [], []
    for dep, track in tracks.items():
        hemi = trk.hemisphere(track["latitude"].values)
        if depth_grid is not None:
            d, dist = scr.depth_and_distance_to_isobath(
                track["latitude"].values, track["longitude"].values, depth_grid,
                settings["isobath_m"], hemisphere=hemi)
        else:
            d = dist = np.full(len(track), np.nan)
        along.append(pd.DataFrame({"deployment_id": dep, "time": track["time"],
                                   "latitude": track["latitude"],
                                   "longitude": track["longitude"], "sea_floor_depth_m": d,
                                   "distance_to_isobath_m": dist}))
        mine = win[win["deployment_id"] == dep]
        if mine.empty:
            continue
        speed = scr.daily_drift_speed(track["time"].values, track["latitude"].values,
                                      track["longitude"].values)
        f = scr.window_time_flags(track["time"].values, dist, mine, settings["distance_m"],
                                  speed, settings["max_daily_speed_m_s"])
        mates = [m for m in tracks if m != dep and arrays.get(m) == arrays[dep]]
        sep, by_period = [], {}
        for start, end in zip(mine["window_start"], mine["window_end"]):
            # every source and radius shares the window's period: computed once
            if (start, end) not in by_period:
                changes = [scr.separation_change_projected(projected[dep], projected[m],
                                                           start, end) for m in mates]
                changes = [c for c in changes if np.isfinite(c)]
                by_period[start, end] = max(changes) if changes else float("nan")
            sep.append(by_period[start, end])
        f["max_separation_change_m"] = sep
        f["flag_shear"] = f["max_separation_change_m"].fillna(0.0) > \
            settings["max_separation_change_m"]
        flag_parts.append(f)
    flags = pd.concat(flag_parts) if flag_parts else pd.DataFrame(index=win.index)
    out = win.join(flags)
    out = out.join(scr.residual_outliers(win, settings["outlier_mad"],
                                         settings["outlier_floor_W_m2"]))
    for col in ("flag_near_shelf", "flag_fast_drift", "flag_shear", "flag_residual_outlier"):
        out[col] = out.get(col, pd.Series(False, index=out.index)).fillna(False).astype(bool)
    out["excluded"], out["excluded_by"] = _exclusion(out, exclude)
    out = out.reindex(columns=list(SCREEN_WINDOW_COLUMNS))
    out = out.sort_values(["deployment_id", "source", "radius_m", "window_start"],
                          kind="stable")

    rows = []
    along_by_dep = {x["deployment_id"].iloc[0]: x for x in along if len(x)}
    for dep in sorted(along_by_dep):
        a = along_by_dep[dep]
        mine = out[out["deployment_id"] == dep]
        # time flags are the same for every source and radius: count windows by time
        by_time = mine.drop_duplicates(["window_start", "window_end"])
        days = (by_time["window_end"] - by_time["window_start"]).dt.total_seconds() / 86400.0
        exc = mine.groupby(["window_start", "window_end"])["excluded"].any()
        exc_days = sum((b - a_).total_seconds() / 86400.0 for (a_, b), x in exc.items() if x)
        dist = a["distance_to_isobath_m"].to_numpy(float)
        tt = np.asarray(a["time"].values, dtype="datetime64[ns]")
        dt_h = np.gradient((tt - tt[0]).astype(np.int64) / 3.6e12) if len(tt) > 1 else \
            np.zeros(len(tt))
        near = np.isfinite(dist) & (dist < settings["distance_m"])
        rows.append({
            "deployment_id": dep, "array_id": arrays[dep], "advection_screen": label,
            "isobath_m": settings["isobath_m"], "distance_limit_m": settings["distance_m"],
            "min_sea_floor_depth_m": float(np.nanmin(a["sea_floor_depth_m"]))
            if a["sea_floor_depth_m"].notna().any() else float("nan"),
            # inf: the grid holds no water shallower than the isobath
            "min_distance_to_isobath_m": float(np.nanmin(dist)) if (~np.isnan(dist)).any()
            else float("nan"),
            "near_shelf_days": float(dt_h[near].sum() / 24.0) if depth_grid is not None
            else float("nan"),
            "window_days": float(days.sum()), "n_windows": int(len(by_time)),
            "n_windows_excluded": int(exc.sum()), "excluded_days": float(exc_days),
            "excluded_fraction": float(exc_days / days.sum()) if days.sum() > 0
            else float("nan"),
            **{f"n_windows_{f}": int(mine.groupby(["window_start"])[f"flag_{f}"].any().sum())
               for f in scr.SCREEN_FLAGS},
            "excluded_by": " ".join(exclude),
        })
    summary = pd.DataFrame(rows, columns=list(SCREEN_COLUMNS))
    track_table = pd.concat(along, ignore_index=True) if along else pd.DataFrame(
        columns=["deployment_id", "time", "latitude", "longitude", "sea_floor_depth_m",
                 "distance_to_isobath_m"])
    write_table(summary, Path(screen_csv))
    write_table(out, Path(windows_csv))
    write_table(track_table, Path(track_csv), parquet=False)
    log.info("screen: %s; %d of %d window records excluded", label,
             int(out["excluded"].sum()), len(out))


def apply_screen(windows: pd.DataFrame, screen_windows_csv: str | None
                 ) -> tuple[pd.DataFrame, pd.DataFrame, str]:
    """Split window records into kept and excluded by the screen table.

    Returns the kept records, the excluded ones and the screen label (from the table,
    or "not applied" when there is no table).
    """
    if not screen_windows_csv or not Path(screen_windows_csv).exists():
        return windows, windows.iloc[0:0], "not applied: no screen table"
    sw = pd.read_csv(screen_windows_csv, parse_dates=["window_start", "window_end"])
    screen_csv = Path(screen_windows_csv).with_name("screen.csv")
    labels = pd.read_csv(screen_csv)["advection_screen"].dropna().unique() \
        if screen_csv.exists() else []
    label = str(labels[0]) if len(labels) else _NO_GRID
    keys = ["deployment_id", "source", "radius_m", "window_start", "window_end"]
    if windows.empty:
        return windows, windows, label
    left = windows[keys].copy()
    for df in (left, sw):
        for col in ("window_start", "window_end"):
            df[col] = pd.to_datetime(df[col], utc=True).dt.tz_localize(None)
    left["deployment_id"] = left["deployment_id"].astype(str)
    sw["deployment_id"] = sw["deployment_id"].astype(str)
    merged = left.merge(sw[keys + ["excluded"]], on=keys, how="left", validate="many_to_one")
    gone = merged["excluded"].fillna(False).astype(bool).to_numpy()
    return windows[~gone], windows[gone], label



def annotate_climatology(clim: pd.DataFrame, screened_out: pd.DataFrame, region_names,
                         screen_note: str, split_ice_type: bool) -> pd.DataFrame:
    """Add ``n_windows_screened_out`` and ``advection_screen`` to a climatology table.

    ``n_windows_screened_out`` counts, per cell, the window records the screen left out
    (cells whose windows were all left out have no row; screen.csv reports them).
    """
    out = clim.copy()
    keys = ["region", "month", "source", "radius_m"] + (["ice_type"] if split_ice_type else [])
    if len(screened_out) and len(out):
        gone = screened_out.copy()
        gone["region"] = np.asarray(region_names, dtype=str)
        mid = gone["window_start"] + (gone["window_end"] - gone["window_start"]) / 2
        gone["month"] = pd.DatetimeIndex(mid).month
        if split_ice_type:
            gone["ice_type"] = gone["ice_type"].fillna("").astype(str)
        counts = gone.groupby(keys).size().rename("n_windows_screened_out").reset_index()
        for k in keys:
            counts[k] = counts[k].astype(out[k].dtype)
        out = out.merge(counts, on=keys, how="left")
    else:
        out["n_windows_screened_out"] = 0
    out["n_windows_screened_out"] = out["n_windows_screened_out"].fillna(0).astype(int)
    out["advection_screen"] = screen_note
    return out
