"""Adapter of rule radar: open-water fractions of a part's deployments from their
matched scenes."""
from floeheat.steps.parts import run_part
from floeheat.steps.scenes import run_radar
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
insitu, matches, status = (dict(sm.params.insitu), dict(sm.params.matches),
                           dict(sm.params.status))
run_part("radar", status,
         lambda dep: run_radar(sm.params.archive, insitu[dep], matches[dep], status[dep],
                               radii_m=list(sm.params.radii_m),
                               coverage_threshold=sm.params.coverage_threshold,
                               mask_codes=dict(sm.params.mask_codes),
                               classified=dict(sm.params.classified),
                               floe_radius_m=sm.params.floe_radius_m),
         sm.output.record)
