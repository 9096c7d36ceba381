"""Stages ``scene_footprints``, ``match_scenes`` (checkpoint) and ``radar``.

Each scene's header is opened once per run (CRS, transform, shape: no pixels) into a
footprint table. Per deployment, the checkpoint keeps the scenes whose time lies within
the track and the radii whose circle the scene's footprint covers at least to the
threshold (science.md: the same rule decides matching and counting). The radar stage
then reads, per matched scene, only the window of pixels the deployment's largest
circle needs, and computes f_ow and the exact valid
coverage for every radius from that one read.
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import pandas as pd

from floeheat import openwater
from floeheat import track as trk
from floeheat.errors import ArchiveError
from floeheat.io.scenes import open_scene
from floeheat.steps.status import StageFailed, atomic_path, read_status, run_stage

__all__ = ["MATCH_COLUMNS", "FRACTION_COLUMNS", "FOOTPRINT_COLUMNS", "run_scene_footprints",
           "match_track", "run_match_scenes", "run_radar", "position_at", "read_track"]

log = logging.getLogger(__name__)

#: Columns of matches.csv.
MATCH_COLUMNS = ("deployment_id", "scene_id", "path", "time", "content", "band",
                 "radius_m", "footprint_coverage")
#: Columns of a deployment's radar_fractions.csv.
FRACTION_COLUMNS = ("scene_id", "time", "radius_m", "f_ow", "coverage", "n_water",
                    "n_valid", "n_circle", "accepted")

#: Scenes whose content the radar source reads directly. Backscatter scenes are served
#: by a per-scene classification stage (they are matched but not yet read here).
_READABLE = ("mask",)


def read_track(path: str | Path) -> pd.DataFrame:
    """Read a track written by stage insitu."""
    return pd.read_csv(path, parse_dates=["time"])


def position_at(track: pd.DataFrame, times, crs) -> tuple[np.ndarray, np.ndarray,
                                                          np.ndarray, np.ndarray]:
    """Track position at ``times``: (lat, lon, x, y) with x/y in ``crs`` (NaN outside)."""
    pos = trk.interpolate_track(track["time"].values, track["latitude"].values,
                                track["longitude"].values,
                                np.asarray(times, dtype="datetime64[ns]"))
    lat, lon = pos["latitude"].values, pos["longitude"].values
    ok = np.isfinite(lat)
    x = np.full(lat.shape, np.nan)
    y = np.full(lat.shape, np.nan)
    if ok.any():
        x[ok], y[ok] = trk.to_working_crs(lat[ok], lon[ok], crs)
    return lat, lon, x, y


#: Columns of footprints.csv: each scene's grid, read once from its header.
FOOTPRINT_COLUMNS = ("scene_id", "path", "time", "content", "band", "crs_wkt", "a", "b",
                     "c", "d", "e", "f", "rows", "cols")


def run_scene_footprints(archive: str, scenes_csv: str, footprints_csv: str) -> pd.DataFrame:
    """Read every scene's header once (CRS, transform, shape; no pixels)."""
    scenes = pd.read_csv(scenes_csv, dtype=str, keep_default_na=False)
    rows = []
    for scene in scenes.itertuples(index=False):
        try:
            with open_scene(Path(archive) / scene.path, scene.content,
                            bands=scene.band or None) as sc:
                t = sc.transform
                rows.append((scene.scene_id, scene.path, scene.time, scene.content,
                             scene.band, sc.crs.to_wkt(), t.a, t.b, t.c, t.d, t.e, t.f,
                             sc.shape[0], sc.shape[1]))
        except ArchiveError as exc:
            # A broken scene is left out (and logged); it must not stop the run.
            log.error("scene %s left out: %s", scene.scene_id, exc)
    table = pd.DataFrame(rows, columns=list(FOOTPRINT_COLUMNS))
    with atomic_path(Path(footprints_csv)) as tmp:
        table.to_csv(tmp, index=False, float_format="%.17g", lineterminator="\n")
    log.info("footprints of %d of %d scenes", len(table), len(scenes))
    return table


def match_track(footprints: pd.DataFrame, track: pd.DataFrame, deployment_id: str, *,
                radii_m: list[float], coverage_threshold: float) -> pd.DataFrame:
    """Scenes (and radii) that serve one track: the scene time lies within the track and
    the scene footprint covers at least ``coverage_threshold`` of the circle."""
    from affine import Affine
    from pyproj import CRS

    radii = np.asarray(sorted(radii_m), dtype=float)
    t0, t1 = track["time"].iloc[0], track["time"].iloc[-1]
    times = pd.to_datetime(footprints["time"], utc=True).dt.tz_localize(None)
    inside = footprints[(times >= t0) & (times <= t1)]
    rows = []
    crs_cache: dict[str, CRS] = {}
    for fp in inside.itertuples(index=False):
        crs = crs_cache.setdefault(fp.crs_wkt, CRS.from_wkt(fp.crs_wkt))
        t = np.datetime64(pd.Timestamp(fp.time).tz_localize(None), "ns")
        lat, lon, x, y = position_at(track, [t], crs)
        if not np.isfinite(x[0]):
            continue
        radii_proj = openwater.projected_radius(radii, crs, lon[0], lat[0])
        transform = Affine(fp.a, fp.b, fp.c, fp.d, fp.e, fp.f)
        cover = openwater.scene_coverage(transform, (int(fp.rows), int(fp.cols)), x[0], y[0],
                                         radii_proj)
        for r, c in zip(radii, np.atleast_1d(cover)):
            if c >= coverage_threshold:
                rows.append((deployment_id, fp.scene_id, fp.path, fp.time, fp.content,
                             fp.band, float(r), float(c)))
    matches = pd.DataFrame(rows, columns=list(MATCH_COLUMNS))
    return matches.sort_values(["time", "scene_id", "radius_m"], kind="stable")


def run_match_scenes(footprints_csv: str, insitu_status: str, matches_csv: str, *,
                     radii_m: list[float], coverage_threshold: float) -> pd.DataFrame:
    """Checkpoint of one deployment: write its matches.csv (empty when its track failed)."""
    footprints = pd.read_csv(footprints_csv, dtype={"band": str, "scene_id": str},
                             keep_default_na=False)
    record = read_status(insitu_status)
    if record.get("ok"):
        matches = match_track(footprints, read_track(record["track"]),
                              record["deployment_id"], radii_m=radii_m,
                              coverage_threshold=coverage_threshold)
    else:
        matches = pd.DataFrame(columns=list(MATCH_COLUMNS))
    with atomic_path(Path(matches_csv)) as tmp:
        matches.to_csv(tmp, index=False, float_format="%.10g", lineterminator="\n")
    log.info("matched %d (scene, radius) pairs", len(matches))
    return matches


def _fractions(archive: Path, track: pd.DataFrame, matched: list[dict], radii_m: list[float],
               coverage_threshold: float, mask_codes: dict) -> pd.DataFrame:
    radii = np.asarray(sorted(radii_m), dtype=float)
    rows = []
    by_scene: dict[str, dict] = {}
    for m in matched:
        by_scene.setdefault(m["scene_id"], m)
    for scene_id, m in sorted(by_scene.items(), key=lambda kv: (kv[1]["time"], kv[0])):
        if m["content"] not in _READABLE:
            continue
        t = np.datetime64(pd.Timestamp(m["time"]).tz_localize(None), "ns")
        with open_scene(archive / m["path"], m["content"], mask_codes=mask_codes) as sc:
            lat, lon, x, y = position_at(track, [t], sc.crs)
            if not np.isfinite(x[0]):
                continue
            radii_proj = openwater.projected_radius(radii, sc.crs, lon[0], lat[0])
            window = openwater.circle_window(sc.transform, sc.shape, x[0], y[0],
                                             float(np.max(radii_proj)))
            if window is None:
                continue
            # canonical codes (0 water, 1 ice, 255 no data), whatever the file's coding
            pixels = sc.read_window(*window)
            stats = openwater.circle_fractions(
                pixels, window[0].start, window[1].start, sc.transform, sc.shape, x[0], y[0],
                radii_proj, coverage_threshold=coverage_threshold)
        for k, r in enumerate(radii):
            rows.append((scene_id, m["time"], float(r), float(stats.f_ow[k]),
                         float(stats.coverage[k]), int(stats.n_water[k]),
                         int(stats.n_valid[k]), int(stats.n_circle[k]),
                         bool(stats.accepted[k])))
    return pd.DataFrame(rows, columns=list(FRACTION_COLUMNS))


def run_radar(archive: str, insitu_status: str, matches_csv: str, status_path: str, *,
              radii_m: list[float], coverage_threshold: float, mask_codes: dict) -> dict:
    """Open-water fractions of one deployment from its matched scenes."""
    matched = pd.read_csv(matches_csv, dtype={"band": str, "scene_id": str},
                          keep_default_na=False).to_dict(orient="records")
    status = Path(status_path)
    work_dir = status.parent.parent / "work"
    dep = status.parent.parent.name

    def work() -> dict:
        record = read_status(insitu_status)
        track = read_track(record["track"])
        table = _fractions(Path(archive), track, matched, radii_m, coverage_threshold,
                           mask_codes)
        n_backscatter = len({m["scene_id"] for m in matched if m["content"] not in _READABLE})
        if n_backscatter:
            log.warning("%d matched backscatter scenes await classification and are not "
                        "read by the radar source", n_backscatter)
        path = work_dir / "radar_fractions.csv"
        path.parent.mkdir(parents=True, exist_ok=True)
        with atomic_path(path) as tmp:
            table.to_csv(tmp, index=False, float_format="%.10g", lineterminator="\n")
        if table.empty and matched and not n_backscatter:
            raise StageFailed(f"deployment {dep}: none of its {len(matched)} matched scenes "
                              "could be read around the buoy")
        return {"radar_fractions": str(path), "n_scenes": int(table["scene_id"].nunique()),
                "n_backscatter_pending": n_backscatter}

    return run_stage("radar", dep, status, work, upstream=[Path(insitu_status)])
