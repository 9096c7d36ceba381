"""Adapter of rule bulkflux_table: the per-deployment bulk-flux comparison tables."""
from floeheat.steps.bulkflux import run_bulkflux_table
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_bulkflux_table(list(sm.input.records), sm.output.table, sm.output.windows)
