"""Adapter of rule figures: every figure of the run, in one batched job."""
from floeheat.steps.figures import run_figures
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_figures(list(sm.input.budgets), sm.input.seasonal, sm.input.climatology,
            sm.output.figures)
