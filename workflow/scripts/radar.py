"""Adapter of rule radar: open-water fractions of one deployment from its matched scenes."""
from floeheat.steps.scenes import run_radar
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
run_radar(sm.params.archive, sm.input.insitu, sm.input.matches, sm.output.status,
          radii_m=list(sm.params.radii_m), coverage_threshold=sm.params.coverage_threshold,
          mask_codes=dict(sm.params.mask_codes), classified=dict(sm.params.classified),
          floe_radius_m=sm.params.floe_radius_m)
