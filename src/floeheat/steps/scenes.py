"""Stages ``scene_footprints``, ``match_scenes`` (checkpoint) and ``radar``.

Each scene's header is opened once per run (CRS, transform, shape: no pixels) into a
footprint table. Per deployment, the checkpoint keeps the scenes whose time lies within
the track and the radii whose circle the scene's footprint covers at least to the
threshold (science.md: the same rule decides matching and counting). The radar stage
then reads, per matched scene, only the window of pixels the deployment's largest
circle needs, and computes f_ow and the exact valid
coverage for every radius from that one read, and the buoy's floe context
(:mod:`floeheat.floes`) in the circle of ``floe_radius_m`` from the same window.

Masks are read from the archive; backscatter acquisitions from their classified stores
(stage ``classify``, :func:`floeheat.steps.classify.open_classified`), read alike. An
acquisition that the archive also holds as a mask (a matched mask of the same time) is
served by the mask. Column ``content`` of the fractions and floe tables, and the record's
``radar_input``, say which each value came from.
"""

from __future__ import annotations

import logging
from collections import Counter
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pandas as pd

from floeheat import openwater
from floeheat import track as trk
from floeheat.errors import ArchiveError
from floeheat.io.scenes import open_scene
from floeheat.steps.status import StageFailed, atomic_path, read_status, run_stage

__all__ = ["MATCH_COLUMNS", "FRACTION_COLUMNS", "FLOE_COLUMNS", "FOOTPRINT_COLUMNS",
           "run_scene_footprints",
           "match_track", "run_match_scenes", "run_match_part", "run_radar", "run_radar_part",
           "SharedScenes", "scene_uses", "position_at", "positions_at", "read_track"]

log = logging.getLogger(__name__)

#: Columns of matches.csv.
MATCH_COLUMNS = ("deployment_id", "scene_id", "path", "time", "content", "band",
                 "radius_m", "footprint_coverage")
#: Columns of a deployment's radar_fractions.csv.
FRACTION_COLUMNS = ("scene_id", "time", "radius_m", "f_ow", "coverage", "n_water",
                    "n_valid", "n_circle", "accepted", "content")
#: Columns of a deployment's floe_context.csv (one row per scene; floes.FloeContext).
FLOE_COLUMNS = ("scene_id", "time", "content", "radius_m", "buoy_class", "floe_area_m2",
                "floe_diameter_m", "floe_at_rim", "distance_to_water_m",
                "distance_to_nodata_m", "n_leads_crossing", "n_leads_touching", "n_circle")
#: Content labels of the two kinds of input.
MASK, CLASSIFIED = "mask", "classified backscatter"


def read_track(path: str | Path) -> pd.DataFrame:
    """Read a track written by stage insitu."""
    return pd.read_csv(path, parse_dates=["time"])


def positions_at(track: pd.DataFrame, times) -> tuple[np.ndarray, np.ndarray]:
    """Track latitude and longitude at ``times`` [degrees], NaN outside the track: one
    interpolation for all the times (a deployment's scenes are placed in one call)."""
    lat, lon, *_ = trk.interpolate_positions(track["time"].values,
                                             track["latitude"].values,
                                             track["longitude"].values,
                                             np.asarray(times, dtype="datetime64[ns]"))
    return lat, lon


def _projected(lat: np.ndarray, lon: np.ndarray, crs) -> tuple[np.ndarray, np.ndarray]:
    ok = np.isfinite(lat)
    x = np.full(lat.shape, np.nan)
    y = np.full(lat.shape, np.nan)
    if ok.any():
        x[ok], y[ok] = trk.to_working_crs(lat[ok], lon[ok], crs)
    return x, y


def position_at(track: pd.DataFrame, times, crs) -> tuple[np.ndarray, np.ndarray,
                                                          np.ndarray, np.ndarray]:
    """Track position at ``times``: (lat, lon, x, y) with x/y in ``crs`` (NaN outside)."""
    lat, lon = positions_at(track, times)
    return (lat, lon, *_projected(lat, lon, crs))


def _scene_time(text) -> np.datetime64:
    return np.datetime64(pd.Timestamp(text).tz_localize(None), "ns")


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


#: How far (in multiples of the largest ground radius, in the scene's projection) a
#: position may lie from a footprint's bounding box before the scene is left out without
#: computing its coverage. A map projection's scale factor would have to exceed this for
#: such a scene to reach the circle (polar stereographic and UTM stay below 1.1 where sea
#: ice is); the exact coverage decides for every scene within reach.
_REACH_FACTOR = 4.0


def _in_scene_crs(footprints: pd.DataFrame, lat: np.ndarray,
                  lon: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Each position (one per footprint row) in that scene's CRS: one projection per CRS."""
    x = np.full(len(footprints), np.nan)
    y = np.full(len(footprints), np.nan)
    finite = np.isfinite(lat) & np.isfinite(lon)
    for wkt in pd.unique(footprints["crs_wkt"]):
        sel = (footprints["crs_wkt"].to_numpy() == wkt) & finite
        if sel.any():
            x[sel], y[sel] = trk.to_working_crs(lat[sel], lon[sel], wkt)
    return x, y


def _near_footprint(footprints: pd.DataFrame, x: np.ndarray, y: np.ndarray,
                    radius_m: float) -> np.ndarray:
    """Whether each position (in its scene's CRS) lies within reach of that scene's
    bounding box (from the affine corners); False for NaN positions."""
    a, b, c, d, e, f = (footprints[k].to_numpy(float) for k in "abcdef")
    rows, cols = footprints["rows"].to_numpy(float), footprints["cols"].to_numpy(float)
    cx = np.stack([c, c + a * cols, c + b * rows, c + a * cols + b * rows])
    cy = np.stack([f, f + d * cols, f + e * rows, f + d * cols + e * rows])
    dx = np.maximum(0.0, np.maximum(cx.min(0) - x, x - cx.max(0)))
    dy = np.maximum(0.0, np.maximum(cy.min(0) - y, y - cy.max(0)))
    with np.errstate(invalid="ignore"):
        return np.hypot(dx, dy) <= _REACH_FACTOR * float(radius_m)


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
    lats, lons = positions_at(track, [_scene_time(t) for t in inside["time"]])
    xs, ys = _in_scene_crs(inside, lats, lons)
    near = _near_footprint(inside, xs, ys, radii[-1]) if coverage_threshold > 0 \
        else np.isfinite(xs)
    for fp, lat, lon, x, y, ok in zip(inside.itertuples(index=False), lats, lons, xs, ys,
                                      near):
        if not ok:
            continue
        crs = crs_cache.setdefault(fp.crs_wkt, CRS.from_wkt(fp.crs_wkt))
        radii_proj = openwater.projected_radius(radii, crs, lon, lat)
        transform = Affine(fp.a, fp.b, fp.c, fp.d, fp.e, fp.f)
        cover = openwater.scene_coverage(transform, (int(fp.rows), int(fp.cols)), x, y,
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


def run_match_part(footprints_csv: str, insitu_status: dict[str, str],
                   matches_csv: dict[str, str], part_csv: str, *, radii_m: list[float],
                   coverage_threshold: float) -> pd.DataFrame:
    """Checkpoint of one part: each member's matches.csv, then the part's (all members'
    rows, in member order), which tells the workflow which scene files the part reads."""
    frames = [run_match_scenes(footprints_csv, insitu_status[dep], matches_csv[dep],
                               radii_m=radii_m, coverage_threshold=coverage_threshold)
              for dep in matches_csv]
    frames = [f for f in frames if len(f)]
    table = (pd.concat(frames, ignore_index=True) if frames
             else pd.DataFrame(columns=list(MATCH_COLUMNS)))
    with atomic_path(Path(part_csv)) as tmp:
        table.to_csv(tmp, index=False, float_format="%.10g", lineterminator="\n")
    return table


def _inputs(archive: Path, matched: list[dict], classified: dict, mask_codes: dict) -> list:
    """(label, time, content, opener) per scene to read: masks, and the classified store
    of each backscatter acquisition whose time no matched mask shares."""
    out, seen = [], set()
    mask_times = {m["time"] for m in matched if m["content"] == "mask"}
    for m in sorted(matched, key=lambda m: (m["time"], m["scene_id"])):
        if m["content"] == "mask" and m["scene_id"] not in seen:
            seen.add(m["scene_id"])
            out.append((m["scene_id"], m["time"], MASK, lambda m=m: open_scene(
                archive / m["path"], "mask", mask_codes=mask_codes)))
        elif (m["content"] == "backscatter" and m["time"] not in mask_times
              and m["scene_id"] in classified):
            store = Path(classified[m["scene_id"]])
            label = store.name.removesuffix(".zarr")
            if label not in seen and store.exists():
                seen.add(label)
                out.append((label, m["time"], CLASSIFIED, lambda s=store: _open_classified(s)))
    return out


def _open_classified(store: Path):
    # scikit-image comes with the classifier: only deployments with backscatter pay it
    from floeheat.steps.classify import open_classified

    return open_classified(store)


#: At most this many scenes stay open between the deployments of a radar job (file
#: handles: well under a process's usual limit of 1024 open files).
MAX_SHARED_SCENES = 64


class SharedScenes:
    """Scene handles kept open between the deployments of one radar job that read the
    same scene, so that each is opened once per job rather than once per deployment
    (opening reads the header and CRS: a few milliseconds, a fifth to a third of what
    reading and counting a buoy's window costs). ``uses`` counts, per
    ``(content, label)`` of :func:`_inputs`, the deployments that will read it; a
    handle is closed after its last use, when it fails, or at once when ``max_open``
    are already kept. Reading from a kept handle gives the same pixels as from a fresh
    one.

    Examples
    --------
    >>> class Handle:
    ...     def close(self): print("closed")
    >>> shared = SharedScenes(Counter({("mask", "a"): 2}))
    >>> with shared.scene(("mask", "a"), Handle) as h1: pass
    >>> with shared.scene(("mask", "a"), lambda: None) as h2: pass
    closed
    >>> h1 is h2, shared.n_opened
    (True, 1)
    """

    def __init__(self, uses: Counter | None = None, max_open: int = MAX_SHARED_SCENES):
        self._left = Counter(uses or {})
        self._kept: dict = {}
        self.max_open = int(max_open)
        self.n_opened = 0

    @contextmanager
    def scene(self, key, opener):
        handle = self._kept.pop(key, None)
        if handle is None:
            handle = opener()
            self.n_opened += 1
        self._left[key] -= 1
        try:
            yield handle
        except BaseException:
            handle.close()
            raise
        if self._left[key] > 0 and len(self._kept) < self.max_open:
            self._kept[key] = handle
        else:
            handle.close()

    def close(self) -> None:
        """Close every handle still kept (a use counted but never made)."""
        for handle in self._kept.values():
            handle.close()
        self._kept.clear()


def _fractions(archive: Path, track: pd.DataFrame, matched: list[dict], radii_m: list[float],
               coverage_threshold: float, mask_codes: dict, classified: dict | None = None,
               floe_radius_m: float | None = None,
               shared: SharedScenes | None = None) -> tuple[pd.DataFrame, pd.DataFrame]:
    from floeheat import floes  # scipy.ndimage: only the radar stage pays its import

    radii = np.asarray(sorted(radii_m), dtype=float)
    floe_r = float(min(floe_radius_m or radii[-1], radii[-1]))
    rows, floe_rows = [], []
    inputs = _inputs(archive, matched, classified or {}, mask_codes)
    shared = shared if shared is not None else SharedScenes()
    lats, lons = positions_at(track, [_scene_time(i[1]) for i in inputs])
    for (label, time, content, opener), lat, lon in zip(inputs, lats, lons):
        if not np.isfinite(lat):
            continue
        with shared.scene((content, label), opener) as sc:
            x, y = _projected(np.array([lat]), np.array([lon]), sc.crs)
            radii_proj = openwater.projected_radius(radii, sc.crs, lon, lat)
            window = openwater.circle_window(sc.transform, sc.shape, x[0], y[0],
                                             float(np.max(radii_proj)))
            if window is None:
                continue
            # canonical codes (0 water, 1 ice, 255 no data), whatever the file's coding
            pixels = sc.read_window(*window)
            stats = openwater.circle_fractions(
                pixels, window[0].start, window[1].start, sc.transform, sc.shape, x[0], y[0],
                radii_proj, coverage_threshold=coverage_threshold)
            k_scale = float(radii_proj[-1] / radii[-1])
            fc = floes.floe_context(pixels, window[0].start, window[1].start, sc.transform,
                                    sc.shape, x[0], y[0], floe_r * k_scale, k_scale)
        for k, r in enumerate(radii):
            rows.append((label, time, float(r), float(stats.f_ow[k]),
                         float(stats.coverage[k]), int(stats.n_water[k]),
                         int(stats.n_valid[k]), int(stats.n_circle[k]),
                         bool(stats.accepted[k]), content))
        floe_rows.append((label, time, content, floe_r, *fc))
    return (pd.DataFrame(rows, columns=list(FRACTION_COLUMNS)),
            pd.DataFrame(floe_rows, columns=list(FLOE_COLUMNS)))


def run_radar(archive: str, insitu_status: str, matches_csv: str, status_path: str, *,
              radii_m: list[float], coverage_threshold: float, mask_codes: dict,
              classified: dict | None = None, floe_radius_m: float | None = None,
              shared: SharedScenes | None = None) -> dict:
    """Open-water fractions and floe context of one deployment from its matched scenes.

    ``classified`` maps backscatter scene_id -> its classified store (stage classify);
    ``floe_radius_m`` is the circle of the floe context (at most the largest radius);
    ``shared``: scene handles shared with the other deployments of the job.
    """
    matched = _read_matches(matches_csv)
    status = Path(status_path)
    work_dir = status.parent.parent / "work"
    dep = status.parent.parent.name

    def work() -> dict:
        record = read_status(insitu_status)
        track = read_track(record["track"])
        table, floe_table = _fractions(Path(archive), track, matched, radii_m,
                                       coverage_threshold, mask_codes, classified,
                                       floe_radius_m, shared)
        missing = sorted({m["scene_id"] for m in matched if m["content"] == "backscatter"
                          and m["scene_id"] not in (classified or {})})
        if missing:
            log.warning("%d matched backscatter scenes have no classified store: %s",
                        len(missing), " ".join(missing))
        path = work_dir / "radar_fractions.csv"
        floe_path = status.parent.parent / "floe_context.csv"
        path.parent.mkdir(parents=True, exist_ok=True)
        with atomic_path(path) as tmp:
            table.to_csv(tmp, index=False, float_format="%.10g", lineterminator="\n")
        with atomic_path(floe_path) as tmp:
            floe_table.to_csv(tmp, index=False, float_format="%.10g", lineterminator="\n")
        if table.empty and matched:
            raise StageFailed(f"deployment {dep}: none of its {len(matched)} matched scenes "
                              "could be read around the buoy")
        per = floe_table.groupby("content")["scene_id"].nunique()
        used = [c for c in (MASK, CLASSIFIED) if per.get(c, 0)]
        return {"radar_fractions": str(path), "floe_context": str(floe_path),
                "n_scenes": int(table["scene_id"].nunique()),
                "n_scenes_mask": int(per.get(MASK, 0)),
                "n_scenes_classified": int(per.get(CLASSIFIED, 0)),
                "radar_input": " and ".join(used) or "none"}

    return run_stage("radar", dep, status, work, upstream=[Path(insitu_status)])


def _read_matches(matches_csv: str | Path) -> list[dict]:
    return pd.read_csv(matches_csv, dtype={"band": str, "scene_id": str},
                       keep_default_na=False).to_dict(orient="records")


def scene_uses(archive: str | Path, matches_csvs: list, classified: dict | None,
               mask_codes: dict) -> Counter:
    """How many of the deployments (their matches.csv) read each scene, keyed as
    :class:`SharedScenes` keys them; a matches.csv that cannot be read counts none."""
    uses: Counter = Counter()
    for path in matches_csvs:
        try:
            matched = _read_matches(path)
        except (OSError, ValueError, pd.errors.ParserError):
            continue
        uses.update((content, label) for label, _, content, _ in
                    _inputs(Path(archive), matched, classified or {}, mask_codes))
    return uses


def run_radar_part(archive: str, insitu_status: dict[str, str], matches_csv: dict[str, str],
                   status: dict[str, str], record_path: str, *, classified: dict | None = None,
                   mask_codes: dict, **settings) -> dict:
    """Stage radar for the deployments of a part (:func:`floeheat.steps.parts.run_part`),
    one after another, each scene opened once for all of them (:class:`SharedScenes`);
    ``settings`` are those of :func:`run_radar`. A member whose matches cannot be read
    counts no uses; its own run then records the failure."""
    from floeheat.steps.parts import run_part

    uses = scene_uses(archive, list(matches_csv.values()), classified, mask_codes)
    shared = SharedScenes(uses)
    try:
        record = run_part("radar", status, lambda dep: run_radar(
            archive, insitu_status[dep], matches_csv[dep], status[dep], classified=classified,
            mask_codes=mask_codes, shared=shared, **settings), record_path)
    finally:
        shared.close()
    log.info("radar: %d scene files opened for %d readings", shared.n_opened,
             sum(uses.values()))
    return record
