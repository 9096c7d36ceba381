"""Adapter of rule figures: every figure of the run, in one batched job."""
from floeheat.steps.figures import run_figures
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_figures(list(sm.params.budgets), sm.input.seasonal, sm.input.climatology,
            sm.output.figures, attribution_csv=sm.input.attribution,
            checks={"bulkflux": sm.input.bulkflux, "bulkflux_windows": sm.input.bulkflux_windows,
                    "screen": sm.input.screen, "screen_track": sm.input.screen_track,
                    "distance_m": sm.params.distance_m,
                    "disagree_factor": sm.params.disagree_factor},
            processes=sm.threads)
