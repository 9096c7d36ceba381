"""Adapter of rule tables: seasonal, climatology and failures tables."""
from floeheat.steps.ensemble import write_attribution
from floeheat.steps.status import setup_logging
from floeheat.steps.tables import run_tables

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_tables(list(sm.input.budgets), sm.input.rejected, sm.output.seasonal,
           sm.output.climatology, sm.output.failures, sm.output.windows,
           climatology=dict(sm.params.climatology),
           screen_windows=sm.input.screen_windows,
           unsplit_csv=sm.output.climatology_unsplit)
write_attribution(list(sm.input.budgets), sm.output.attribution)
