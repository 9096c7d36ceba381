"""Stage ``figures``: every figure of a run in one job (batched, so reruns stay cheap;
the per-deployment figures, and beside them the basin figures drawn from the tables
alone, by as many processes as the job has threads; the track map, which needs every
deployment's track, last)."""

from __future__ import annotations

import functools
import logging
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from floeheat import constants
from floeheat import figures as fig
from floeheat.steps.status import atomic_path, read_status

__all__ = ["run_figures"]

log = logging.getLogger(__name__)


def _season_value(seasonal: pd.DataFrame, dep: str) -> tuple[float, str]:
    rows = seasonal[(seasonal["deployment_id"] == dep) & seasonal["t_ice"].notna()]
    if rows.empty:
        return float("nan"), ""
    radar = rows[rows["source"] == "radar"]
    pick = radar if not radar.empty else rows
    pick = pick.iloc[(pick["radius_m"] - constants.RADIUS_DEFAULT_M).abs().argsort()].iloc[0]
    return float(pick["t_ice"]), f"{pick['source']} {pick['radius_m'] / 1000:g} km"


def _attribution_rows(attribution_csv: str | None) -> tuple[pd.DataFrame, str]:
    """One row per deployment: the radar source at the radius nearest the default (else
    any source), as in the track map."""
    if not attribution_csv or not Path(attribution_csv).is_file():
        return pd.DataFrame(), ""
    table = pd.read_csv(attribution_csv)
    if table.empty:
        return table, ""
    picks, labels = [], set()
    for _, rows in table.groupby("deployment_id", sort=True):
        radar = rows[rows["source"] == "radar"]
        pick = radar if not radar.empty else rows
        pick = pick.iloc[(pick["radius_m"] - constants.RADIUS_DEFAULT_M).abs().argsort()]
        picks.append(pick.iloc[0])
        labels.add(f"{pick.iloc[0]['source']} {pick.iloc[0]['radius_m'] / 1000:g} km")
    return pd.DataFrame(picks), ", ".join(sorted(labels))


def _deployment_figures(path: str, seasonal: pd.DataFrame, tmp: Path):
    """One deployment's figures into ``tmp/deployments/<id>/``; returns ``(written,
    deployment_id, track)``, or None for a failed budget."""
    record = read_status(path)
    if not record.get("ok"):
        return None
    dep = record["deployment_id"]
    # chunks=None: read as NumPy, without a dask graph per array (the store is small)
    ds = xr.open_zarr(record["budget_zarr"], consolidated=True, chunks=None).load()
    scene_times = pd.read_csv(record["radar_fractions"], parse_dates=["time"])["time"] \
        if record.get("radar_fractions") else []
    dep_rows = seasonal[seasonal["deployment_id"] == dep]
    figures = [("budget", fig.budget_figure(ds, dep)),
               ("openwater", fig.openwater_figure(ds, scene_times, dep)),
               ("transmittance", fig.transmittance_figure(ds, dep_rows, dep))]
    if record.get("floe_context"):
        figures.append(("floes", fig.floe_context_figure(
            pd.read_csv(record["floe_context"]), dep)))
    written = []
    for name, figure in figures:
        target = tmp / "deployments" / dep / f"{name}.png"
        target.parent.mkdir(parents=True, exist_ok=True)
        # fixed margins: drawn once (a tight crop would draw each figure twice)
        fig.save_figure(figure, target, tight=False)
        written.append(str(target.relative_to(tmp)))
    return written, dep, pd.read_csv(record["track"])


def _each_deployment(budget_status: list[str], seasonal: pd.DataFrame, tmp: Path,
                     processes: int, beside=None) -> tuple[list, list[str]]:
    """The deployments' figures in status order, drawn by ``processes`` worker processes
    (matplotlib draws on one core; the per-deployment figures are independent), and
    ``beside()`` (the figures that need none of them) drawn among them: returns
    ``(per deployment, what beside() wrote)``."""
    paths = sorted(budget_status)
    if processes <= 1 or len(paths) < 2:
        return [_deployment_figures(p, seasonal, tmp) for p in paths], \
            (beside() if beside else [])
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    # fork: the workers inherit the imported modules instead of importing them again
    with ProcessPoolExecutor(max_workers=min(processes, len(paths)),
                             mp_context=multiprocessing.get_context("fork")) as pool:
        # submitted first, so that it runs beside the deployments, not after them
        other = pool.submit(beside) if beside else None
        done = list(pool.map(_deployment_figures, paths, [seasonal] * len(paths),
                             [tmp] * len(paths),
                             chunksize=max(1, len(paths) // (4 * processes))))
        return done, (other.result() if other else [])


def _basin_figures(tmp: Path, clim: pd.DataFrame, attribution_csv: str | None,
                   checks: dict | None) -> list[str]:
    """The basin figures drawn from the tables alone (all but the track map)."""
    written = []
    fig.save_figure(fig.climatology_figure(clim), tmp / "basin_climatology.png")
    written.append("basin_climatology.png")
    if attribution_csv:
        rows, label = _attribution_rows(attribution_csv)
        fig.save_figure(fig.attribution_figure(rows, label), tmp / "basin_attribution.png")
        written.append("basin_attribution.png")
    if checks:
        written.extend(_check_figures(tmp, checks, clim))
    return written


def run_figures(budget_status: list[str], seasonal_csv: str, climatology_csv: str,
                out_dir: str, attribution_csv: str | None = None,
                checks: dict | None = None, processes: int = 1) -> list[str]:
    """Draw the per-deployment and basin figures into ``out_dir`` (replaced whole); the
    per-deployment figures and those drawn from the tables alone in ``processes``
    worker processes."""
    seasonal = pd.read_csv(seasonal_csv)
    clim = pd.read_csv(climatology_csv)
    written: list[str] = []
    tracks, t_season, labels, lats = {}, {}, set(), []
    with atomic_path(Path(out_dir)) as tmp:
        tmp.mkdir(parents=True)
        per_deployment, basin = _each_deployment(
            budget_status, seasonal, tmp, processes,
            beside=functools.partial(_basin_figures, tmp, clim, attribution_csv, checks))
        for done in per_deployment:
            if done is None:
                continue
            files, dep, track = done
            written.extend(files)
            tracks[dep] = track
            lats.append(float(np.nanmean(track["latitude"])))
            t_season[dep], label = _season_value(seasonal, dep)
            labels.add(label)
        if tracks:
            crs = constants.CRS_WORKING_NORTH if np.nanmean(lats) >= 0 else \
                constants.CRS_WORKING_SOUTH
            label = ", ".join(sorted(x for x in labels if x)) or "no value"
            fig.save_figure(fig.track_map_figure(tracks, t_season, crs, label),
                            tmp / "basin_tracks.png")
            written.append("basin_tracks.png")
        written.extend(basin)
    log.info("figures: %d written", len(written))
    return written


def _check_figures(tmp: Path, checks: dict, clim: pd.DataFrame) -> list[str]:
    """Bulk-flux cross-check, advection screen and ice-type split (``checks``: paths of
    tables/bulkflux.csv, bulkflux_windows.csv, screen.csv, screen_track.csv and the
    settings ``distance_m``, ``disagree_factor``)."""
    out = []
    whole = pd.read_csv(checks["bulkflux"])
    windows = pd.read_csv(checks["bulkflux_windows"])
    fig.save_figure(fig.bulkflux_figure(windows, whole, float(checks["disagree_factor"])),
                    tmp / "basin_bulkflux.png")
    out.append("basin_bulkflux.png")
    fig.save_figure(fig.screen_figure(pd.read_csv(checks["screen_track"]),
                                      pd.read_csv(checks["screen"]),
                                      float(checks["distance_m"])),
                    tmp / "basin_screen.png")
    out.append("basin_screen.png")
    if "ice_type" in clim.columns and len(clim):
        radar = clim[clim["source"] == "radar"]
        pick = radar if len(radar) else clim
        radius = float(pick.iloc[(pick["radius_m"] - constants.RADIUS_DEFAULT_M).abs()
                                 .argsort()].iloc[0]["radius_m"])
        fig.save_figure(fig.ice_type_figure(clim, str(pick["source"].iloc[0]), radius),
                        tmp / "basin_ice_type.png")
        out.append("basin_ice_type.png")
    return out
