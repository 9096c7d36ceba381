"""Stage ``manifest``: the run record (outputs.md "Run record").

The manifest holds the resolved config, software versions, the archive format version,
the sha256 of every archive file the run read and of every output of the contract. It
holds no wall-clock times or host names, so two runs of the same inputs and settings
give the same manifest.
"""

from __future__ import annotations

import json
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

from floeheat import ARCHIVE_FORMAT_VERSION, OUTPUT_FORMAT_VERSION, __version__
from floeheat.checksums import sha256_file, sha256_tree
from floeheat.steps.status import write_json_atomic

__all__ = ["NUMERIC_PACKAGES", "software_versions",
           "archive_files", "run_manifest"]

#: Dependencies whose versions can change numbers in the outputs.
NUMERIC_PACKAGES = ("numpy", "scipy", "pandas", "xarray", "dask", "zarr", "numcodecs",
                    "netCDF4", "rasterio", "pyproj", "gsw", "scikit-image", "pint",
                    "cf-xarray", "shapely", "matplotlib", "pyarrow", "snakemake")


def software_versions() -> dict[str, str]:
    """Versions of floeheat and of every dependency that touches numbers."""
    out = {"floeheat": __version__}
    for name in NUMERIC_PACKAGES:
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = "absent"
    return out


def archive_files(archive: Path) -> list[Path]:
    """Every file of the archive a run reads (all regular files below the root)."""
    archive = Path(archive)
    return sorted(p for p in archive.rglob("*") if p.is_file() and not p.name.startswith("."))


def run_manifest(archive: str, results: str, config: dict, manifest_path: str) -> dict:
    """Write manifest.json for a finished run."""
    archive_p, results_p = Path(archive), Path(results)
    inputs = {p.relative_to(archive_p).as_posix(): sha256_file(p)
              for p in archive_files(archive_p)}
    outputs: dict[str, str] = {}
    for rel in ("tables/seasonal.csv", "tables/climatology.csv", "tables/failures.csv"):
        outputs[rel] = sha256_file(results_p / rel)
    for store in sorted((results_p / "deployments").glob("*/budget.zarr")):
        outputs[store.relative_to(results_p).as_posix()] = sha256_tree(store)
    figures = results_p / "figures"
    for f in sorted(p for p in figures.rglob("*") if p.is_file()):
        outputs[f.relative_to(results_p).as_posix()] = sha256_file(f)
    record = {
        "floeheat_version": __version__,
        "archive_format_version": ARCHIVE_FORMAT_VERSION,
        "output_format_version": OUTPUT_FORMAT_VERSION,
        # The results folder is where the run was written, not a setting of it: leave it
        # out so that the same run into two folders gives the same manifest.
        "config": json.loads(json.dumps({k: v for k, v in config.items() if k != "results"},
                                        default=str)),
        "software": software_versions(),
        "inputs": inputs,
        "outputs": outputs,
    }
    write_json_atomic(Path(manifest_path), record)
    return record

