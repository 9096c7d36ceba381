"""``floeheat check``: validate a whole archive before a long run, and summarise it.

Every file the archive names or holds is read through the reader layer
(:mod:`floeheat.io`), so the check sees exactly what the workflow will see. Problems
are collected, never raised: a reader's :class:`~floeheat.errors.ArchiveError` gives
its problems; any other failure while reading a file becomes one problem naming that
file. After the files, cross-file checks: each deployment's analysis window against
its instrument records and its forcing, its position fixes, the radar scenes near its
track.

Errors (``blocking=True``) stop processing of the deployment or input concerned;
warnings (``blocking=False``) do not (a missing instrument, no scene near a track,
concentration not covering the window, a dead thermistor, ...).

The season that bounds analysis windows is the package default
(``constants.SEASON_NORTH``/``SEASON_SOUTH``, the same as config/config.yaml), chosen
by the hemisphere of each track; :func:`check_archive` takes another one.
"""

from __future__ import annotations

import os
import warnings
from collections import OrderedDict
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from floeheat import constants as C
from floeheat.errors import ArchiveError, ArchiveProblem

__all__ = ["CheckReport", "check_archive", "format_report", "clear_cache", "DEFAULT_SEASONS"]

#: Default analysis seasons by hemisphere, "MM-DD" (end exclusive), from the constants.
DEFAULT_SEASONS = {
    name: {"start": f"{m0:02d}-{d0:02d}", "end": f"{m1:02d}-{d1:02d}"}
    for name, ((m0, d0), (m1, d1)) in (("north", C.SEASON_NORTH), ("south", C.SEASON_SOUTH))
}
_DEPLOYMENTS = "deployments.csv"
_SCENES = "scenes.csv"
_READ_FIX = "check the file against archive-format.md, or copy it again from its source"
#: A sensor whose readings do not change over at least this many records reads as dead.
_CONSTANT_MIN_RECORDS = 10
#: Scene time in scenes.csv and in the file may differ by this much without a warning.
_SCENE_TIME_TOLERANCE = np.timedelta64(1, "h")


@dataclass
class CheckReport:
    """What :func:`check_archive` found.

    Attributes
    ----------
    root : Path
        The archive root checked.
    problems : list of ArchiveProblem
        Every problem found, errors and warnings, in the order found.
    summary : list of dict
        One dict per deployment read from deployments.csv (keys: see
        :func:`check_archive`).
    """

    root: Path
    problems: list[ArchiveProblem] = field(default_factory=list)
    summary: list[dict] = field(default_factory=list)

    @property
    def blocking(self) -> bool:
        """Whether any problem blocks processing."""
        return any(p.blocking for p in self.problems)

    @property
    def errors(self) -> list[ArchiveProblem]:
        """The blocking problems."""
        return [p for p in self.problems if p.blocking]

    @property
    def warnings(self) -> list[ArchiveProblem]:
        """The non-blocking problems."""
        return [p for p in self.problems if not p.blocking]


# ---------------------------------------------------------------- memo of reads

#: Successful reads of this process, by reader and by the files' identity (resolved path,
#: modification time and size): checking an archive again after fixing one file (or
#: checking copies that link to the same files) reads only what changed. Failures are
#: never kept, so every problem is found afresh.
_MEMO: OrderedDict = OrderedDict()
_MEMO_SIZE = 256


def _identity(paths) -> tuple:
    out = []
    for p in paths:
        st = os.stat(p)
        out.append((str(Path(p).resolve()), st.st_mtime_ns, st.st_size))
    return tuple(out)


def _arg_key(arg):
    """A hashable stand-in of an argument; paths by the file they resolve to."""
    if isinstance(arg, Path):
        return str(arg.resolve())
    if isinstance(arg, list | tuple):
        return tuple(_arg_key(a) for a in arg)
    return arg


def _memo(func, paths, *args, **kwargs):
    """``func(*args, **kwargs)``, remembered for the identity of ``paths``."""
    try:
        key = (func.__module__, func.__qualname__, _identity(paths),
               tuple(_arg_key(a) for a in args), tuple(sorted(kwargs.items())))
        hash(key)
    except (OSError, TypeError):
        return func(*args, **kwargs)
    if key in _MEMO:
        _MEMO.move_to_end(key)
        return _MEMO[key]
    value = func(*args, **kwargs)
    _MEMO[key] = value
    while len(_MEMO) > _MEMO_SIZE:
        _MEMO.popitem(last=False)
    return value


def clear_cache() -> None:
    """Forget the reads remembered by earlier checks of this process."""
    _MEMO.clear()


# ---------------------------------------------------------------- time helpers


def _ts(value) -> pd.Timestamp | None:
    if value is None or (not isinstance(value, str) and pd.isna(value)) or value == "":
        return None
    return pd.Timestamp(value)


def _span(times) -> tuple[pd.Timestamp, pd.Timestamp] | None:
    t = np.asarray(times, dtype="datetime64[ns]")
    t = t[~np.isnat(t)]
    if t.size == 0:
        return None
    return pd.Timestamp(t.min()), pd.Timestamp(t.max())


def _step(times) -> pd.Timedelta:
    """Median sampling step of a record (zero for fewer than two times)."""
    t = np.sort(np.asarray(times, dtype="datetime64[ns]"))
    if t.size < 2:
        return pd.Timedelta(0)
    return pd.Timedelta(np.median(np.diff(t).astype("int64")), "ns")


def _period(a, b) -> str:
    """Compact period text: '2025-06-24..07-20' within a year, else both dates in full.

    Examples
    --------
    >>> _period(pd.Timestamp("2025-06-24T06:00"), pd.Timestamp("2025-07-20"))
    '2025-06-24 06:00..07-20'
    >>> _period(None, None)
    '-'
    """
    if a is None or b is None:
        return "-"
    a, b = pd.Timestamp(a), pd.Timestamp(b)

    def fmt(t, year=True):
        text = t.strftime("%Y-%m-%d" if year else "%m-%d")
        return text + (t.strftime(" %H:%M") if (t.hour, t.minute) != (0, 0) else "")

    return f"{fmt(a)}..{fmt(b, year=a.year != b.year)}"


def _coverage(bnds, w0, w1) -> tuple[bool, pd.Timestamp | None, pd.Timestamp | None]:
    """Whether intervals ``bnds`` (n, 2) cover [w0, w1] without a gap; their span.

    Examples
    --------
    >>> b = np.array([["2025-06-01", "2025-06-02"], ["2025-06-02", "2025-06-03"]],
    ...              dtype="datetime64[ns]")
    >>> _coverage(b, pd.Timestamp("2025-06-01T06"), pd.Timestamp("2025-06-03"))[0]
    True
    >>> _coverage(b[[0]], pd.Timestamp("2025-06-01T06"), pd.Timestamp("2025-06-03"))[0]
    False
    """
    b = np.asarray(bnds, dtype="datetime64[ns]").reshape(-1, 2)
    b = b[~np.isnat(b).any(axis=1)]
    if b.size == 0:
        return False, None, None
    b = b[np.argsort(b[:, 0], kind="stable")]
    span = (pd.Timestamp(b[:, 0].min()), pd.Timestamp(b[:, 1].max()))
    if w0 is None or w1 is None:
        return False, *span
    reach = None
    for lo, hi in b:
        if reach is None:
            if lo > np.datetime64(w0):
                return False, *span
            reach = hi
        elif lo > reach:
            if reach < np.datetime64(w1):
                return False, *span
            break
        reach = max(reach, hi)
        if reach >= np.datetime64(w1):
            return True, *span
    return bool(reach is not None and reach >= np.datetime64(w1)), *span


# ---------------------------------------------------------------- the checker


class _Checker:
    """Collects problems while walking an archive (one instance per check)."""

    def __init__(self, root: Path, seasons: dict, radius_m: float, coverage_threshold: float,
                 max_speed_m_s: float):
        self.root = Path(root)
        self.seasons = seasons
        self.radius_m = float(radius_m)
        self.threshold = float(coverage_threshold)
        self.max_speed = float(max_speed_m_s)
        self.problems: list[ArchiveProblem] = []
        self._seen: set[tuple] = set()
        prefixes = {str(self.root) + os.sep, str(self.root.resolve()) + os.sep,
                    self.root.as_posix().rstrip("/") + "/",
                    self.root.resolve().as_posix() + "/"}
        self._prefixes = sorted((p for p in prefixes if p not in ("./", "." + os.sep)),
                                key=len, reverse=True)

    # ------------------------------------------------------------ collecting

    def rel(self, text) -> str:
        """A path (or text holding paths) relative to the archive root."""
        text = str(text)
        for prefix in self._prefixes:
            text = text.replace(prefix, "")
        return text

    def add(self, problem: ArchiveProblem, blocked: set | None = None, key=None) -> None:
        p = ArchiveProblem(self.rel(problem.file), self.rel(problem.where),
                           self.rel(problem.problem), problem.fix, problem.blocking)
        k = (p.file, p.where, p.problem, p.blocking)
        if k not in self._seen:
            self._seen.add(k)
            self.problems.append(p)
        if blocked is not None and p.blocking:
            blocked.add(key)

    def error(self, file, where, problem, fix, *, blocked=None, key=None):
        self.add(ArchiveProblem(str(file), where, problem, fix, True), blocked, key)

    def warn(self, file, where, problem, fix):
        self.add(ArchiveProblem(str(file), where, problem, fix, False))

    def guard(self, rel: str, func, *args, blocked=None, key=None, **kwargs):
        """``func(*args, **kwargs)``, or None with its problems collected."""
        try:
            return func(*args, **kwargs)
        except ArchiveError as exc:
            for p in exc.problems:
                self.add(p, blocked, key)
        except Exception as exc:  # noqa: BLE001 - any failure of a reader names its file
            self.error(rel, "", f"cannot be read ({type(exc).__name__}: {exc})", _READ_FIX,
                       blocked=blocked, key=key)
        return None

    # ------------------------------------------------------------ sheets

    def sheet(self, reader, name: str) -> tuple[pd.DataFrame | None, list[int]]:
        """A sheet with every problem collected: the rows without problems (None when
        the sheet cannot be read at all) and the 0-based rows set aside."""
        from floeheat.steps.index import tolerant_read

        try:
            return reader(self.root), []
        except ArchiveError as exc:
            for p in exc.problems:
                self.add(p)
        except Exception as exc:  # noqa: BLE001
            self.error(name, "", f"cannot be read ({type(exc).__name__}: {exc})",
                       "save it as UTF-8 CSV with a header row, as archive-format.md says")
            return None, []
        if not (self.root / name).is_file():
            return None, []
        try:  # the rows without problems (paths not checked: missing files stay listed)
            table, rejected = tolerant_read(reader, self.root, name)
            return table, [i for i, _ in rejected]
        except Exception:  # noqa: BLE001 - a problem of the whole sheet, reported above
            return None, []

    def raw_rows(self, name: str) -> list[dict]:
        """The sheet's rows as stripped strings (empty list when unreadable)."""
        try:
            raw = pd.read_csv(self.root / name, dtype=str, keep_default_na=False,
                              skipinitialspace=True)
        except Exception:  # noqa: BLE001
            return []
        raw.columns = [str(c).strip() for c in raw.columns]
        return [{k: str(v).strip() for k, v in r.items()} for r in raw.to_dict("records")]

    def raw_lines(self, name: str, column: str) -> dict[str, int]:
        """ID -> editor line (header = line 1) of its first row in a sheet."""
        try:
            raw = pd.read_csv(self.root / name, dtype=str, keep_default_na=False,
                              skipinitialspace=True)
        except Exception:  # noqa: BLE001
            return {}
        raw.columns = [str(c).strip() for c in raw.columns]
        out: dict[str, int] = {}
        if column in raw.columns:
            for i, value in enumerate(raw[column]):
                out.setdefault(str(value).strip(), i + 2)
        return out


def _files(row: dict, column: str) -> str | None:
    value = row.get(column)
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return None
    value = str(value).strip()
    return value or None


def _join(files: list[str], most: int = 3) -> str:
    shown = ", ".join(files[:most])
    return shown + (f" and {len(files) - most} more" if len(files) > most else "")


# ---------------------------------------------------------------- gridded inputs


def _open_series(ck: _Checker, opener, files: list[str]):
    """Open ``files`` as one series; a file with a problem is reported and left out,
    and the others are opened again, until the series opens or no file is left."""
    files = list(files)
    while files:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                paths = [ck.root / f for f in files]
                return _memo(opener, paths, paths), files
        except ArchiveError as exc:
            bad = []
            for p in exc.problems:
                ck.add(p)
                named = [f for f in files if f in ck.rel(p.file).split(" and ")]
                bad.extend(named[-1:])
            if not bad:
                return None, []
            files = [f for f in files if f not in bad]
        except Exception as exc:  # noqa: BLE001 - name every file of the failed series
            ck.error(_join(files), "", f"cannot be read together ({type(exc).__name__}: "
                     f"{exc})", _READ_FIX)
            return None, []
    return None, []


def _gridded(ck: _Checker, named: set[str], tables_read: bool) -> dict:
    """Classify every NetCDF file no sheet names (as the workflow's index does) and
    open each kind through its reader."""
    from floeheat.io.gridded import open_bathymetry, open_concentration, open_shortwave
    from floeheat.steps.index import GRIDDED_KINDS, classify_gridded

    listing: dict[str, list[str]] = {kind: [] for kind in GRIDDED_KINDS}
    for path in sorted(ck.root.rglob("*.nc")):
        rel = path.relative_to(ck.root).as_posix()
        if rel in named or not path.is_file():
            continue
        kind = ck.guard(rel, _memo, classify_gridded, [path], path)
        if kind:
            listing[kind].append(rel)
        elif kind is None and tables_read and (rel, "") not in {(p.file, p.where)
                                                                 for p in ck.problems}:
            ck.warn(rel, "standard_name",
                    "no table names the file and no variable has a standard name of a "
                    "gridded input (shortwave, concentration, bathymetry): it is ignored",
                    "give the data variable its CF standard_name, or remove the file")
    out = {"listing": listing, "shortwave": None, "shortwave_files": [],
           "concentration": None, "concentration_files": []}
    for kind, opener in (("shortwave", open_shortwave), ("concentration", open_concentration)):
        if listing[kind]:
            out[kind], out[f"{kind}_files"] = _open_series(ck, opener, listing[kind])
    for rel in listing["bathymetry"]:
        ck.guard(rel, _memo, open_bathymetry, [ck.root / rel], ck.root / rel)
    return out


def _grid_fraction_inside(ds, var: str, lat, lon) -> float | None:
    """Share of positions inside a gridded field's horizontal extent (None: unknown)."""
    import pyproj

    lat, lon = np.asarray(lat, float), np.asarray(lon, float)
    ok = np.isfinite(lat) & np.isfinite(lon)
    if not ok.any():
        return None
    lat, lon = lat[ok], lon[ok]
    da = ds[var]
    if "latitude" in da.dims and "longitude" in da.dims:
        la, lo = ds["latitude"].values, ds["longitude"].values
        if ds.attrs.get("longitude_range") == "0..360":
            lon = lon % 360.0
        inside = ((lat >= la.min()) & (lat <= la.max()) & (lon >= lo.min())
                  & (lon <= lo.max()))
        return float(inside.mean())
    if "x" in da.dims and "y" in da.dims and "crs_wkt" in ds.attrs and ds["x"].ndim == 1:
        tr = pyproj.Transformer.from_crs("EPSG:4326", pyproj.CRS.from_wkt(ds.attrs["crs_wkt"]),
                                         always_xy=True)
        x, y = tr.transform(lon, lat)
        xs, ys = ds["x"].values, ds["y"].values
        inside = (x >= xs.min()) & (x <= xs.max()) & (y >= ys.min()) & (y <= ys.max())
        return float(inside.mean())
    return None


# ---------------------------------------------------------------- scenes


def _scene_headers(ck: _Checker, scenes: pd.DataFrame | None) -> list[dict]:
    """Open every scene's header (CRS, transform, bands); the good ones."""
    out = []
    if scenes is None:
        return out
    for row in scenes.to_dict("records"):
        rel = str(row["path"])
        path = ck.root / rel
        if not path.is_file():
            continue  # reported by read_scene_table
        band = _files(row, "band")

        h = ck.guard(rel, _memo, _scene_header, [path], path, row["content"], band)
        if h is None:
            continue
        h = {**h, "scene_id": row["scene_id"], "path": rel, "time": row["time"],
             "content": row["content"]}
        if not h["crs"].is_projected:
            ck.error(rel, "CRS", f"the CRS {h['crs'].name!r} is not projected",
                     "reproject the scene to a projected CRS in metres (e.g. EPSG:3413)")
            continue
        t_table = np.datetime64(pd.Timestamp(h["time"]), "ns")
        t_file = h["file_time"]
        if not np.isnat(t_file) and abs(t_file - t_table) > _SCENE_TIME_TOLERANCE:
            ck.warn(rel, "attribute time_coverage_start",
                    f"the file's time {pd.Timestamp(t_file)} differs from the time "
                    f"{pd.Timestamp(t_table)} in scenes.csv",
                    "correct the time in scenes.csv or in the file")
        out.append(h)
    return out


def _scene_header(path, content, band) -> dict:
    from floeheat.io.scenes import open_scene

    with open_scene(path, content, bands=band) as sc:
        return {"crs": sc.crs, "transform": sc.transform, "shape": sc.shape,
                "file_time": sc.time}


def _scenes_near(ck: _Checker, headers: list[dict], track, w0, w1) -> dict:
    """Scenes whose time lies inside the track and whose footprint covers the circle of
    the default radius around the buoy at least to the threshold."""
    from floeheat import openwater
    from floeheat import track as trk

    out = {"near": 0, "near_mask": 0, "in_window": 0}
    if track is None or track.sizes["time"] < 2 or not headers:
        return out
    t = track["time"].values
    cand = [h for h in headers if t[0] <= np.datetime64(pd.Timestamp(h["time"]), "ns") <= t[-1]]
    if not cand:
        return out
    times = np.array([np.datetime64(pd.Timestamp(h["time"]), "ns") for h in cand])
    pos = trk.interpolate_track(t, track["latitude"].values, track["longitude"].values, times)
    lat, lon = pos["latitude"].values, pos["longitude"].values
    by_crs: dict[str, list[int]] = {}
    for k, h in enumerate(cand):
        by_crs.setdefault(h["crs"].to_wkt(), []).append(k)
    for idx in by_crs.values():
        idx = [k for k in idx if np.isfinite(lat[k])]
        if not idx:
            continue
        crs = cand[idx[0]]["crs"]
        x, y = trk.to_working_crs(lat[idx], lon[idx], crs)
        for j, k in enumerate(idx):
            h = cand[k]
            r = openwater.projected_radius([ck.radius_m], crs, lon[k], lat[k])
            cov = openwater.scene_coverage(h["transform"], h["shape"], x[j], y[j], r)
            if np.isfinite(cov[0]) and cov[0] >= ck.threshold:
                out["near"] += 1
                out["near_mask"] += h["content"] == "mask"
                if w0 is not None and w0 <= pd.Timestamp(h["time"]) <= w1:
                    out["in_window"] += 1
    return out


# ---------------------------------------------------------------- one deployment


def _instrument_checks(ck: _Checker, rel: str, ds, kind: str) -> None:
    """Warnings about a record that was read: dead sensors, empty optional variables."""
    if kind == "icemass":
        temp = np.asarray(ds["temperature"].values, float)
        depth = ds["depth"].values
        for k in range(temp.shape[1]):
            col = temp[:, k]
            finite = col[np.isfinite(col)]
            if finite.size == 0:
                ck.warn(rel, f"sensor at depth {depth[k]:g} m",
                        "the sensor has no reading (every value missing)",
                        "nothing to do if the sensor is dead: the ice-base detection "
                        "skips it")
            elif finite.size >= _CONSTANT_MIN_RECORDS and np.ptp(finite) == 0:
                ck.warn(rel, f"sensor at depth {depth[k]:g} m",
                        f"the sensor reads the constant {finite[0]:g} degC (a dead sensor?)",
                        "nothing to do if the sensor is dead: the ice-base detection is "
                        "robust to it; otherwise check the file")
        for var, what in (("ice_bottom_depth", "sounder ice bottom"),
                          ("heated_rise", "heating-cycle response")):
            if var in ds and not np.isfinite(ds[var].values).any():
                ck.warn(rel, f"variable {var}",
                        f"the {what} is missing everywhere (NaN or fill value)",
                        "fill in the data or remove the variable; it is not used")


def _positions(ds) -> int:
    lat, lon = np.asarray(ds["latitude"].values, float), np.asarray(ds["longitude"].values,
                                                                     float)
    return int((np.isfinite(lat) & np.isfinite(lon)).sum())


def _deployment(ck: _Checker, row: dict, line: int | None, forcing: dict, headers: list[dict],
                blocked: set) -> dict:
    from floeheat import track as trk
    from floeheat.budget import analysis_window
    from floeheat.io.gridded import read_shortwave_csv
    from floeheat.io.icemass import read_icemass
    from floeheat.io.profiles import read_profiles
    from floeheat.shortwave import sample_at_tracks

    dep = str(row["deployment_id"])
    at = f"line {line}" if line else f"deployment {dep}"
    info: dict = {"deployment_id": dep, "array_id": _files(row, "array_id"), "line": line}

    def err(file, where, problem, fix):
        ck.error(file, where, problem, fix, blocked=blocked, key=dep)

    # --- instruments
    records = {}
    unreadable = False
    for column, kind, reader, what in (("profile_file", "profiles", read_profiles, "profile"),
                                       ("icemass_file", "icemass", read_icemass,
                                        "ice mass-balance")):
        rel = _files(row, column)
        info[f"{kind}_file"] = rel
        if rel is None:
            if _files(row, "profile_file" if kind == "icemass" else "icemass_file"):
                term = ("heat storage" if kind == "profiles"
                        else "basal melt, conduction and ocean-to-ice heat")
                ck.warn(_DEPLOYMENTS, f"{at}, column {column}",
                        f"deployment {dep} has no {what} file: {term} will be absent and its "
                        "budget flagged incomplete",
                        f"add the {what} file if the deployment had that instrument")
            continue
        if not (ck.root / rel).is_file():
            blocked.add(dep)  # reported by read_deployments
            unreadable = True
            continue
        ds = ck.guard(rel, _memo, reader, [ck.root / rel], ck.root / rel, blocked=blocked,
                      key=dep)
        if ds is None:
            unreadable = True
            continue
        records[kind] = (rel, ds)
        _instrument_checks(ck, rel, ds, kind)
    prof = records.get("profiles", (None, None))[1]
    ice = records.get("icemass", (None, None))[1]
    info["instruments"] = "+".join(k for k, present in (("profiler", prof is not None),
                                                        ("string", ice is not None)) if present)
    ptimes = prof["time"].values if prof is not None else None
    itimes = ice["time"].values if ice is not None else None
    info["n_profiles"] = int(prof.sizes["profile"]) if prof is not None else 0
    info["profile_start"], info["profile_end"] = _span(ptimes) if ptimes is not None else (
        None, None)
    info["n_string_times"] = int(ice.sizes["time"]) if ice is not None else 0
    info["icemass_start"], info["icemass_end"] = _span(itimes) if itimes is not None else (
        None, None)
    spans = [s for s in (_span(ptimes) if ptimes is not None else None,
                         _span(itimes) if itimes is not None else None) if s]
    lo = max((s[0] for s in spans), default=None)
    hi = min((s[1] for s in spans), default=None)
    info["overlap_start"], info["overlap_end"] = (lo, hi) if lo is not None and lo < hi else (
        None, None)
    if len(spans) == 2 and info["overlap_start"] is None:
        err(_DEPLOYMENTS, f"{at}, columns profile_file/icemass_file",
            f"the profile record ({_period(*spans[0])}) and the ice mass-balance record "
            f"({_period(*spans[1])}) of deployment {dep} do not overlap",
            "check that both files belong to this deployment")

    # --- position fixes and track
    track = None
    fixes = [(ds["time"].values, ds["latitude"].values, ds["longitude"].values)
             for ds in (ice, prof) if ds is not None]
    counts = {kind: _positions(ds) for kind, (_, ds) in records.items()}
    if sum(counts.values()):
        try:
            track = trk.clean_track(fixes, max_speed_m_s=ck.max_speed)
        except Exception as exc:  # noqa: BLE001 - reported, never raised
            err(_DEPLOYMENTS, at, f"the track of deployment {dep} cannot be built from the "
                f"instruments' position fixes ({type(exc).__name__}: {exc})",
                "check the instruments' times, latitudes and longitudes")
    n_fixes = int(track.sizes["time"]) if track is not None else 0
    info["n_fixes"] = n_fixes
    info["n_fixes_rejected"] = int(track.attrs["n_rejected"]) if track is not None else 0
    for kind, (rel, _) in records.items():
        if counts[kind] == 0:
            problem = ("no valid position fix (latitude and longitude missing everywhere)")
            fix = "fill in the instrument's latitude and longitude"
            if n_fixes >= 2:
                ck.warn(rel, "variables latitude/longitude", problem + "; the other "
                        "instrument's fixes make the track", fix)
            else:
                err(rel, "variables latitude/longitude",
                    problem + f"; deployment {dep} has no track", fix)
    if records and n_fixes < 2 and all(counts.values()):
        err(_DEPLOYMENTS, at, f"deployment {dep} has {n_fixes} valid position fix(es) after "
            "removing impossible drift speeds; a track needs two",
            "check the instruments' latitude and longitude")
    hemi = "north"
    if track is not None and n_fixes:
        hemi = trk.hemisphere(track["latitude"].values)
    info["hemisphere"] = hemi

    # --- analysis window
    start, end = _ts(row.get("start")), _ts(row.get("end"))
    explicit = start is not None or end is not None
    w0 = w1 = None
    window_where = f"{at}, columns start/end"
    if not unreadable and (records or explicit):
        try:
            w0, w1 = analysis_window(start, end, ptimes, itimes, ck.seasons[hemi])
        except ValueError as exc:
            fix = ("move start/end inside the instrument records and the season, or leave "
                   "them empty to use the records' overlap" if explicit else
                   "check the instrument files, or give start and end in deployments.csv")
            err(_DEPLOYMENTS, window_where, f"deployment {dep}: {exc}", fix)
    info["window_start"], info["window_end"] = w0, w1
    info["window_from"] = (None if w0 is None else "deployments.csv" if explicit
                           else "records and season")
    if w0 is not None:
        for kind, times, what in (("profiles", ptimes, "profile"),
                                  ("icemass", itimes, "ice mass-balance")):
            if times is None:
                continue
            t0, t1 = _span(times)
            tol = _step(times)
            if w0 < t0 - tol or w1 > t1 + tol:
                err(_DEPLOYMENTS, window_where,
                    f"the analysis window {_period(w0, w1)} of deployment {dep} reaches "
                    f"outside its {what} record {_period(t0, t1)} ({records[kind][0]})",
                    "move start/end inside the records, or leave both empty to use the "
                    "records' overlap")
        if ptimes is not None:
            n_in = int(((ptimes >= np.datetime64(w0)) & (ptimes <= np.datetime64(w1))).sum())
            if n_in < 2:
                err(records["profiles"][0], "variable time",
                    f"{n_in} profile(s) inside the analysis window {_period(w0, w1)}; heat "
                    "storage needs two", "check the window in deployments.csv or the file")

    # --- shortwave
    sw_rel = _files(row, "shortwave_file")
    sw = None
    if sw_rel is not None:
        info["shortwave_source"] = "CSV"
        if (ck.root / sw_rel).is_file():
            sw = ck.guard(sw_rel, _memo, read_shortwave_csv, [ck.root / sw_rel],
                          ck.root / sw_rel, blocked=blocked, key=dep)
        else:
            blocked.add(dep)  # reported by read_deployments
        sw_files, sw_where = [sw_rel], "column time"
    else:
        info["shortwave_source"] = "gridded" if forcing["shortwave"] is not None else None
        sw = forcing["shortwave"]
        sw_files, sw_where = forcing["shortwave_files"], "variable time_bnds (time coverage)"
    info["shortwave_covers"] = None
    info["shortwave_start"] = info["shortwave_end"] = None
    if sw is None and sw_rel is None and not forcing["listing"]["shortwave"]:
        err(_DEPLOYMENTS, f"{at}, column shortwave_file",
            f"deployment {dep} has no shortwave: no gridded shortwave file in the archive and "
            "no shortwave_file", "add gridded shortwave files or a per-deployment CSV")
    elif sw is not None:
        covers, s0, s1 = _coverage(sw["time_bnds"].values, w0, w1)
        info["shortwave_start"], info["shortwave_end"] = s0, s1
        if w0 is not None:
            info["shortwave_covers"] = covers
            if not covers:
                err(_join(sw_files), sw_where,
                    f"the shortwave ({_period(s0, s1)}, with any gaps) does not cover the "
                    f"analysis window {_period(w0, w1)} of deployment {dep}",
                    "add shortwave for the whole window, or correct start/end in "
                    "deployments.csv")
            elif track is not None and n_fixes >= 2:
                _shortwave_at_buoy(ck, sw, sw_files, sw_rel, track, w0, w1, dep, err,
                                   sample_at_tracks)

    # --- concentration
    ci = forcing["concentration"]
    info["concentration_covers"] = None
    info["concentration_start"] = info["concentration_end"] = None
    if ci is not None:
        covers, s0, s1 = _coverage(ci["time_bnds"].values, w0, w1)
        info["concentration_start"], info["concentration_end"] = s0, s1
        if w0 is not None:
            inside = None
            if track is not None and n_fixes:
                sel = ((track["time"].values >= np.datetime64(w0))
                       & (track["time"].values <= np.datetime64(w1)))
                inside = _grid_fraction_inside(ci, "sea_ice_area_fraction",
                                               track["latitude"].values[sel],
                                               track["longitude"].values[sel])
            info["concentration_covers"] = bool(covers and (inside is None or inside == 1.0))
            if not covers:
                ck.warn(_join(forcing["concentration_files"]), "variable time_bnds (time "
                        "coverage)", f"the concentration ({_period(s0, s1)}, with any gaps) "
                        f"does not cover the analysis window {_period(w0, w1)} of deployment "
                        f"{dep}: the microwave open-water source has no season totals",
                        "add daily concentration files for the whole window")
            if inside is not None and inside < 1.0:
                ck.warn(_join(forcing["concentration_files"]), "variables x/y (grid extent)",
                        f"{100 * (1 - inside):.0f}% of the track of deployment {dep} in its "
                        "window lies outside the concentration grid",
                        "use a concentration grid that covers the drift")
    elif w0 is not None:
        ck.warn(_DEPLOYMENTS, at, f"the archive has no concentration files: deployment {dep} "
                "gets no microwave open-water fraction", "add daily sea-ice concentration "
                "files (concentration/) to compare with the radar source")

    # --- scenes
    near = _scenes_near(ck, headers, track, w0, w1)
    info["scenes_near"], info["mask_scenes_near"] = near["near"], near["near_mask"]
    info["scenes_in_window"] = near["in_window"]
    if track is not None and n_fixes >= 2 and near["near"] == 0:
        ck.warn(_SCENES if (ck.root / _SCENES).is_file() else "scenes/",
                f"deployment {dep}",
                f"no radar scene lies on the track of deployment {dep} (scene time inside "
                f"the track, at least {ck.threshold:g} of the {ck.radius_m / 1000:g} km circle "
                "inside the scene): the radar open-water source is absent",
                "add scenes that cover the drift, if there are any")
    info["blocked"] = dep in blocked
    return info


def _shortwave_at_buoy(ck, sw, sw_files, sw_rel, track, w0, w1, dep, err, sample_at_tracks):
    """Blocking when the shortwave at the buoy is missing all through the window."""
    from floeheat import track as trk

    bnds = sw["time_bnds"].values
    keep = np.flatnonzero((bnds[:, 1] > np.datetime64(w0)) & (bnds[:, 0] < np.datetime64(w1)))
    if keep.size == 0:
        return
    sub = sw.isel(time=keep)
    if sw_rel is not None:
        values = np.asarray(sub["sw_down"].values, float)
        where = "column sw_down_W_m2"
    else:
        mid = sub["time_bnds"].values[:, 0] + (sub["time_bnds"].values[:, 1]
                                               - sub["time_bnds"].values[:, 0]) / 2
        pos = trk.interpolate_track(track["time"].values, track["latitude"].values,
                                    track["longitude"].values, mid)
        coords = {"time": sub["time"].values}
        lat = pos["latitude"].values
        inside = _grid_fraction_inside(sub, "sw_down", lat, pos["longitude"].values)
        if inside is not None and inside < 1.0:
            err(_join(sw_files), "variables latitude/longitude (grid extent)",
                f"{100 * (1 - inside):.0f}% of the track of deployment {dep} in its window "
                "lies outside the shortwave grid", "use a shortwave grid that covers the drift")
            return
        import xarray as xr

        lon = pos["longitude"].values
        n = sub.sizes["time"]
        # a few intervals spread over the window first; all of them only when those are
        # all missing
        for pick in (np.unique(np.linspace(0, n - 1, min(n, 48)).astype(int)), np.arange(n)):
            try:
                c = {"time": coords["time"][pick]}
                out = sample_at_tracks(sub.isel(time=pick),
                                       xr.DataArray(lat[pick], dims="time", coords=c),
                                       xr.DataArray(lon[pick], dims="time", coords=c))
                values = np.asarray(out["sw_down"].values, float).ravel()
            except Exception:  # noqa: BLE001 - the readers have already vouched for it
                return
            if np.isfinite(values).any():
                return
        where = "variable sw_down (at the buoy)"
    if not np.isfinite(values).any():
        err(_join(sw_files), where,
            f"the shortwave at deployment {dep} is missing (NaN) all through its window "
            f"{_period(w0, w1)}", "fill in the shortwave, or remove the empty file")


# ---------------------------------------------------------------- entry points


def check_archive(root, *, seasons: dict | None = None,
                  radius_m: float = C.RADIUS_DEFAULT_M,
                  coverage_threshold: float = C.COVERAGE_THRESHOLD,
                  max_speed_m_s: float = C.MAX_DRIFT_SPEED_M_S) -> CheckReport:
    """Check a whole archive (format version 1); never raises for a problem of the data.

    Parameters
    ----------
    root : str or Path
        The archive root (holds deployments.csv).
    seasons : dict, optional
        ``{"north": {"start": "MM-DD", "end": "MM-DD"}, "south": ...}``; default
        :data:`DEFAULT_SEASONS`.
    radius_m, coverage_threshold : float, optional
        The circle around a buoy and the share of it a scene footprint must cover for
        the scene to count as near the track (defaults: 15 km, 0.5).
    max_speed_m_s : float, optional
        Fastest plausible drift; faster fixes are rejected as the workflow does.

    Returns
    -------
    CheckReport
        ``problems`` (all of them) and ``summary``: per deployment, keys
        ``deployment_id, array_id, line, profiles_file, icemass_file, instruments,
        n_profiles, profile_start, profile_end, n_string_times, icemass_start,
        icemass_end, overlap_start, overlap_end, n_fixes, n_fixes_rejected, hemisphere,
        window_start, window_end, window_from, shortwave_source, shortwave_covers,
        shortwave_start, shortwave_end, concentration_covers, concentration_start,
        concentration_end, scenes_near, mask_scenes_near, scenes_in_window, blocked``
        (times as pandas Timestamps, None where unknown).
    """
    from floeheat.io.archive import read_deployments, read_scene_table

    ck = _Checker(Path(root), seasons or DEFAULT_SEASONS, radius_m, coverage_threshold,
                  max_speed_m_s)
    report = CheckReport(root=Path(root), problems=ck.problems)
    if not ck.root.is_dir():
        ck.error(str(root), "", "the archive folder does not exist (or is not a folder)",
                 "give the folder that holds deployments.csv")
        return report
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        deployments, set_aside = ck.sheet(read_deployments, _DEPLOYMENTS)
        scenes, _ = ck.sheet(read_scene_table, _SCENES)
        named: set[str] = set()
        if deployments is not None:
            for col in ("profile_file", "icemass_file", "shortwave_file"):
                named |= {str(p) for p in deployments[col].dropna() if str(p)}
                # the rows set aside name files too
                named |= {r[col] for r in ck.raw_rows(_DEPLOYMENTS) if r.get(col)}
        if scenes is not None:
            named |= {str(p) for p in scenes["path"].dropna() if str(p)}
        if (ck.root / _SCENES).is_file() and scenes is None:
            # the scene rows are unknown: keep their NetCDF files out of the gridded ones
            named |= {p.relative_to(ck.root).as_posix() for p in (ck.root / "scenes").rglob(
                "*.nc")} if (ck.root / "scenes").is_dir() else set()
        try:
            forcing = _gridded(ck, named, deployments is not None and scenes is not None)
        except Exception as exc:  # noqa: BLE001 - never a traceback to the user
            ck.error("", "gridded files", f"the gridded files could not be listed ({exc})",
                     "check that the archive folder can be read")
            forcing = {"listing": {"shortwave": [], "concentration": [], "bathymetry": []},
                       "shortwave": None, "shortwave_files": [], "concentration": None,
                       "concentration_files": []}
        headers = _scene_headers(ck, scenes)
        if deployments is not None:
            lines = ck.raw_lines(_DEPLOYMENTS, "deployment_id")
            blocked: set = set()
            for row in deployments.to_dict("records"):
                dep = str(row["deployment_id"])
                try:
                    report.summary.append(_deployment(ck, row, lines.get(dep), forcing,
                                                      headers, blocked))
                except Exception as exc:  # noqa: BLE001 - never a traceback to the user
                    ck.error(_DEPLOYMENTS, f"deployment {dep}",
                             f"the deployment could not be checked ({type(exc).__name__}: "
                             f"{exc})", _READ_FIX)
                    report.summary.append({"deployment_id": dep, "blocked": True})
            raw = ck.raw_rows(_DEPLOYMENTS)
            for i in set_aside:
                if i < len(raw):
                    report.summary.append(_set_aside(ck, raw[i], i + 2))
    return report


def _set_aside(ck: _Checker, row: dict, line: int) -> dict:
    """A row with problems of its own: its instrument files are still checked."""
    from floeheat.io.gridded import read_shortwave_csv
    from floeheat.io.icemass import read_icemass
    from floeheat.io.profiles import read_profiles

    dep = row.get("deployment_id") or "(no ID)"
    info = {"deployment_id": f"{dep} (line {line})", "array_id": _files(row, "array_id"),
            "line": line, "blocked": True, "set_aside": True}
    present = []
    for column, reader, label in (("profile_file", read_profiles, "profiler"),
                                  ("icemass_file", read_icemass, "string"),
                                  ("shortwave_file", read_shortwave_csv, None)):
        rel = _files(row, column)
        if rel is None or not (ck.root / rel).is_file():
            continue
        ds = ck.guard(rel, _memo, reader, [ck.root / rel], ck.root / rel)
        if ds is None or not label:
            continue
        present.append(label)
        kind = "icemass" if label == "string" else "profiles"
        _instrument_checks(ck, rel, ds, kind)
        count, prefix = (("n_string_times", "icemass") if kind == "icemass"
                         else ("n_profiles", "profile"))
        info[count] = int(ds.sizes["time" if kind == "icemass" else "profile"])
        info[f"{prefix}_start"], info[f"{prefix}_end"] = _span(ds["time"].values)
    info["instruments"] = "+".join(present)
    return info


# ---------------------------------------------------------------- report text


def _yes_no(covers, a, b) -> str:
    if covers is None:
        return "-" if a is None else f"? {_period(a, b)}"
    return f"{'yes' if covers else 'NO'} {_period(a, b)}"


def _table(rows: list[list[str]]) -> list[str]:
    widths = [max(len(r[k]) for r in rows) for k in range(len(rows[0]))]
    lines = ["  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip() for r in rows]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return lines


def format_report(report: CheckReport) -> str:
    """The report as text: problems (errors, then warnings, grouped by file), the summary
    table of the deployments, then a one-line verdict."""
    out = [f"floeheat check: {report.root} (archive format version 1)", ""]
    for title, group in (("Errors (block processing)", report.errors),
                         ("Warnings (processing goes on)", report.warnings)):
        if not group:
            continue
        out.append(f"{title}: {len(group)}")
        by_file: dict[str, list[ArchiveProblem]] = {}
        for p in group:
            by_file.setdefault(p.file or "(archive)", []).append(p)
        for file, problems in by_file.items():
            out.append(f"  {file}")
            out.extend(f"    - {p}" for p in problems)
        out.append("")
    if report.summary:
        header = ["deployment", "array", "instruments", "profiles", "string record",
                  "overlap", "analysis window", "fixes", "scenes", "shortwave",
                  "concentration", "status"]
        rows = [header]
        for s in report.summary:
            g = s.get
            rows.append([
                str(g("deployment_id", "")), str(g("array_id") or "-"),
                str(g("instruments") or "none"),
                f"{g('n_profiles', 0)}: {_period(g('profile_start'), g('profile_end'))}"
                if g("n_profiles") else "-",
                f"{g('n_string_times', 0)}: {_period(g('icemass_start'), g('icemass_end'))}"
                if g("n_string_times") else "-",
                _period(g("overlap_start"), g("overlap_end")),
                _period(g("window_start"), g("window_end")),
                str(g("n_fixes", "-")),
                f"{g('scenes_near')} ({g('scenes_in_window', 0)} in window)"
                if g("scenes_near") is not None else "-",
                (f"{g('shortwave_source')}: " if g("shortwave_source") else "")
                + _yes_no(g("shortwave_covers"), g("shortwave_start"), g("shortwave_end")),
                _yes_no(g("concentration_covers"), g("concentration_start"),
                        g("concentration_end")),
                "BLOCKED" if g("blocked") else "ready"])
        out.append(f"Deployments: {len(report.summary)} (scenes: on the track, at least "
                   f"{C.COVERAGE_THRESHOLD:g} of the {C.RADIUS_DEFAULT_M / 1000:g} km circle "
                   "covered; forcing: covers the analysis window)")
        out.extend(_table(rows))
        out.append("")
    n_err, n_warn = len(report.errors), len(report.warnings)
    plural = {1: ""}
    counts = (f"{n_err} error{plural.get(n_err, 's')}, "
              f"{n_warn} warning{plural.get(n_warn, 's')}")
    if report.blocking:
        stuck = [s["deployment_id"] for s in report.summary if s.get("blocked")]
        which = f"; deployments blocked: {', '.join(stuck)}" if stuck else ""
        out.append(f"Verdict: NOT READY ({counts}{which}); fix the errors before a run.")
    else:
        out.append(f"Verdict: READY ({counts}; {len(report.summary)} deployment"
                   f"{plural.get(len(report.summary), 's')} can be processed).")
    return "\n".join(out)
