"""The reader layer: archive format v1 -> canonical xarray/pandas objects.

Every reader finds variables by CF ``standard_name`` (or the archive's ``role``
attribute), converts through :mod:`floeheat.units` and raises
:class:`floeheat.errors.ArchiveError` naming file, place, problem and fix.

Modules: :mod:`~floeheat.io.cf` (CF building blocks), :mod:`~floeheat.io.archive`
(deployments.csv, scenes.csv), :mod:`~floeheat.io.profiles`,
:mod:`~floeheat.io.icemass`, :mod:`~floeheat.io.gridded` (shortwave, concentration,
bathymetry) and :mod:`~floeheat.io.scenes`.
"""

from floeheat.io.archive import read_deployments, read_scene_table
from floeheat.io.cf import open_netcdf
from floeheat.io.gridded import (
    open_bathymetry,
    open_concentration,
    open_shortwave,
    read_shortwave_csv,
)
from floeheat.io.icemass import read_icemass
from floeheat.io.profiles import read_profiles
from floeheat.io.scenes import Scene, open_scene

__all__ = [
    "read_deployments",
    "read_scene_table",
    "open_netcdf",
    "read_profiles",
    "read_icemass",
    "open_shortwave",
    "read_shortwave_csv",
    "open_concentration",
    "open_bathymetry",
    "Scene",
    "open_scene",
]
