"""Adapter of rule budget: one deployment's budget terms into budget.zarr."""
from floeheat.steps.budget import run_budget
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_budget(dict(sm.params.row), sm.input.insitu, sm.input.radar, sm.input.shortwave,
           sm.input.concentration, list(sm.input.shortwave_csv), sm.output.status,
           radar_max_gap_days=sm.params.radar_max_gap_days,
           microwave=dict(sm.params.microwave), budget=dict(sm.params.budget),
           radar_radii_m=list(sm.params.radar_radii_m), ensemble=dict(sm.params.ensemble),
           ice=dict(sm.params.ice), coverage_threshold=sm.params.coverage_threshold,
           threads=sm.threads)
