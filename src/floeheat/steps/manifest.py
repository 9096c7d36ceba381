"""Stage ``manifest``: the run record (outputs.md "Run record").

The manifest holds the resolved config, software versions, the sha256 of
requirements.lock, the archive format version, the sha256 of every archive file the run
read and of every output of the contract, the deployments that failed (from
failures.csv) and, for a pinned run, the pin's name and whether (and how) it was
overridden. It holds no wall-clock times or host names and its keys are sorted, so two
runs of the same inputs and settings give the same manifest (``floeheat verify``
compares outputs against it).
"""

from __future__ import annotations

import json
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

from floeheat import ARCHIVE_FORMAT_VERSION, OUTPUT_FORMAT_VERSION, __version__
from floeheat.checksums import sha256_file, sha256_tree
from floeheat.steps.status import write_json_atomic

__all__ = ["NUMERIC_PACKAGES", "software_versions", "archive_files", "output_checksums",
           "failed_deployments", "pin_record", "LOCK_FILE", "run_manifest"]

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


def output_checksums(results) -> dict[str, str]:
    """sha256 of every output of the contract in a results folder, by relative path:
    the three tables, each budget.zarr store (as a tree) and every figure."""
    results_p = Path(results)
    outputs: dict[str, str] = {}
    for rel in ("tables/seasonal.csv", "tables/climatology.csv", "tables/failures.csv",
                "tables/attribution.csv", "tables/climatology_unsplit.csv",
                "tables/screen.csv", "tables/screen_windows.csv", "tables/bulkflux.csv"):
        if (results_p / rel).is_file():
            outputs[rel] = sha256_file(results_p / rel)
    for store in sorted((results_p / "deployments").glob("*/budget.zarr")):
        outputs[store.relative_to(results_p).as_posix()] = sha256_tree(store)
    figures = results_p / "figures"
    for f in sorted(p for p in figures.rglob("*") if p.is_file() and not p.name.startswith(".")):
        outputs[f.relative_to(results_p).as_posix()] = sha256_file(f)
    return dict(sorted(outputs.items()))


def failed_deployments(failures_csv) -> list[dict[str, str]]:
    """The deployments of failures.csv with the stage each failed at, sorted."""
    import csv

    with open(failures_csv, newline="") as f:
        rows = [{"deployment_id": r["deployment_id"], "stage": r["stage"]}
                for r in csv.DictReader(f)]
    return sorted(rows, key=lambda r: (r["deployment_id"], r["stage"]))


def pin_record(config: dict, lock: str | None) -> dict | None:
    """The pin of a pinned run (name, override flag, what was overridden); None when the
    run is not pinned."""
    from floeheat.reproduce import PIN_KEY, override_requested, pin_differences

    pin = config.get(PIN_KEY)
    if not pin:
        return None
    override = override_requested(config)
    return {"name": pin.get("name"), "override": override,
            "overridden": [str(d) for d in pin_differences(config, lock)] if override else []}


#: The lock file, relative to the folder the workflow runs from (the repository root).
LOCK_FILE = "requirements.lock"


def run_manifest(archive: str, results: str, config: dict, manifest_path: str,
                 lock: str | None = LOCK_FILE) -> dict:
    """Write manifest.json for a finished run.

    ``lock`` is the path of requirements.lock (its sha256 is recorded; a missing file
    records null).
    """
    from floeheat.reproduce import JOB_KEYS, lock_checksum

    archive_p, results_p = Path(archive), Path(results)
    inputs = {p.relative_to(archive_p).as_posix(): sha256_file(p)
              for p in archive_files(archive_p)}
    failures = results_p / "tables" / "failures.csv"
    record = {
        "floeheat_version": __version__,
        "archive_format_version": ARCHIVE_FORMAT_VERSION,
        "output_format_version": OUTPUT_FORMAT_VERSION,
        # The results folder is where the run was written, and ``jobs`` how its work was
        # cut into jobs, not settings of it: leave them out so that the same run into two
        # folders, or on a laptop and a cluster, gives the same manifest.
        "config": json.loads(json.dumps({k: v for k, v in config.items()
                                         if k != "results" and k not in JOB_KEYS},
                                        default=str)),
        "software": software_versions(),
        "requirements_lock_sha256": lock_checksum(lock),
        "pin": pin_record(config, lock),
        "failed_deployments": failed_deployments(failures) if failures.is_file() else [],
        "inputs": inputs,
        "outputs": output_checksums(results_p),
    }
    write_json_atomic(Path(manifest_path), record)
    return record
