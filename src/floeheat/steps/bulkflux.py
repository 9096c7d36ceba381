"""Stage ``bulkflux`` (run-wide): the bulk-flux cross-check of every deployment.

Per deployment: the ocean-to-ice heat flux measured at the ice base (F_b - F_c, from the
insitu stage's ice record) against the bulk formula with u* from the drift and
T_ml - T_f from the profiler's shallowest samples (written by the insitu stage,
:func:`floeheat.bulkflux.shallowest_samples`), per budget window and over the whole
analysis window. The per-deployment work is light (hourly series), so one job does every
deployment and writes ``tables/bulkflux.csv`` (one row per deployment, the whole window)
and ``tables/bulkflux_windows.csv``; a deployment that fails becomes a row with its
reason and never stops the others.
"""

from __future__ import annotations

import logging
from functools import partial
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from floeheat import bulkflux as bf
from floeheat.steps.scenes import read_track
from floeheat.steps.status import StageFailed, attempt, read_status

__all__ = ["run_bulkflux", "deployment_comparison"]

log = logging.getLogger(__name__)


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


def deployment_comparison(insitu: dict, array_id: str, settings: dict) -> pd.DataFrame:
    """One deployment's comparison table (:data:`floeheat.bulkflux.BULKFLUX_COLUMNS`, the
    windows and the whole), from its insitu record (``insitu``: the stage's status)."""
    from floeheat.track import interpolate_track

    dep = insitu["deployment_id"]
    if not insitu.get("ice"):
        raise StageFailed(f"deployment {dep} has no ice mass-balance record: no measured "
                          "ocean-to-ice flux to compare")
    if not insitu.get("surface"):
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
    top = pd.read_csv(insitu["surface"], parse_dates=["time"])
    dt_k = bf.thermal_forcing(top["temperature_degC"], top["salinity"], top["pressure_dbar"],
                              top["latitude_deg"], top["longitude_deg"],
                              saturation_fraction=settings["saturation_fraction"])
    delta_t = _interp(top["time"].values, dt_k, mids)
    table = bf.bulk_comparison(
        edges, q_b, f_c, u_star, delta_t, window_days=settings["window_days"],
        c_h=settings["c_h"], rho_kg_m3=settings["rho_kg_m3"],
        disagree_factor=settings["disagree_factor"], min_flux_W_m2=settings["min_flux_W_m2"])
    table.insert(0, "array_id", array_id or dep)
    table.insert(0, "deployment_id", dep)
    return table


def _failed_row(dep: str, stage: str, message: str) -> pd.DataFrame:
    return pd.DataFrame([{"deployment_id": dep, "period": "whole", "disagree": False,
                          "reason": f"failed at stage {stage}: {message}"}])


def run_bulkflux(insitu_status: list[str], array_ids: dict, table_csv: str,
                 windows_csv: str, *, settings: dict) -> None:
    """Compare every deployment (``insitu_status``: their insitu records; ``array_ids``:
    deployment -> array_id) and write both tables (failed ones as rows with their
    reason)."""
    from floeheat.steps.tables import write_table

    parts = []
    for path in sorted(insitu_status):
        record = read_status(path)
        dep = record["deployment_id"]
        if not record.get("ok"):
            parts.append(_failed_row(dep, record.get("failed_stage", record["stage"]),
                                     record.get("message", "")))
            continue
        table, message = attempt("bulkflux", dep, partial(
            deployment_comparison, record, array_ids.get(dep, ""), settings))
        parts.append(table if table is not None else _failed_row(dep, "bulkflux", message))
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
