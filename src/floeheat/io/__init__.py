"""The reader layer: archive format v1 -> canonical xarray/pandas objects.

Every reader finds variables by CF ``standard_name`` (or the archive's ``role``
attribute), converts through :mod:`floeheat.units` and raises
:class:`floeheat.errors.ArchiveError` naming file, place, problem and fix.

Modules: :mod:`~floeheat.io.cf` (CF building blocks), :mod:`~floeheat.io.archive`
(deployments.csv, scenes.csv), :mod:`~floeheat.io.profiles`,
:mod:`~floeheat.io.icemass`, :mod:`~floeheat.io.gridded` (shortwave, concentration,
bathymetry) and :mod:`~floeheat.io.scenes`.
"""

import importlib

# Readers load on first use, so that a job needing one reader does not pay for the
# imports of all of them (dask, rasterio, ...).
_WHERE = {
    "read_deployments": "archive", "read_scene_table": "archive", "open_netcdf": "cf",
    "read_profiles": "profiles", "read_icemass": "icemass", "open_shortwave": "gridded",
    "read_shortwave_csv": "gridded", "open_concentration": "gridded",
    "open_bathymetry": "gridded", "Scene": "scenes", "open_scene": "scenes",
}

__all__ = list(_WHERE)


def __getattr__(name):
    if name in _WHERE:
        return getattr(importlib.import_module(f"floeheat.io.{_WHERE[name]}"), name)
    raise AttributeError(f"module 'floeheat.io' has no attribute {name!r}")
