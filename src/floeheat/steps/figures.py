"""Stage ``figures``: every figure of a run in one job (batched, so reruns stay cheap)."""

from __future__ import annotations

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


def run_figures(budget_status: list[str], seasonal_csv: str, climatology_csv: str,
                out_dir: str) -> list[str]:
    """Draw the per-deployment and basin figures into ``out_dir`` (replaced whole)."""
    seasonal = pd.read_csv(seasonal_csv)
    clim = pd.read_csv(climatology_csv)
    written: list[str] = []
    tracks, t_season, labels, lats = {}, {}, set(), []
    with atomic_path(Path(out_dir)) as tmp:
        tmp.mkdir(parents=True)
        for path in sorted(budget_status):
            record = read_status(path)
            if not record.get("ok"):
                continue
            dep = record["deployment_id"]
            ds = xr.open_zarr(record["budget_zarr"], consolidated=True).load()
            scene_times = pd.read_csv(record["radar_fractions"], parse_dates=["time"])["time"] \
                if record.get("radar_fractions") else []
            dep_rows = seasonal[seasonal["deployment_id"] == dep]
            for name, figure in (
                ("budget", fig.budget_figure(ds, dep)),
                ("openwater", fig.openwater_figure(ds, scene_times, dep)),
                ("transmittance", fig.transmittance_figure(ds, dep_rows, dep)),
            ):
                target = tmp / "deployments" / dep / f"{name}.png"
                target.parent.mkdir(parents=True, exist_ok=True)
                fig.save_figure(figure, target)
                written.append(str(target.relative_to(tmp)))
            track = pd.read_csv(record["track"])
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
        fig.save_figure(fig.climatology_figure(clim), tmp / "basin_climatology.png")
        written.append("basin_climatology.png")
    log.info("figures: %d written", len(written))
    return written
