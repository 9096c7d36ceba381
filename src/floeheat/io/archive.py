"""The archive's tables: ``deployments.csv`` and ``scenes.csv`` (or the scenes/ folder).

Line numbers in messages count as a text editor does: the header is line 1, the
first data row line 2. All problems of a table are collected and raised together.
"""

from __future__ import annotations

import re
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pandas as pd

from floeheat.errors import ArchiveError, ArchiveProblem
from floeheat.io.cf import open_netcdf

__all__ = [
    "ID_PATTERN",
    "DEPLOYMENT_COLUMNS",
    "SCENE_COLUMNS",
    "RASTER_SUFFIXES",
    "valid_id",
    "parse_iso_time",
    "read_deployments",
    "read_scene_table",
    "index_scenes",
]

#: Deployment, scene and acquisition IDs (archive format v1).
ID_PATTERN = re.compile(r"[A-Za-z0-9][A-Za-z0-9_-]{0,63}")
#: Columns of the deployments table, in order.
DEPLOYMENT_COLUMNS = ("deployment_id", "array_id", "profile_file", "icemass_file",
                      "shortwave_file", "start", "end", "ice_type")
#: Columns of the scene table, in order.
SCENE_COLUMNS = ("scene_id", "path", "time", "content", "band", "acquisition_id")
#: Raster files indexed under scenes/ when scenes.csv is absent (lower case).
RASTER_SUFFIXES = (".tif", ".tiff", ".nc")

_ICE_TYPES = ("first-year", "multiyear")
_CONTENTS = ("mask", "backscatter")
_POLARISATION = re.compile(r"[HV]{2}")
_HOW_ID = ("use 1 to 64 letters, digits, '_' or '-', starting with a letter or digit")


def valid_id(text: str) -> bool:
    """Whether ``text`` is a valid deployment/scene/acquisition ID.

    Examples
    --------
    >>> valid_id("B-07_a"), valid_id("_x"), valid_id("a/b")
    (True, False, False)
    """
    return ID_PATTERN.fullmatch(str(text)) is not None


def parse_iso_time(text: str) -> np.datetime64:
    """An ISO 8601 time as naive UTC ``datetime64[ns]``; NaT for an empty string.

    'Z' and UTC offsets are converted to UTC; a time without offset is taken as UTC.
    Raises ``ValueError`` when ``text`` is not ISO 8601.

    Examples
    --------
    >>> parse_iso_time("2020-05-01T12:00:00+02:00")
    np.datetime64('2020-05-01T10:00:00.000000000')
    >>> parse_iso_time("2020-05-01T10:00Z")
    np.datetime64('2020-05-01T10:00:00.000000000')
    """
    text = str(text).strip()
    if not text:
        return np.datetime64("NaT", "ns")
    value = datetime.fromisoformat(text)
    if value.tzinfo is not None:
        value = value.astimezone(UTC).replace(tzinfo=None)
    return np.datetime64(value, "ns")


def _read_table(path: Path, required: tuple[str, ...], name: str) -> pd.DataFrame:
    """A CSV table as strings ('' when empty), headers and cells stripped.

    ``name`` is the file as messages give it (relative to the archive root)."""
    try:
        table = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8",
                            skipinitialspace=True)
    except FileNotFoundError as exc:
        raise ArchiveError.at(name, "", f"the file does not exist in {path.parent}",
                              "create it as archive-format.md describes") from exc
    except (UnicodeDecodeError, pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise ArchiveError.at(name, "", f"cannot be read as UTF-8 CSV ({exc})",
                              "save it as UTF-8 CSV with a header row") from exc
    table.columns = [str(c).strip() for c in table.columns]
    table = table.apply(lambda col: col.str.strip())
    missing = [c for c in required if c not in table.columns]
    if missing:
        raise ArchiveError.at(name, "header (line 1)",
                              f"required column(s) {', '.join(missing)} missing",
                              f"add the column(s) {', '.join(missing)} to the header")
    return table


def _line(i: int) -> str:
    """Editor line of data row ``i`` (0-based): the header is line 1."""
    return f"line {i + 2}"


def _check_ids(table, column, file, problems, *, unique=True, required=True):
    seen: dict[str, int] = {}
    for i, value in enumerate(table[column]):
        where = f"{_line(i)}, column {column}"
        if value == "":
            if required:
                problems.append(ArchiveProblem(str(file), where, "the ID is empty",
                                               "give every row an ID"))
            continue
        if not valid_id(value):
            problems.append(ArchiveProblem(str(file), where, f"invalid ID {value!r}",
                                           _HOW_ID))
        elif unique and value in seen:
            problems.append(ArchiveProblem(
                str(file), where, f"duplicate ID {value!r} (first on {_line(seen[value])})",
                "give every row its own ID"))
        seen.setdefault(value, i)


def _times(table, column, file, problems) -> np.ndarray:
    out = np.full(len(table), np.datetime64("NaT", "ns"))
    if column not in table.columns:
        return out
    for i, value in enumerate(table[column]):
        try:
            out[i] = parse_iso_time(value)
        except ValueError:
            problems.append(ArchiveProblem(
                str(file), f"{_line(i)}, column {column}",
                f"{value!r} is not an ISO 8601 time",
                "write it like 2020-05-01T00:00:00Z"))
    return out


def _choices(table, column, allowed, file, problems, *, required=False):
    if column not in table.columns:
        return
    for i, value in enumerate(table[column]):
        if value == "" and not required:
            continue
        if value not in allowed:
            problems.append(ArchiveProblem(
                str(file), f"{_line(i)}, column {column}", f"{value!r} is not allowed",
                f"use one of {', '.join(allowed)}"))


def _with_na(table: pd.DataFrame, columns) -> pd.DataFrame:
    """Empty strings -> NA, absent optional columns added as NA."""
    out = table.replace("", pd.NA)
    for c in columns:
        if c not in out.columns:
            out[c] = pd.Series(pd.NA, index=out.index, dtype="object")
    return out


def read_deployments(root, *, check_files: bool = True) -> pd.DataFrame:
    """Read and validate ``<root>/deployments.csv``.

    Parameters
    ----------
    root : str or Path
        The archive root.
    check_files : bool
        Also check that the files named in the table exist under ``root``.

    Returns
    -------
    pandas.DataFrame
        Columns ``deployment_id, array_id, profile_file, icemass_file,
        shortwave_file, start, end, ice_type`` (then any extra columns of the file);
        paths as given (relative to ``root``), NA when empty; ``start``/``end``
        ``datetime64[ns]`` UTC, NaT when empty.

    Raises
    ------
    ArchiveError
        Listing every problem (line as a text editor counts it, and column).
    """
    root = Path(root)
    file = "deployments.csv"
    table = _read_table(root / file, ("deployment_id",), file)
    problems: list[ArchiveProblem] = []
    _check_ids(table, "deployment_id", file, problems)
    if "array_id" in table.columns:
        _check_ids(table, "array_id", file, problems, unique=False, required=False)
    _choices(table, "ice_type", _ICE_TYPES, file, problems)
    start = _times(table, "start", file, problems)
    end = _times(table, "end", file, problems)
    for i in np.flatnonzero(start >= end):
        problems.append(ArchiveProblem(str(file), f"{_line(i)}, columns start/end",
                                       f"start {start[i]} is not before end {end[i]}",
                                       "give an analysis window that starts before it ends"))
    for i in range(len(table)):
        files = [table.at[i, c] if c in table.columns else ""
                 for c in ("profile_file", "icemass_file")]
        if not any(files):
            problems.append(ArchiveProblem(
                str(file), f"{_line(i)}, columns profile_file/icemass_file",
                "the deployment names neither a profile file nor an ice mass-balance file",
                "give at least one of the two, or remove the row"))
    if check_files:
        _check_paths(table, root, file, ("profile_file", "icemass_file", "shortwave_file"),
                     problems)
    if problems:
        raise ArchiveError(*problems)
    out = _with_na(table, DEPLOYMENT_COLUMNS)
    out["start"], out["end"] = start, end
    extra = [c for c in out.columns if c not in DEPLOYMENT_COLUMNS]
    return out[list(DEPLOYMENT_COLUMNS) + extra].reset_index(drop=True)


def _check_paths(table, root, file, columns, problems):
    for column in columns:
        if column not in table.columns:
            continue
        for i, value in enumerate(table[column]):
            if value and not (root / value).is_file():
                problems.append(ArchiveProblem(
                    str(file), f"{_line(i)}, column {column}",
                    f"the file {value!r} does not exist under the archive root",
                    "give the path relative to the archive root"))


def read_scene_table(root, *, check_files: bool = True) -> pd.DataFrame:
    """The scene table: ``scenes.csv`` when present, else an index of ``scenes/``.

    Returns
    -------
    pandas.DataFrame
        Columns ``scene_id, path, time, content, band, acquisition_id``; ``time``
        ``datetime64[ns]`` UTC; ``band`` the space-separated polarisations (NA for
        masks or when not given); empty optional cells NA. Sorted by time, then ID.
        An archive with neither scenes.csv nor scenes/ gives an empty table.
    """
    root = Path(root)
    file = "scenes.csv"
    if not (root / file).exists():
        return index_scenes(root)
    table = _read_table(root / file, ("scene_id", "path", "time", "content"), file)
    problems: list[ArchiveProblem] = []
    _check_ids(table, "scene_id", file, problems)
    if "acquisition_id" in table.columns:
        _check_ids(table, "acquisition_id", file, problems, unique=False, required=False)
    _choices(table, "content", _CONTENTS, file, problems, required=True)
    time = _times(table, "time", file, problems)
    for i in np.flatnonzero(np.isnat(time)):
        if table.at[i, "time"] == "":
            problems.append(ArchiveProblem(str(file), f"{_line(i)}, column time",
                                           "the time is empty", "give the acquisition time"))
    if "band" in table.columns:
        for i, value in enumerate(table["band"]):
            bad = [b for b in value.split() if not _POLARISATION.fullmatch(b)]
            if bad:
                problems.append(ArchiveProblem(
                    str(file), f"{_line(i)}, column band", f"{' '.join(bad)!r} is not a "
                    "polarisation", "list polarisations like 'HH' or 'HH HV'"))
    for i, value in enumerate(table["path"]):
        if value == "":
            problems.append(ArchiveProblem(str(file), f"{_line(i)}, column path",
                                           "the path is empty", "give the raster file"))
    if check_files:
        _check_paths(table, root, file, ("path",), problems)
    if problems:
        raise ArchiveError(*problems)
    out = _with_na(table, SCENE_COLUMNS)
    out["time"] = time
    extra = [c for c in out.columns if c not in SCENE_COLUMNS]
    return _sorted(out[list(SCENE_COLUMNS) + extra])


def _sorted(table: pd.DataFrame) -> pd.DataFrame:
    return table.sort_values(["time", "scene_id"], kind="stable").reset_index(drop=True)


def index_scenes(root) -> pd.DataFrame:
    """Index every raster under ``<root>/scenes/`` from the files' own attributes.

    Each file's ``time_coverage_start`` and ``content`` come from its GeoTIFF tags or
    NetCDF global attributes, optional ``acquisition_id`` likewise; the scene ID is
    the file name without suffix; ``band`` lists the polarisation bands found.
    """
    root = Path(root)
    folder = root / "scenes"
    files = []
    if folder.is_dir():
        files = sorted(p for p in folder.rglob("*")
                       if p.is_file() and p.suffix.lower() in RASTER_SUFFIXES)
    rows, problems = [], []
    seen: dict[str, str] = {}
    for path in files:
        rel = path.relative_to(root).as_posix()
        attrs, bands = _raster_attributes(path)
        scene_id = path.stem
        if not valid_id(scene_id):
            problems.append(ArchiveProblem(rel, "file name", f"invalid scene ID {scene_id!r}",
                                           _HOW_ID.replace("use", "rename the file to") +
                                           ", or list the scene in scenes.csv"))
        elif scene_id in seen:
            problems.append(ArchiveProblem(rel, "file name",
                                           f"scene ID {scene_id!r} also used by {seen[scene_id]}",
                                           "give every scene file its own name"))
        seen.setdefault(scene_id, rel)
        content = str(attrs.get("content", "")).strip()
        if content not in _CONTENTS:
            problems.append(ArchiveProblem(rel, "attribute content",
                                           f"content is {content or 'missing'!r}",
                                           "set the attribute content to mask or backscatter"))
        try:
            time = parse_iso_time(attrs.get("time_coverage_start", ""))
        except ValueError:
            time = None
        if time is None or np.isnat(time):
            problems.append(ArchiveProblem(
                rel, "attribute time_coverage_start",
                f"{attrs.get('time_coverage_start', 'missing')!r} is not an ISO 8601 time",
                "set time_coverage_start like 2020-05-01T00:00:00Z"))
        acq = str(attrs.get("acquisition_id", "")).strip()
        if acq and not valid_id(acq):
            problems.append(ArchiveProblem(rel, "attribute acquisition_id",
                                           f"invalid ID {acq!r}", _HOW_ID))
        rows.append({"scene_id": scene_id, "path": rel, "time": time, "content": content,
                     "band": " ".join(bands) if content == "backscatter" and bands else pd.NA,
                     "acquisition_id": acq or pd.NA})
    if problems:
        raise ArchiveError(*problems)
    table = pd.DataFrame(rows, columns=list(SCENE_COLUMNS))
    table["time"] = pd.to_datetime(table["time"]).astype("datetime64[ns]")
    return _sorted(table)


def _raster_attributes(path: Path) -> tuple[dict, list[str]]:
    """File-level attributes and polarisation band names of a GeoTIFF or NetCDF."""
    if path.suffix.lower() == ".nc":
        ds = open_netcdf(path, probe=False)
        with ds:
            bands = [str(v.attrs.get("polarisation", v.attrs.get("polarization", name)))
                     for name, v in ds.data_vars.items()]
            return dict(ds.attrs), [b for b in bands if _POLARISATION.fullmatch(b)]
    import rasterio

    try:
        with rasterio.open(path) as src:
            return dict(src.tags()), [d for d in src.descriptions
                                      if d and _POLARISATION.fullmatch(d)]
    except rasterio.errors.RasterioIOError as exc:
        raise ArchiveError.at(str(path), "", f"cannot be read as GeoTIFF ({exc})",
                              "copy the file again from its source") from exc
