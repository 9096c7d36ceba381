"""Targets 3, 4, 5 and 7: whole workflow runs on synthesized archives.

Every run goes through ``benchmarks/Snakefile`` (the main workflow with a Snakemake
``benchmark:`` file per job), so per-job wall time and peak resident memory come from
Snakemake's own benchmark files; whole-run wall times are measured around the
``snakemake`` command.
"""

from __future__ import annotations

import time

import pandas as pd

from benchmarks._common import (
    SYNTH_SECONDS,
    Result,
    archive_spec,
    archive_summary,
    fixed_cost_notes,
    fresh,
    job_benchmarks,
    per_rule_note,
    run_workflow,
    say,
    snakemake_startup_note,
    synth_archive,
)

CORES = 2


def _archives(scratch):
    """The shared archive folder: beside the per-target folders, reused across targets."""
    return scratch.parent


# --------------------------------------------------------------------------- target 3

def run_incremental(scratch, scale: str) -> Result:
    fresh(scratch)
    if scale == "full":
        spec = archive_spec(16, scene_px=2000, record_days=None, name="t3-full")
    else:
        spec = archive_spec(4, scene_px=800, record_days=20, name="t3-quick")
    archive = synth_archive(_archives(scratch), spec)
    results = scratch / "results"
    say(f"target 3: full run on {archive_summary(archive)}")
    t_full = run_workflow(archive, results)
    full_jobs = job_benchmarks(results)
    override = scratch / "albedo.yaml"
    override.write_text("budget:\n  albedo_ow: 0.08\n")
    mark = time.time()
    say("target 3: rerun after changing budget.albedo_ow 0.066 -> 0.08")
    t_rerun = run_workflow(archive, results, configfiles=[override])
    jobs = job_benchmarks(results, since=mark)
    ran = jobs["rule"].value_counts().sort_index()
    notes = [f"full run {t_full:.1f} s, rerun {t_rerun:.1f} s (wall, snakemake start to "
             "end, DAG building included)",
             "rerun jobs: " + ", ".join(f"{r} x{n}" for r, n in ran.items()),
             f"rerun {per_rule_note(jobs)}",
             f"10 % of the full run is {0.1 * t_full:.1f} s: the budget of every deployment "
             "(all its terms move with the albedo), then the tables, then the figures that "
             "plot them, must fit in it",
             f"rerun jobs' own time {jobs['s'].sum():.1f} s; the rest is Snakemake start-up, "
             "DAG building and checksum checks",
             f"CPU time of the jobs (load-independent): rerun {jobs['cpu_time'].sum():.1f} s "
             f"/ full run {full_jobs['cpu_time'].sum():.1f} s = "
             f"{jobs['cpu_time'].sum() / full_jobs['cpu_time'].sum():.2f}; "
             f"mean job load {full_jobs['mean_load'].mean():.0f} % of a core (machine shared)"]
    notes.append(snakemake_startup_note())
    sizes = f"{archive_summary(archive)} ({spec.scene_px} px scenes), {CORES} cores"
    return Result(3, "Incremental rerun after an albedo change (rerun / full run)",
                  t_rerun / t_full, 0.10, sizes, notes)


# --------------------------------------------------------------------------- target 4

def run_memory(scratch, scale: str) -> Result:
    fresh(scratch)
    px = 20000 if scale == "full" else 8000
    spec = archive_spec(2, scene_px=px, record_days=8, scene_every_days=4, per_array=2,
                        name=f"t4-px{px}")
    archive = synth_archive(_archives(scratch), spec)
    results = scratch / "results"
    say(f"target 4: run on {archive_summary(archive)} of {px} x {px} px")
    run_workflow(archive, results)
    jobs = job_benchmarks(results)
    per_rule = jobs.groupby("rule")["max_rss"].max().sort_values(ascending=False)
    worst = float(per_rule.iloc[0])
    notes = ["peak RSS per rule [MB]: " + ", ".join(f"{r} {v:.0f}" for r, v in
                                                  per_rule.items())]
    # runs of other targets in the same scratch folder: memory against deployments
    for other in sorted(scratch.parent.glob("t[57]/results*")):
        oj = job_benchmarks(other)
        if oj.empty:
            continue
        n_dep = sum(1 for p in (other / "deployments").iterdir() if p.is_dir())
        top = oj.loc[oj["max_rss"].idxmax()]
        worst = max(worst, float(top["max_rss"]))
        notes.append(f"{other.parent.name}/{other.name}: {n_dep} deployments, peak RSS "
                     f"{top['max_rss']:.0f} MB in {top['job']}")
    # the radar stage's per-(scene, buoy) work on a 20,000 x 20,000 px scene, in a fresh
    # process (the synthesizer itself needs several GB to render scenes that large)
    from benchmarks.scene_reads import peak_rss_of_one, write_tiled

    big = _archives(scratch) / "archives" / "mask_20000.tif"
    if not big.is_file():  # synthesized input: cached beside the archives, not counted
        t0 = time.perf_counter()
        big.parent.mkdir(parents=True, exist_ok=True)
        write_tiled(big.with_suffix(".partial.tif"), 20000)
        big.with_suffix(".partial.tif").rename(big)
        SYNTH_SECONDS[0] += time.perf_counter() - t0
    rss_big = peak_rss_of_one(big)
    worst = max(worst, rss_big)
    notes.append(f"open + window + read + counts on a 20000 x 20000 px tiled GeoTIFF "
                 f"({big.stat().st_size / 1e6:.0f} MB on disk, 400 MB of pixels) in a fresh "
                 f"process: peak RSS {rss_big:.0f} MB")
    if len(notes) == 2:
        notes.append("no many-deployment run in this scratch folder: run targets 5 or 7 "
                     "first (same --scratch) to add memory against deployment count")
    sizes = f"{archive_summary(archive)} of {px} x {px} px (uint8 masks)"
    return Result(4, "Bounded memory (peak RSS of any job / 2 GB)", worst / 2048.0, 1.0,
                  sizes, notes)


# --------------------------------------------------------------------------- target 5

def run_overhead(scratch, scale: str) -> Result:
    fresh(scratch)
    n_dep, n_scenes = (200, 2000) if scale == "full" else (12, 120)
    n_arrays = n_dep // 4
    days = n_scenes / n_arrays  # one scene per array and day
    spec = archive_spec(n_dep, scene_px=512, record_days=days, scene_every_days=1.0,
                        name=f"t5-d{n_dep}")
    archive = synth_archive(_archives(scratch), spec)
    results = scratch / "results"
    say(f"target 5: run on {archive_summary(archive)}")
    wall = run_workflow(archive, results, cores=CORES)
    jobs = job_benchmarks(results)
    compute = jobs["s"].sum()
    ratio = wall / (compute / CORES)
    counts = jobs["rule"].value_counts()
    per_stage = sum(int(counts.get(r, 0)) for r in ("insitu", "match_scenes", "radar",
                                                    "budget"))
    cpu = jobs["cpu_time"].sum()
    notes = [f"wall {wall:.0f} s; sum of the {len(jobs)} jobs' own time {compute:.0f} s "
             f"/ {CORES} cores = {compute / CORES:.0f} s",
             f"jobs' CPU time {cpu:.0f} s (mean job load {jobs['mean_load'].mean():.0f} % of a "
             f"core: the machine is shared); wall / (CPU time / cores) = "
             f"{wall / (cpu / CORES):.2f}",
             per_rule_note(jobs),
             *fixed_cost_notes(jobs),
             f"batching: {n_dep} deployments in {counts.get('budget', 0)} parts (at most "
             "jobs.max_per_stage jobs per per-deployment stage), so the insitu, "
             f"match_scenes, radar and budget stages ran {per_stage} jobs instead of "
             f"{4 * n_dep}; {counts.get('radar', 0)} radar jobs read the "
             f"{len(pd.read_csv(archive / 'scenes.csv'))} scenes; figures and tables are "
             "one job each (figures drawn by 2 processes)"]
    notes.append(snakemake_startup_note())
    sizes = f"{archive_summary(archive)} of 512 x 512 px, {CORES} cores"
    return Result(5, "Orchestration overhead (wall / (sum of job time / cores))", ratio, 1.3,
                  sizes, notes)


# --------------------------------------------------------------------------- target 7

def run_scaling(scratch, scale: str) -> Result:
    fresh(scratch)
    sizes_n = (8, 32, 128) if scale == "full" else (2, 4, 8)
    walls, cpus = {}, {}
    for n in sizes_n:
        spec = archive_spec(n, scene_px=512, record_days=30, scene_every_days=2.0,
                            name=f"t7-d{n}")
        archive = synth_archive(_archives(scratch), spec)
        say(f"target 7: run on {archive_summary(archive)}")
        walls[n] = run_workflow(archive, scratch / f"results-d{n}")
        cpus[n] = job_benchmarks(scratch / f"results-d{n}")["cpu_time"].sum()
        say(f"  {n} deployments: wall {walls[n]:.0f} s, jobs' CPU {cpus[n]:.0f} s")
    per = {n: walls[n] / n for n in sizes_n}
    lo, hi = sizes_n[0], sizes_n[-1]
    ratio = per[hi] / per[lo]
    notes = ["wall time (s per deployment): " + ", ".join(
        f"{n} deployments {walls[n]:.0f} s ({per[n]:.1f})" for n in sizes_n),
             "jobs' CPU time (s per deployment): " + ", ".join(
        f"{n} deployments {cpus[n]:.0f} s ({cpus[n] / n:.1f})" for n in sizes_n)
             + f"; CPU ratio {hi} / {lo}: {(cpus[hi] / hi) / (cpus[lo] / lo):.2f}"]
    sizes = (f"{', '.join(map(str, sizes_n))} deployments (arrays of 4), 30 days, "
             f"512 px scenes every 2 days per array, {CORES} cores")
    return Result(7, f"Scaling (time per deployment, {hi} / {lo} deployments)", ratio, 1.2,
                  sizes, notes)
