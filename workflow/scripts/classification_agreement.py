"""Adapter of rule classification_agreement: classified backscatter against masks."""
from floeheat.steps.classify import run_agreement
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_agreement(sm.params.archive, sm.input.scenes, dict(sm.params.stores), sm.output.table,
              dict(sm.params.mask_codes))
