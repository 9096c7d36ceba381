"""Adapter of rule bulkflux: measured against bulk ocean-to-ice heat flux, one deployment."""
from floeheat.steps.bulkflux import run_bulkflux
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_bulkflux(dict(sm.params.row), sm.input.insitu, list(sm.input.profiles), sm.output.status,
             settings=dict(sm.params.settings))
