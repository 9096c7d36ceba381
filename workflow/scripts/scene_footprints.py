"""Adapter of rule scene_footprints: every scene's grid, read once per run."""
from floeheat.steps.scenes import run_scene_footprints
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_scene_footprints(sm.params.archive, sm.input.scenes, sm.output.footprints)
