# floeheat: upper-ocean heat budgets under drifting sea ice.
# Archive (format version 1) -> per-deployment budgets -> basin-wide tables.
# Run from the repository root with the project's .venv active:
#   snakemake --profile profiles/default [--config archive=PATH results=PATH]
import os
import sys

from snakemake.utils import min_version, validate

from floeheat.reproduce import PinMismatch, check_pin

min_version("9.0")


configfile: "config/config.yaml"


validate(config, "workflow/schemas/config.schema.yaml", set_default=True)

# A pinned run (--configfile config/runs/NAME.yaml) refuses to start when its archive,
# settings or software differ from the pin, unless --config pin_override=true.
LOCK = os.path.relpath(os.path.join(workflow.basedir, "requirements.lock"))
if workflow.is_main_process:
    try:
        check_pin(config, LOCK)
    except PinMismatch as refusal:
        sys.exit(f"floeheat: {refusal}")


include: "workflow/rules/common.smk"
include: "workflow/rules/archive.smk"
include: "workflow/rules/insitu.smk"
include: "workflow/rules/classify.smk"
include: "workflow/rules/scenes.smk"
include: "workflow/rules/forcing.smk"
include: "workflow/rules/budget.smk"
include: "workflow/rules/tables.smk"
include: "workflow/rules/checks.smk"
include: "workflow/rules/figures.smk"


rule all:
    input:
        f"{RESULTS}/tables/seasonal.csv",
        f"{RESULTS}/tables/climatology.csv",
        f"{RESULTS}/tables/failures.csv",
        f"{RESULTS}/tables/classification_agreement.csv",
        f"{RESULTS}/tables/screen.csv",
        f"{RESULTS}/tables/bulkflux.csv",
        f"{RESULTS}/figures",
        f"{RESULTS}/manifest.json",
    default_target: True
