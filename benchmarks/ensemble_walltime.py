"""Wall time of the demo run with and without the uncertainty ensemble.

Runs the whole workflow twice from scratch on the same synthesized demo archive, into
two scratch results folders: once with ``ensemble.members: 0`` (no ensemble) and once
with the configured default (200 members), and prints both wall times, their CPU times
(children's user + system, less sensitive to other load on the machine) and the ratios.
The target: the run with the ensemble stays within twice the wall time of the one
without.

Usage::

    .venv/bin/python benchmarks/ensemble_walltime.py [--archive PATH] [--cores 2]
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent


def _run(archive: Path, results: Path, cores: int, extra: list[str]) -> tuple[float, float]:
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    cmd = [sys.executable, "-m", "snakemake", "--profile", "profiles/default", "--cores",
           str(cores), *extra, "--config", f"archive={archive}", f"results={results}"]
    proc = subprocess.run(cmd, cwd=REPO, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if proc.returncode != 0:
        raise SystemExit(f"snakemake failed:\n{proc.stderr[-4000:]}")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--archive", type=Path, default=None,
                        help="a synthesized demo archive (default: synthesize one, seed 1)")
    parser.add_argument("--cores", type=int, default=2)
    args = parser.parse_args()
    scratch = Path(tempfile.mkdtemp(prefix="floeheat-ensemble-walltime-"))
    archive = args.archive
    if archive is None:
        from floeheat.synth import write_archive

        archive = scratch / "demo-archive"
        write_archive(archive, seed=1, size="demo")
    print(f"archive {archive}; scratch {scratch}; cores {args.cores}; "
          f"load average {os.getloadavg()[0]:.1f}")
    overlay = scratch / "no-ensemble.yaml"
    overlay.write_text("ensemble:\n  members: 0\n")
    off_wall, off_cpu = _run(archive, scratch / "off", args.cores,
                             ["--configfile", "config/config.yaml", str(overlay)])
    print(f"without ensemble (members 0): wall {off_wall:7.1f} s, cpu {off_cpu:7.1f} s")
    on_wall, on_cpu = _run(archive, scratch / "on", args.cores, [])
    print(f"with ensemble (default size): wall {on_wall:7.1f} s, cpu {on_cpu:7.1f} s")
    print(f"ratio with/without: wall {on_wall / off_wall:.2f}, cpu {on_cpu / off_cpu:.2f} "
          f"(target: wall <= 2.00); load average now {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
