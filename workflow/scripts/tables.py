"""Adapter of rule tables: the window screen, then the seasonal, climatology, failures
and attribution tables."""
from floeheat.steps.ensemble import write_attribution
from floeheat.steps.screen import run_screen
from floeheat.steps.status import setup_logging
from floeheat.steps.tables import run_tables

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_screen(list(sm.params.budgets), list(sm.input.bathymetry), sm.output.screen,
           sm.output.screen_windows, sm.output.screen_track, settings=dict(sm.params.screen))
run_tables(list(sm.params.budgets), sm.input.rejected, sm.output.seasonal,
           sm.output.climatology, sm.output.failures, sm.output.windows,
           climatology=dict(sm.params.climatology),
           screen_windows=sm.output.screen_windows,
           unsplit_csv=sm.output.climatology_unsplit)
write_attribution(list(sm.params.budgets), sm.output.attribution)
