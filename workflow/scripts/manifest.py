"""Adapter of rule manifest: the run record."""
from floeheat.steps.manifest import run_manifest
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_manifest(sm.params.archive, sm.params.results, dict(sm.params.config),
             sm.output.manifest)
