"""Adapter of rule bulkflux: measured against bulk ocean-to-ice heat flux, every deployment."""
from floeheat.steps.bulkflux import run_bulkflux
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_bulkflux(list(sm.params.insitu), dict(sm.params.array_ids), sm.output.table,
             sm.output.windows, settings=dict(sm.params.settings))
