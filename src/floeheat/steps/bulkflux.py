"""Stages ``bulkflux`` (per deployment) and ``bulkflux_table`` (run-wide).

Per deployment: the ocean-to-ice heat flux measured at the ice base (F_b - F_c, from the
insitu stage's ice record) against the bulk formula with u* from the drift and
T_ml - T_f from the profiler's shallowest samples (:mod:`floeheat.bulkflux`), per budget
window and over the whole analysis window. Run-wide: ``tables/bulkflux.csv`` (one row
per deployment, the whole window) and ``tables/bulkflux_windows.csv``.
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from floeheat import bulkflux as bf
from floeheat.io.profiles import read_profiles
from floeheat.steps.scenes import read_track
from floeheat.steps.status import StageFailed, atomic_path, read_status, run_stage

__all__ = ["run_bulkflux", "run_bulkflux_table"]

log = logging.getLogger(__name__)


def _shallowest(profiles: xr.Dataset) -> pd.DataFrame:
    """Time, temperature, salinity, pressure and position of each profile's top sample."""
    t = profiles["temperature"].values
    s = profiles["salinity"].values
    p = profiles["pressure"].values
    ok = np.isfinite(t) & np.isfinite(s) & np.isfinite(p)
    has = ok.any(axis=1)
    first = np.argmax(ok, axis=1)
    k = np.arange(t.shape[0])
    return pd.DataFrame({
        "time": profiles["time"].values[has], "t": t[k, first][has], "sp": s[k, first][has],
        "p": p[k, first][has], "lat": profiles["latitude"].values[has],
        "lon": profiles["longitude"].values[has]}).sort_values("time")


def _interp(t_src, v_src, t_dst) -> np.ndarray:
    xs = np.asarray(t_src, "datetime64[ns]").astype(np.int64).astype(float)
    xd = np.asarray(t_dst, "datetime64[ns]").astype(np.int64).astype(float)
    v = np.asarray(v_src, dtype=float)
    ok = np.isfinite(v)
    if ok.sum() < 2:
        return np.full(xd.shape, np.nan)
    out = np.interp(xd, xs[ok], v[ok])
    out[(xd < xs[ok][0]) | (xd > xs[ok][-1])] = np.nan
    return out


def _work(row: dict, insitu: dict, profile_path: str | None, out_csv: Path,
          settings: dict) -> dict:
    from floeheat.track import interpolate_track

    dep = row["deployment_id"]
    if not insitu.get("ice"):
        raise StageFailed(f"deployment {dep} has no ice mass-balance record: no measured "
                          "ocean-to-ice flux to compare")
    if not profile_path:
        raise StageFailed(f"deployment {dep} has no profile file: no mixed-layer "
                          "temperature for the bulk formula")
    start, end = pd.Timestamp(insitu["window_start"]), pd.Timestamp(insitu["window_end"])
    edges = pd.date_range(start.ceil("h"), end.floor("h"), freq="h").values
    if edges.size < 2:
        raise StageFailed(f"deployment {dep}: the analysis window {start} to {end} is "
                          "shorter than an hour")
    mids = edges[:-1] + (edges[1:] - edges[:-1]) / 2
    ice = xr.open_dataset(insitu["ice"]).load()
    q_b = _interp(ice["time"].values, ice["q_b"].values, edges)
    f_c = _interp(ice["time"].values, ice["f_c"].values, mids)
    track = read_track(insitu["track"])
    pos = interpolate_track(track["time"].values, track["latitude"].values,
                            track["longitude"].values, edges)
    u, v = bf.ice_velocity(edges, pos["latitude"].values, pos["longitude"].values)
    uw, vw = (float(x) for x in settings["surface_velocity_m_s"])
    u_star = bf.friction_velocity(u, v, uw, vw, drag_coefficient=settings["drag_coefficient"])
    top = _shallowest(read_profiles(profile_path))
    dt_k = bf.thermal_forcing(top["t"], top["sp"], top["p"], top["lat"], top["lon"],
                              saturation_fraction=settings["saturation_fraction"])
    delta_t = _interp(top["time"].values, dt_k, mids)
    table = bf.bulk_comparison(
        edges, q_b, f_c, u_star, delta_t, window_days=settings["window_days"],
        c_h=settings["c_h"], rho_kg_m3=settings["rho_kg_m3"],
        disagree_factor=settings["disagree_factor"], min_flux_W_m2=settings["min_flux_W_m2"])
    table.insert(0, "array_id", row.get("array_id") or dep)
    table.insert(0, "deployment_id", dep)
    with atomic_path(out_csv) as tmp:
        table.to_csv(tmp, index=False, float_format="%.10g", lineterminator="\n",
                     date_format="%Y-%m-%dT%H:%M:%SZ")
    whole = table[table["period"] == "whole"].iloc[0]
    return {"bulkflux": str(out_csv), "ratio": float(whole["ratio"]),
            "disagree": bool(whole["disagree"])}


def run_bulkflux(row: dict, insitu_status: str, profile_files: list[str], status_path: str,
                 *, settings: dict) -> dict:
    """Run the per-deployment comparison and write its status record."""
    status = Path(status_path)
    out_csv = status.parent.parent / "work" / "bulkflux.csv"

    def work() -> dict:
        return _work(row, read_status(insitu_status),
                     profile_files[0] if profile_files else None, out_csv, settings)

    return run_stage("bulkflux", row["deployment_id"], status, work,
                     upstream=[Path(insitu_status)])


def run_bulkflux_table(bulkflux_status: list[str], table_csv: str, windows_csv: str) -> None:
    """Collect the per-deployment comparisons (failed ones as rows with their reason)."""
    from floeheat.steps.tables import write_table

    parts = []
    for path in sorted(bulkflux_status):
        record = read_status(path)
        if record.get("ok"):
            parts.append(pd.read_csv(record["bulkflux"], parse_dates=["start", "end"]))
        else:
            parts.append(pd.DataFrame([{
                "deployment_id": record["deployment_id"], "period": "whole",
                "disagree": False, "reason": "failed at stage "
                f"{record.get('failed_stage', record['stage'])}: {record.get('message', '')}"}]))
    table = pd.concat(parts, ignore_index=True) if parts else \
        pd.DataFrame(columns=list(bf.BULKFLUX_COLUMNS))
    table = table.reindex(columns=list(bf.BULKFLUX_COLUMNS))
    table = table.sort_values(["deployment_id", "start"], kind="stable", na_position="last")
    whole = table[table["period"] == "whole"].drop(columns=["period"])
    windows = table[table["period"] != "whole"]
    write_table(whole, Path(table_csv))
    write_table(windows, Path(windows_csv))
    log.info("bulk flux: %d deployments, %d disagree", len(whole),
             int(whole["disagree"].fillna(False).astype(bool).sum()))
