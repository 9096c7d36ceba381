"""Adapter of rule synth_demo: write the bundled demo archive."""
from pathlib import Path

from floeheat.steps.status import setup_logging
from floeheat.synth import write_archive

setup_logging(snakemake.log[0])  # noqa: F821 (injected by Snakemake)
write_archive(Path(snakemake.params.outdir), seed=snakemake.params.seed,  # noqa: F821
              size=snakemake.params.size,  # noqa: F821
              hemisphere=snakemake.params.hemisphere,  # noqa: F821
              variant=snakemake.params.variant)  # noqa: F821
