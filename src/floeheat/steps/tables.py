"""Stage ``tables``: seasonal.csv, climatology.csv, failures.csv (and windows.csv).

Reads the per-deployment budget status records; deployments that failed at any stage
appear in failures.csv and, with their reason, in seasonal.csv (no values, ``complete``
false). CSV is written with fixed float formatting and sorted rows so that the same
inputs give the same bytes; Parquet copies sit beside the CSV files.
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import pandas as pd

from floeheat.climatology import (
    WINDOW_COLUMNS,
    climatology_table,
    grid_region_names,
    polygon_region_names,
    read_regions_geojson,
)
from floeheat.steps.ensemble import read_window_members
from floeheat.steps.status import atomic_path, read_status

__all__ = ["SEASONAL_COLUMNS", "FAILURE_COLUMNS", "run_tables", "write_table"]

log = logging.getLogger(__name__)

#: seasonal.csv columns (outputs.md), in order.
SEASONAL_COLUMNS = (
    "deployment_id", "array_id", "source", "radius_m", "start", "end", "sw_in_MJ",
    "q_ow_MJ", "q_st_MJ", "q_b_MJ", "q_c_MJ", "q_w_MJ", "residual_MJ", "t_ice",
    "t_ice_lo", "t_ice_hi", "f_ow_mean", "complete", "reason",
)
#: failures.csv columns (outputs.md).
FAILURE_COLUMNS = ("deployment_id", "stage", "message")


def write_table(df: pd.DataFrame, path: Path, parquet: bool = True) -> None:
    """Write a table as CSV (and Parquet beside it), atomically and reproducibly.

    Floats are written with 10 significant digits, times as ISO 8601 UTC.
    """
    path = Path(path)
    out = df.copy()
    for col in out.columns:
        if pd.api.types.is_datetime64_any_dtype(out[col]):
            out[col] = out[col].dt.strftime("%Y-%m-%dT%H:%M:%SZ").fillna("")
    with atomic_path(path) as tmp:
        out.to_csv(tmp, index=False, float_format="%.10g", lineterminator="\n")
    if parquet:
        with atomic_path(path.with_suffix(".parquet")) as tmp:
            df.to_parquet(tmp, index=False)


def _region_names(windows: pd.DataFrame, settings: dict) -> np.ndarray:
    if windows.empty:
        return np.array([], dtype=str)
    regions_file = settings.get("regions")
    if regions_file:
        regions = read_regions_geojson(Path(regions_file).read_text())
        return polygon_region_names(windows["latitude"], windows["longitude"], regions)
    names = np.empty(len(windows), dtype=object)
    lat = windows["latitude"].to_numpy(float)
    for hemi, mask in (("north", lat >= 0), ("south", lat < 0)):
        if mask.any():
            names[mask] = grid_region_names(lat[mask], windows["longitude"].to_numpy(float)[mask],
                                            hemisphere=hemi, cell_m=settings["cell_m"])
    return names.astype(str)


def run_tables(budget_status: list[str], rejected_csv: str, seasonal_csv: str,
               climatology_csv: str, failures_csv: str, windows_csv: str,
               climatology: dict, screen_windows: str | None = None,
               unsplit_csv: str | None = None) -> None:
    """Collect per-deployment results into the run's tables.

    ``screen_windows`` (tables/screen_windows.csv of stage screen): windows it marks
    ``excluded`` are left out of the climatology (windows.csv keeps them all);
    ``unsplit_csv``: the climatology without the ice-type split.
    """
    seasonal_parts, window_parts, failures = [], [], []
    rejected = pd.read_csv(rejected_csv, dtype=str, keep_default_na=False)
    failures.extend(rejected[list(FAILURE_COLUMNS)].to_dict(orient="records"))
    for path in sorted(budget_status):
        record = read_status(path)
        if record.get("ok"):
            seasonal_parts.append(pd.read_csv(record["seasonal"], keep_default_na=False,
                                              na_values=[""]))
            window_parts.append(pd.read_csv(record["windows"],
                                            parse_dates=["window_start", "window_end"]))
        else:
            failures.append({"deployment_id": record["deployment_id"],
                             "stage": record.get("failed_stage", record["stage"]),
                             "message": record.get("message", "")})
    failed = pd.DataFrame(failures, columns=list(FAILURE_COLUMNS))
    failed = failed.sort_values(["deployment_id", "stage"], kind="stable")
    missing = pd.DataFrame({
        "deployment_id": failed["deployment_id"],
        "complete": False,
        "reason": "failed at stage " + failed["stage"] + ": " + failed["message"],
    })
    seasonal = pd.concat([p for p in seasonal_parts + [missing] if not p.empty] or
                         [pd.DataFrame(columns=list(SEASONAL_COLUMNS))], ignore_index=True)
    seasonal = seasonal.reindex(columns=list(SEASONAL_COLUMNS))
    seasonal = seasonal.sort_values(["deployment_id", "source", "radius_m"],
                                    kind="stable", na_position="last")
    windows = pd.concat(window_parts, ignore_index=True) if window_parts else \
        pd.DataFrame(columns=list(WINDOW_COLUMNS))
    windows = windows.sort_values(["deployment_id", "source", "radius_m", "window_start"],
                                  kind="stable")
    has_ice_type = windows["ice_type"].fillna("").astype(str).str.len().gt(0).any() \
        if not windows.empty else False
    from floeheat.steps.screen import annotate_climatology, apply_screen

    kept, screened_out, screen_note = apply_screen(windows, screen_windows)
    clim = climatology_table(kept, _region_names(kept, climatology),
                             n_boot=int(climatology["bootstrap_n"]),
                             seed=int(climatology["seed"]), split_ice_type=bool(has_ice_type),
                             member_values=read_window_members(budget_status, kept))
    clim = annotate_climatology(clim, screened_out, _region_names(screened_out, climatology),
                                screen_note, bool(has_ice_type))
    if unsplit_csv:
        unsplit = climatology_table(kept, _region_names(kept, climatology),
                                    n_boot=int(climatology["bootstrap_n"]),
                                    seed=int(climatology["seed"]), split_ice_type=False,
                                    member_values=read_window_members(budget_status, kept)) \
            if has_ice_type else clim
        write_table(annotate_climatology(
            unsplit, screened_out, _region_names(screened_out, climatology), screen_note,
            False) if has_ice_type else unsplit, Path(unsplit_csv))
    write_table(seasonal, Path(seasonal_csv))
    write_table(windows, Path(windows_csv))
    write_table(clim, Path(climatology_csv))
    write_table(failed, Path(failures_csv))
    log.info("tables: %d seasonal rows, %d climatology rows, %d failures",
             len(seasonal), len(clim), len(failed))
