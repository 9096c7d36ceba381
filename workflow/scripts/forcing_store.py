"""Adapter of rule forcing_store: gridded forcing into stores read in one pass along time."""
from floeheat.steps.forcing import run_forcing_store
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_forcing_store(sm.params.archive, sm.params.listing, sm.output.shortwave,
                  sm.output.concentration, threads=sm.threads)
