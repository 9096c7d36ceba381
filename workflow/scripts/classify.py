"""Adapter of rule classify: one batch of backscatter acquisitions -> classified stores."""
from floeheat.steps.classify import run_classify
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_classify(sm.params.archive, list(sm.params.rows), sm.output.stores, dict(sm.params.settings))
