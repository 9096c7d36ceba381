"""Adapter of rule insitu: track, ice base and heat storage of one deployment."""
from floeheat.steps.insitu import run_insitu
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_insitu(sm.params.archive, dict(sm.params.row), sm.output.status,
           track=dict(sm.params.track), ice=dict(sm.params.ice),
           storage=dict(sm.params.storage), season=dict(sm.params.season))
