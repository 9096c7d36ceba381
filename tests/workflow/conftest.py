"""Fixtures of the workflow tier: a tiny synthesized archive and runs of the DAG on it."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from floeheat.synth import write_archive

REPO = Path(__file__).resolve().parents[2]


def snakemake(*args: str, cwd: Path = REPO, check: bool = True) -> subprocess.CompletedProcess:
    """Run the workflow from the repository root with the project's interpreter."""
    cmd = [sys.executable, "-m", "snakemake", "--profile", "profiles/default", *args]
    proc = subprocess.run(cmd, cwd=cwd, capture_output=True, text=True, timeout=1800)
    if check and proc.returncode != 0:
        raise AssertionError(f"snakemake failed ({proc.returncode}):\n{proc.stdout[-4000:]}\n"
                             f"{proc.stderr[-6000:]}")
    return proc


@pytest.fixture(scope="session")
def run_workflow():
    """The function that runs the workflow (see :func:`snakemake`)."""
    return snakemake


@pytest.fixture(scope="session")
def tiny_archive(tmp_path_factory) -> Path:
    """A tiny synthesized archive (seed 1) and its truth folder beside it."""
    root = tmp_path_factory.mktemp("tiny") / "archive"
    write_archive(root, seed=1, size="tiny")
    return root


@pytest.fixture(scope="session")
def tiny_run(tiny_archive, tmp_path_factory) -> Path:
    """The workflow run once on the tiny archive; returns the results folder."""
    results = tmp_path_factory.mktemp("tiny-results") / "results"
    snakemake("--config", f"archive={tiny_archive}", f"results={results}")
    return results


@pytest.fixture()
def archive_copy(tiny_archive, tmp_path) -> Path:
    """A private copy of the tiny archive, for tests that change files."""
    dst = tmp_path / "archive"
    shutil.copytree(tiny_archive, dst)
    return dst
