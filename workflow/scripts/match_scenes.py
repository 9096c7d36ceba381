"""Adapter of checkpoint match_scenes: which scenes serve each deployment of a part."""
from floeheat.steps.scenes import run_match_part
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_match_part(sm.input.footprints, dict(sm.params.insitu), dict(sm.params.matches),
               sm.output.matches, radii_m=list(sm.params.radii_m),
               coverage_threshold=sm.params.coverage_threshold)
