"""Adapter of rule budget: each deployment's budget terms of a part into budget.zarr."""
from floeheat.steps.budget import run_budget
from floeheat.steps.parts import run_part
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
rows = {row["deployment_id"]: dict(row) for row in sm.params.rows}
insitu, radar, status = dict(sm.params.insitu), dict(sm.params.radar), dict(sm.params.status)
shortwave_csv = dict(sm.params.shortwave_csv)
run_part("budget", status,
         lambda dep: run_budget(
             rows[dep], insitu[dep], radar[dep], sm.input.shortwave, sm.input.concentration,
             list(shortwave_csv[dep]), status[dep],
             radar_max_gap_days=sm.params.radar_max_gap_days,
             microwave=dict(sm.params.microwave), budget=dict(sm.params.budget),
             radar_radii_m=list(sm.params.radar_radii_m), ensemble=dict(sm.params.ensemble),
             ice=dict(sm.params.ice), coverage_threshold=sm.params.coverage_threshold,
             threads=sm.threads),
         sm.output.record)
