"""A corpus of broken archives, each derived from the clean tiny demo with one defect.

:func:`derive` makes a copy of the clean archive out of real folders and symbolic links
to its files, so that a copy costs almost nothing; :func:`own` turns one linked file
into a private copy before it is changed (the clean archive is never touched).

``BROKEN`` maps a defect's name to a :class:`Defect`: the function that introduces it
into a derived archive, and where ``floeheat check`` must place the blocking problem
(the file, and text that the problem's ``where`` must hold, plus optional text of the
whole message).
"""

from __future__ import annotations

import csv
import os
import shutil
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import netCDF4
import numpy as np

from floeheat.synth import write_archive

__all__ = ["Defect", "BROKEN", "derive", "own", "tiny_clean"]


def tiny_clean(tmp_path_factory) -> Path:
    """The clean tiny archive (seed 1), written once per test session and shared."""
    root = tmp_path_factory.getbasetemp() / "tiny-clean" / "archive"
    if not (root / "deployments.csv").is_file() or not (
            root.with_name("archive.truth") / "truth.json").is_file():
        root.parent.mkdir(parents=True, exist_ok=True)
        write_archive(root, seed=1, size="tiny")
    return root


def derive(clean: Path, dst: Path) -> Path:
    """A copy of ``clean`` at ``dst``: the same folders, each file a symbolic link."""
    clean, dst = Path(clean), Path(dst)
    for folder, _, files in os.walk(clean):
        rel = Path(folder).relative_to(clean)
        (dst / rel).mkdir(parents=True, exist_ok=True)
        for name in files:
            os.symlink(Path(folder) / name, dst / rel / name)
    return dst


def own(root: Path, rel: str) -> Path:
    """Make ``root/rel`` a private copy (not a link) that may be changed; return it."""
    path = Path(root) / rel
    if path.is_symlink():
        target = path.resolve()
        path.unlink()
        shutil.copyfile(target, path)
    return path


# ---------------------------------------------------------------- small editors


def _read_csv(path: Path) -> tuple[list[str], list[list[str]]]:
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    return rows[0], rows[1:]


def _write_csv(path: Path, header: list[str], rows: list[list[str]]) -> None:
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(header)
        w.writerows(rows)


def _edit_cell(root: Path, rel: str, line: int, column: str, value: str) -> None:
    """Set one cell; ``line`` counts as a text editor does (header = line 1)."""
    path = own(root, rel)
    header, rows = _read_csv(path)
    rows[line - 2][header.index(column)] = value
    _write_csv(path, header, rows)


def _drop_column(root: Path, rel: str, column: str) -> None:
    path = own(root, rel)
    header, rows = _read_csv(path)
    k = header.index(column)
    _write_csv(path, header[:k] + header[k + 1:], [r[:k] + r[k + 1:] for r in rows])


def _rename_column(root: Path, rel: str, old: str, new: str) -> None:
    path = own(root, rel)
    header, rows = _read_csv(path)
    header[header.index(old)] = new
    _write_csv(path, header, rows)


def _nc(root: Path, rel: str) -> netCDF4.Dataset:
    """Open a private copy of a NetCDF file for changing (no automatic scaling)."""
    ds = netCDF4.Dataset(own(root, rel), "a")
    ds.set_auto_maskandscale(False)
    return ds


def _by_standard_name(ds: netCDF4.Dataset, name: str):
    return next(v for v in ds.variables.values()
                if getattr(v, "standard_name", None) == name)


# ---------------------------------------------------------------- the defects


def deployments_missing_column(root: Path) -> None:
    _drop_column(root, "deployments.csv", "deployment_id")


def id_with_path_separator(root: Path) -> None:
    _edit_cell(root, "deployments.csv", 2, "deployment_id", "skua/1")


def duplicate_id(root: Path) -> None:
    _edit_cell(root, "deployments.csv", 4, "deployment_id", "skua-1")


def missing_profile_file(root: Path) -> None:
    (root / "profiles/skua-2.nc").unlink()


def unknown_units(root: Path) -> None:
    with _nc(root, "profiles/skua-1.nc") as ds:
        _by_standard_name(ds, "sea_water_temperature").units = "deg_Q"


def missing_standard_name(root: Path) -> None:
    with _nc(root, "icemass/skua-1.nc") as ds:
        _by_standard_name(ds, "depth").delncattr("standard_name")


def icemass_time_not_increasing(root: Path) -> None:
    with _nc(root, "icemass/fulmar-1.nc") as ds:
        t = ds["time"][:]
        t[5], t[6] = t[6], t[5]
        ds["time"][:] = t


def scene_without_crs(root: Path) -> None:
    import rasterio

    path = own(root, "scenes/masks/skua-0001.tif")
    with rasterio.open(path) as src:
        data, profile, tags = src.read(), src.profile, src.tags()
        descriptions = src.descriptions
    profile.pop("crs", None)
    path.unlink()
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(data)
        dst.update_tags(**tags)
        for i, d in enumerate(descriptions, start=1):
            if d:
                dst.set_band_description(i, d)


def pressure_not_monotonic(root: Path) -> None:
    # contiguous ragged layout: the first profile's samples 10 and 11 swap pressures
    with _nc(root, "profiles/skua-2.nc") as ds:
        p = _by_standard_name(ds, "sea_water_pressure")
        values = p[:]
        values[10], values[11] = values[11], values[10]
        p[:] = values


def all_nan_variable(root: Path) -> None:
    with _nc(root, "profiles/skua-1.nc") as ds:
        s = _by_standard_name(ds, "sea_water_practical_salinity")
        s[:] = np.full(s.shape, np.nan, dtype=s.dtype)


def window_outside_data(root: Path) -> None:
    _edit_cell(root, "deployments.csv", 3, "start", "2031-06-26T00:00:00Z")
    _edit_cell(root, "deployments.csv", 3, "end", "2031-07-18T00:00:00Z")


def truncated_netcdf(root: Path) -> None:
    path = own(root, "concentration/pm_202507.nc")
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])


def bad_iso_time(root: Path) -> None:
    _edit_cell(root, "deployments.csv", 4, "start", "26/06/2025 00:00")


def invalid_scene_content(root: Path) -> None:
    _edit_cell(root, "scenes.csv", 4, "content", "radar")


def concentration_unknown_units(root: Path) -> None:
    with _nc(root, "concentration/pm_202506.nc") as ds:
        _by_standard_name(ds, "sea_ice_area_fraction").units = "tenths-ish"


def csv_profile_missing_column(root: Path) -> None:
    _drop_column(root, "profiles/fulmar-1.csv", "temperature_degC")


def no_position_fixes(root: Path) -> None:
    for rel in ("profiles/skua-1.nc", "icemass/skua-1.nc"):
        with _nc(root, rel) as ds:
            lat = _by_standard_name(ds, "latitude")
            lat[:] = np.full(lat.shape, np.nan, dtype=lat.dtype)


def shortwave_gap(root: Path) -> None:
    (root / "shortwave/sw_202507_accum.nc").unlink()


def shortwave_csv_bad_number(root: Path) -> None:
    _edit_cell(root, "shortwave/fulmar-1_sw.csv", 10, "sw_down_W_m2", "n/a?")


def icemass_csv_bad_sensor_column(root: Path) -> None:
    path = root / "icemass/skua-2.csv"
    header, _ = _read_csv(path)
    _rename_column(root, "icemass/skua-2.csv", header[10], "T_fifty")


def scene_missing_file(root: Path) -> None:
    (root / "scenes/masks/fulmar-0002.tif").unlink()


def scene_band_mismatch(root: Path) -> None:
    header, rows = _read_csv(root / "scenes.csv")
    line = next(i + 2 for i, r in enumerate(rows) if r[0] == "skua-0034-bs")
    _edit_cell(root, "scenes.csv", line, "band", "VV")


def profile_feature_type(root: Path) -> None:
    with _nc(root, "profiles/skua-2.nc") as ds:
        ds.delncattr("featureType")


def concentration_bad_grid_mapping(root: Path) -> None:
    with _nc(root, "concentration/pm_202506.nc") as ds:
        _by_standard_name(ds, "sea_ice_area_fraction").grid_mapping = "polar_grid"


def deployments_not_text(root: Path) -> None:
    own(root, "deployments.csv").write_bytes(b"\xff\xfe\x00\x81\x9f binary \x00\xc3\x28")


@dataclass(frozen=True)
class Defect:
    """One defect: how to make it, and where the check must report it.

    ``where`` must occur in the problem's ``where``, ``text`` (when given) in its full
    message; ``file`` is the problem's file, relative to the archive root.
    """

    mutate: Callable[[Path], None]
    file: str
    where: str
    text: str = ""


BROKEN: dict[str, Defect] = {
    "deployments_missing_column": Defect(deployments_missing_column, "deployments.csv",
                                         "header (line 1)", "deployment_id"),
    "id_with_path_separator": Defect(id_with_path_separator, "deployments.csv",
                                     "line 2, column deployment_id", "skua/1"),
    "duplicate_id": Defect(duplicate_id, "deployments.csv", "line 4, column deployment_id",
                           "duplicate"),
    "missing_profile_file": Defect(missing_profile_file, "deployments.csv",
                                   "line 3, column profile_file", "profiles/skua-2.nc"),
    "unknown_units": Defect(unknown_units, "profiles/skua-1.nc", "variable temperature",
                            "deg_Q"),
    "missing_standard_name": Defect(missing_standard_name, "icemass/skua-1.nc",
                                    "standard_name 'depth'"),
    "icemass_time_not_increasing": Defect(icemass_time_not_increasing, "icemass/fulmar-1.nc",
                                          "variable time, index 6", "increasing"),
    "scene_without_crs": Defect(scene_without_crs, "scenes/masks/skua-0001.tif", "", "CRS"),
    "pressure_not_monotonic": Defect(pressure_not_monotonic, "profiles/skua-2.nc",
                                     "profile '1', sample index", "pressure decreases"),
    "all_nan_variable": Defect(all_nan_variable, "profiles/skua-1.nc", "variable salinity",
                               "missing"),
    "window_outside_data": Defect(window_outside_data, "deployments.csv",
                                  "line 3, columns start/end", "2031"),
    "truncated_netcdf": Defect(truncated_netcdf, "concentration/pm_202507.nc", "",
                               "truncated"),
    "bad_iso_time": Defect(bad_iso_time, "deployments.csv", "line 4, column start",
                           "ISO 8601"),
    "invalid_scene_content": Defect(invalid_scene_content, "scenes.csv",
                                    "line 4, column content", "radar"),
    "concentration_unknown_units": Defect(concentration_unknown_units,
                                          "concentration/pm_202506.nc",
                                          "variable sea_ice_concentration", "tenths-ish"),
    "csv_profile_missing_column": Defect(csv_profile_missing_column, "profiles/fulmar-1.csv",
                                         "header (line 1)", "temperature_degC"),
    "no_position_fixes": Defect(no_position_fixes, "profiles/skua-1.nc",
                                "variables latitude/longitude", "position fix"),
    "shortwave_gap": Defect(shortwave_gap, "shortwave/sw_202506.nc", "time_bnds",
                            "does not cover"),
    "shortwave_csv_bad_number": Defect(shortwave_csv_bad_number, "shortwave/fulmar-1_sw.csv",
                                       "line 10, column sw_down_W_m2", "not a number"),
    "icemass_csv_bad_sensor_column": Defect(icemass_csv_bad_sensor_column,
                                            "icemass/skua-2.csv", "column T_fifty"),
    "scene_missing_file": Defect(scene_missing_file, "scenes.csv", "line 4, column path",
                                 "fulmar-0002"),
    "scene_band_mismatch": Defect(scene_band_mismatch, "scenes/backscatter/skua-0034-bs.nc",
                                  "bands", "VV"),
    "profile_feature_type": Defect(profile_feature_type, "profiles/skua-2.nc",
                                   "global attribute featureType"),
    "concentration_bad_grid_mapping": Defect(concentration_bad_grid_mapping,
                                             "concentration/pm_202506.nc",
                                             "variable sea_ice_concentration", "polar_grid"),
    "deployments_not_text": Defect(deployments_not_text, "deployments.csv", "", "UTF-8"),
}
