"""Adapter of checkpoint index: validate and index the archive's sheets and files."""
from floeheat.steps.index import run_index
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_index(sm.params.archive, sm.output.deployments, sm.output.scenes, sm.output.forcing,
          sm.output.rejected)
