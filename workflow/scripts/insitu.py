"""Adapter of rule insitu: track, ice base and heat storage of a part's deployments."""
from floeheat.steps.insitu import run_insitu
from floeheat.steps.parts import run_part
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
rows = {row["deployment_id"]: dict(row) for row in sm.params.rows}
status = dict(sm.params.status)
run_part("insitu", status,
         lambda dep: run_insitu(sm.params.archive, rows[dep], status[dep],
                                track=dict(sm.params.track), ice=dict(sm.params.ice),
                                storage=dict(sm.params.storage),
                                season=dict(sm.params.season)),
         sm.output.record)
