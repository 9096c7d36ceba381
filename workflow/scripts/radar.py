"""Adapter of rule radar: open-water fractions of a part's deployments from their
matched scenes."""
from floeheat.steps.scenes import run_radar_part
from floeheat.steps.status import setup_logging

sm = snakemake  # noqa: F821 (injected by Snakemake)
setup_logging(sm.log[0])
if isinstance(sm.params.classified, str):  # "<TBD>": what checkpoint match_scenes feeds
    raise SystemExit("radar: Snakemake left this job's matched scenes unresolved (a radar "
                     "job forced on its own, behind checkpoint match_scenes); rerun with "
                     "--forcerun match_scenes radar")
run_radar_part(sm.params.archive, dict(sm.params.insitu), dict(sm.params.matches),
               dict(sm.params.status), sm.output.record,
               classified=dict(sm.params.classified), mask_codes=dict(sm.params.mask_codes),
               radii_m=list(sm.params.radii_m),
               coverage_threshold=sm.params.coverage_threshold,
               floe_radius_m=sm.params.floe_radius_m)
