"""Adapter of rule screen: flag the budget windows where a 1-D budget may not hold."""
from floeheat.steps.screen import run_screen
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_screen(list(sm.input.budgets), list(sm.input.bathymetry), sm.output.screen,
           sm.output.windows, sm.output.track, settings=dict(sm.params.screen))
