"""Checkpoint ``index``: the validated sheets and the list of gridded files.

Rows of deployments.csv or scenes.csv with a problem (an invalid or duplicate ID, a bad
time, ...) are set aside, the deployments among them into ``rejected.csv`` (they reach
failures.csv), so that one bad row never stops the others. Problems of a whole sheet
(a missing required column, a file that is not CSV) stop the run with their message.

Gridded files are found by what they hold, not by folder name (folder names are
conventions in archive format v1): every NetCDF file that neither sheet names is opened
(header only) and classed by the CF standard names of its variables.
"""

from __future__ import annotations

import logging
import re
import tempfile
from pathlib import Path

import pandas as pd

from floeheat.errors import ArchiveError, ArchiveProblem
from floeheat.io.archive import read_deployments, read_scene_table
from floeheat.io.cf import open_netcdf
from floeheat.steps.status import atomic_path, write_json_atomic

__all__ = ["GRIDDED_KINDS", "classify_gridded", "gridded_files", "tolerant_read",
           "run_index"]

log = logging.getLogger(__name__)

#: Standard names that class a NetCDF file as one of the gridded inputs.
GRIDDED_KINDS = {
    "shortwave": ("surface_downwelling_shortwave_flux_in_air",
                  "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air"),
    "concentration": ("sea_ice_area_fraction",),
    "bathymetry": ("sea_floor_depth_below_geoid", "height_above_mean_sea_level"),
}
_LINE = re.compile(r"^line (\d+)")


def classify_gridded(path: Path) -> str | None:
    """The kind of gridded input a NetCDF file holds, by standard_name (None if none)."""
    ds = open_netcdf(path, probe=False)
    try:
        names = {str(v.attrs.get("standard_name", "")) for v in ds.variables.values()}
    finally:
        ds.close()
    for kind, wanted in GRIDDED_KINDS.items():
        if names & set(wanted):
            return kind
    return None


def gridded_files(root: Path, named: set[str]) -> tuple[dict[str, list[str]], list[str]]:
    """Gridded NetCDF files of an archive by kind, and problems met on the way."""
    listing: dict[str, list[str]] = {kind: [] for kind in GRIDDED_KINDS}
    problems = []
    for path in sorted(root.rglob("*.nc")):
        rel = path.relative_to(root).as_posix()
        if rel in named:
            continue
        try:
            kind = classify_gridded(path)
        except ArchiveError as exc:
            problems.append(str(exc))
            continue
        if kind:
            listing[kind].append(rel)
    return listing, problems


def _row_of(problem: ArchiveProblem) -> int | None:
    m = _LINE.match(problem.where)
    return int(m.group(1)) - 2 if m else None


def tolerant_read(reader, root: Path, sheet: str) -> tuple[pd.DataFrame, list[tuple[int, str]]]:
    """Read a sheet with ``reader``, setting aside the rows that have problems.

    Returns the table of good rows and ``(row, message)`` for each row set aside
    (``row`` 0-based). A problem that names no row is raised.
    """
    try:
        return reader(root, check_files=False), []
    except ArchiveError as exc:
        bad: dict[int, list[str]] = {}
        for p in exc.problems:
            i = _row_of(p)
            if i is None:
                raise
            bad.setdefault(i, []).append(str(p))
    raw = pd.read_csv(root / sheet, dtype=str, keep_default_na=False, encoding="utf-8")
    good = raw.drop(index=[i for i in bad if i in raw.index])
    with tempfile.TemporaryDirectory() as tmp:
        good.to_csv(Path(tmp) / sheet, index=False)
        # paths stay relative to the real root; files are not checked here
        table = reader(Path(tmp), check_files=False)
    rejected = [(i, " ".join(msgs)) for i, msgs in sorted(bad.items())]
    return table, rejected


def run_index(archive: str, deployments_csv: str, scenes_csv: str, forcing_json: str,
              rejected_csv: str) -> None:
    """Write the validated sheets, the gridded-file listing and the rejected rows."""
    root = Path(archive)
    deployments, bad_rows = tolerant_read(read_deployments, root, "deployments.csv")
    raw = pd.read_csv(root / "deployments.csv", dtype=str, keep_default_na=False)
    rejected = pd.DataFrame(
        [{"deployment_id": raw.iloc[i].get("deployment_id", "") or f"(line {i + 2})",
          "stage": "index", "message": msg} for i, msg in bad_rows],
        columns=["deployment_id", "stage", "message"])
    if (root / "scenes.csv").exists():
        scenes, bad_scenes = tolerant_read(read_scene_table, root, "scenes.csv")
    else:
        scenes, bad_scenes = read_scene_table(root, check_files=False), []
    for _, msg in bad_scenes:
        log.error("scene row set aside: %s", msg)
    named = {str(p) for col in ("profile_file", "icemass_file", "shortwave_file")
             for p in deployments[col].dropna() if str(p)}
    named |= {str(p) for p in scenes["path"].dropna()}
    listing, problems = gridded_files(root, named)
    for msg in problems:
        log.error("gridded file left out: %s", msg)
    listing["problems"] = problems
    listing["scenes_set_aside"] = [msg for _, msg in bad_scenes]

    out = deployments.copy()
    for col in ("start", "end"):
        out[col] = out[col].dt.strftime("%Y-%m-%dT%H:%M:%S").fillna("")
    with atomic_path(Path(deployments_csv)) as tmp:
        out.fillna("").to_csv(tmp, index=False, lineterminator="\n")
    sc = scenes.copy()
    sc["time"] = pd.to_datetime(sc["time"]).dt.strftime("%Y-%m-%dT%H:%M:%S")
    with atomic_path(Path(scenes_csv)) as tmp:
        sc.fillna("").to_csv(tmp, index=False, lineterminator="\n")
    write_json_atomic(Path(forcing_json), listing)
    with atomic_path(Path(rejected_csv)) as tmp:
        rejected.to_csv(tmp, index=False, lineterminator="\n")
    log.info("index: %d deployments (%d set aside), %d scenes, %s", len(deployments),
             len(rejected), len(scenes), {k: len(v) for k, v in listing.items()
                                          if isinstance(v, list)})
