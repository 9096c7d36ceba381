"""Shared helpers of the benchmarks: scratch folders, timing, synthetic archives, runs.

Every number a benchmark prints is measured in the same invocation; nothing is a
constant taken from an earlier run.
"""

from __future__ import annotations

import os
import shutil
import statistics
import subprocess
import sys
import time
from dataclasses import dataclass, replace
from functools import cache
from pathlib import Path

import pandas as pd

REPO = Path(__file__).resolve().parent.parent
BENCH_SNAKEFILE = REPO / "benchmarks" / "Snakefile"
PROFILE = REPO / "profiles" / "default"


@dataclass
class Result:
    """One target's outcome: the measured ratio, the limit and what was measured."""

    number: int
    title: str
    ratio: float
    limit: float
    sizes: str
    notes: list[str]
    #: a second condition of the target (bytes read, equal tables) that also holds
    also: bool = True

    @property
    def holds(self) -> bool:
        return bool(self.ratio <= self.limit and self.also)

    def report(self) -> str:
        verdict = "HOLDS" if self.holds else "DOES NOT HOLD"
        extra = "" if self.also else " (second condition fails, see below)"
        lines = [f"[{self.number}] {self.title}",
                 f"    sizes : {self.sizes}",
                 f"    ratio : {self.ratio:.3f}   target <= {self.limit:g}   {verdict}{extra}"]
        lines += [f"    {n}" for n in self.notes]
        return "\n".join(lines)


def say(msg: str) -> None:
    print(f"  .. {msg}", file=sys.stderr, flush=True)


def rchar() -> int:
    """Bytes this process has read through read()/pread() so far (/proc/self/io)."""
    for line in Path("/proc/self/io").read_text().splitlines():
        if line.startswith("rchar:"):
            return int(line.split()[1])
    raise RuntimeError("/proc/self/io has no rchar")


def median_time(func, repeat: int) -> float:
    """Median wall time of ``func()`` over ``repeat`` calls [s]."""
    out = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        func()
        out.append(time.perf_counter() - t0)
    return statistics.median(out)


def interleaved_medians(funcs: dict, repeat: int) -> dict:
    """Median wall time per function, calls interleaved so that load drifts hit all."""
    times = {k: [] for k in funcs}
    for _ in range(repeat):
        for k, f in funcs.items():
            t0 = time.perf_counter()
            f()
            times[k].append(time.perf_counter() - t0)
    return {k: statistics.median(v) for k, v in times.items()}


def fresh(path: Path) -> Path:
    if path.exists():
        shutil.rmtree(path)
    path.mkdir(parents=True)
    return path


# --------------------------------------------------------------------------- archives

def archive_spec(n_deployments: int, *, scene_px: int, record_days: float | None,
                 scene_every_days: float = 2.0, base: str = "demo", per_array: int = 4,
                 scene_res_m: float | None = None, name: str | None = None):
    """A :class:`floeheat.synth.SizeSpec` with ``n_deployments`` in arrays of ``per_array``."""
    from floeheat.synth.sizes import SIZES

    per = min(per_array, n_deployments)
    n_arrays = -(-n_deployments // per)
    spec = replace(SIZES[base], n_arrays=n_arrays, deployments_per_array=(per,),
                   scene_px=int(scene_px), scene_every_days=float(scene_every_days),
                   backscatter_count=0)
    if record_days is not None:
        spec = replace(spec, record_days=float(record_days), record_offset_days=40.0,
                       window_margin_days=1.0)
    if scene_res_m is not None:
        spec = replace(spec, scene_res_m=float(scene_res_m),
                       tile_res_m=min(spec.tile_res_m, float(scene_res_m)))
    label = name or f"d{spec.n_deployments}-px{scene_px}-r{record_days}-e{scene_every_days}"
    return replace(spec, name=label)


#: Seconds spent synthesizing archives in this process (not counted in make bench's time).
SYNTH_SECONDS = [0.0]


def synth_archive(scratch: Path, spec, seed: int = 3) -> Path:
    """Write (or reuse, when already written in this scratch folder) a synthetic archive."""
    from floeheat.synth import write_archive

    root = scratch / "archives" / spec.name
    done = root.with_name(root.name + ".done")
    if done.is_file() and (root / "deployments.csv").is_file():
        return root
    root.parent.mkdir(parents=True, exist_ok=True)
    say(f"synthesizing archive {spec.name} ({spec.n_deployments} deployments, "
        f"{spec.scene_px} px scenes)")
    t0 = time.perf_counter()
    write_archive(root, seed=seed, size=spec)
    SYNTH_SECONDS[0] += time.perf_counter() - t0
    done.write_text(f"{time.perf_counter() - t0:.1f} s\n")
    say(f"  written in {time.perf_counter() - t0:.0f} s")
    return root


def archive_summary(root: Path) -> str:
    deps = pd.read_csv(root / "deployments.csv")
    scenes = pd.read_csv(root / "scenes.csv")
    return f"{len(deps)} deployments, {len(scenes)} scenes"


# --------------------------------------------------------------------------- workflow

def run_workflow(archive: Path, results: Path, *, cores: int = 2, configfiles=(),
                 log: Path | None = None) -> float:
    """Run the whole workflow (with per-job benchmark files); return its wall time [s]."""
    cmd = [sys.executable, "-m", "snakemake", "all", "-s", str(BENCH_SNAKEFILE),
           "--profile", str(PROFILE), "--cores", str(cores)]
    if configfiles:
        cmd += ["--configfile", str(REPO / "config" / "config.yaml"),
                *[str(c) for c in configfiles]]
    cmd += ["--config", f"archive={archive}", f"results={results}"]
    log = log or results.with_name(results.name + ".log")
    log.parent.mkdir(parents=True, exist_ok=True)
    env = dict(os.environ)
    env["PATH"] = str(Path(sys.executable).parent) + os.pathsep + env.get("PATH", "")
    t0 = time.perf_counter()
    with open(log, "a") as fh:
        proc = subprocess.run(cmd, cwd=REPO, stdout=fh, stderr=subprocess.STDOUT, env=env)
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        raise RuntimeError(f"workflow failed (exit {proc.returncode}); see {log}")
    return wall


def fresh_interpreter_time(code: str, repeat: int = 3) -> float:
    """Median wall time [s] of a fresh interpreter running ``code``."""
    out = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-c", code], check=True)
        out.append(time.perf_counter() - t0)
    return statistics.median(out)


def _scontrol_wait() -> float:
    """Wall time [s] of ``scontrol show config`` (0 without a Slurm client), capped at
    the 10 s timeout that Snakemake's Slurm executor plugin gives it when imported."""
    if not shutil.which("scontrol"):
        return 0.0
    t0 = time.perf_counter()
    try:
        subprocess.run(["scontrol", "show", "config"], capture_output=True, timeout=10)
    except subprocess.TimeoutExpired:
        pass
    return time.perf_counter() - t0


def snakemake_startup_note(repeat: int = 3) -> str:
    """A report line: the median wall time of a fresh interpreter importing Snakemake's
    command line (what every ``snakemake`` run pays before reading the Snakefile), with
    the cause when the Slurm client of the machine is what makes it slow."""
    wall = fresh_interpreter_time("import snakemake.cli", repeat)
    line = (f"Snakemake's own start-up (fresh interpreter importing snakemake.cli, median "
            f"of {repeat}): {wall:.1f} s per run, outside the jobs' time")
    if wall > 5.0 and (wait := _scontrol_wait()) > 5.0:
        line += (f"; slow: of it, {wait:.0f} s is `scontrol show config` (run by the Slurm "
                 "executor plugin when imported) waiting for a controller that does not "
                 "answer; a slurm.conf left by a stopped test cluster?")
    return line


def job_benchmarks(results: Path, since: float = 0.0) -> pd.DataFrame:
    """Snakemake benchmark files under ``results/benchmarks`` (written after ``since``)."""
    rows = []
    for f in sorted((results / "benchmarks").rglob("*.tsv")):
        if f.stat().st_mtime < since:
            continue
        t = pd.read_csv(f, sep="\t")
        rel = f.relative_to(results / "benchmarks").with_suffix("")
        rule, end = rel.parts[0], f.stat().st_mtime
        for rec in t.to_dict(orient="records"):
            rows.append({"rule": rule, "job": str(rel), "end": end, **rec})
    return pd.DataFrame(rows)


def per_rule_note(jobs: pd.DataFrame) -> str:
    """A report line: per rule the jobs, their median and total own time, and the wall
    span from the first job's start to the last one's end (jobs of a rule that run side
    by side span less than their total)."""
    def span(g: pd.DataFrame) -> float:
        return float(g["end"].max() - (g["end"] - g["s"]).min())

    parts = [f"{rule} {len(g)}, {g['s'].median():.1f}, {g['s'].sum():.0f}, {span(g):.0f}"
             for rule, g in jobs.groupby("rule")]
    return "per rule (jobs, median s, total s, wall span s): " + "; ".join(parts)


#: The module each per-job script imports first, by rule (for the per-job fixed cost).
STEP_MODULES = {
    "insitu": "floeheat.steps.insitu", "match_scenes": "floeheat.steps.scenes",
    "radar": "floeheat.steps.scenes", "budget": "floeheat.steps.budget",
    "figures": "floeheat.steps.figures", "tables": "floeheat.steps.tables",
}


@cache
def startup_cost(module: str, repeat: int = 3) -> float:
    """Median wall time of a fresh interpreter importing what one job's script imports,
    and making its first xarray object (xarray then imports dask.array to recognise
    dask arrays: every job pays it before its first result). Measured once per module
    and bench run, so targets 5 and 6 share it (about 20 s less in a full run)."""
    return fresh_interpreter_time(
        f"import snakemake.script, {module}, xarray; xarray.DataArray([0.0])", repeat)


def fixed_cost_notes(jobs: pd.DataFrame, repeat: int = 3) -> list[str]:
    """Report lines: each main rule's per-job fixed cost (:func:`startup_cost`) and their
    sum over the jobs that ran, against the jobs' own time."""
    fixed = {rule: startup_cost(mod, repeat) for rule, mod in STEP_MODULES.items()}
    counts = jobs["rule"].value_counts()
    total = sum(int(counts.get(r, 0)) * v for r, v in fixed.items())
    return ["per-job fixed cost (fresh interpreter + the script's imports + first xarray "
            f"object, median of {repeat}): " + ", ".join(f"{r} {v:.2f} s"
                                                         for r, v in fixed.items()),
            f"fixed cost summed over the jobs of those rules: {total:.0f} s = "
            f"{100 * total / max(jobs['s'].sum(), 1e-9):.0f} % of all the jobs' own time"]
