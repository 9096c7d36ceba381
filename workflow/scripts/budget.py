"""Adapter of rule budget: the forcing of a part's deployments in one pass, then each
deployment's budget terms into its budget.zarr."""
from floeheat.steps.budget import run_budget_part
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_budget_part(
    list(sm.params.rows), dict(sm.params.insitu), dict(sm.params.radar), sm.input.shortwave,
    sm.input.concentration, {d: list(p) for d, p in dict(sm.params.shortwave_csv).items()},
    dict(sm.params.status), sm.output.record,
    radar_max_gap_days=sm.params.radar_max_gap_days, microwave=dict(sm.params.microwave),
    budget=dict(sm.params.budget), radar_radii_m=list(sm.params.radar_radii_m),
    ensemble=dict(sm.params.ensemble), ice=dict(sm.params.ice),
    coverage_threshold=sm.params.coverage_threshold, threads=sm.threads)
