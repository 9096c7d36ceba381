# Workflow-side Python: sheet loading, wildcard constraints and the get_* input
# functions. Rules and scripts receive only what they need as named inputs and params.
import os

import pandas as pd

ARCHIVE = str(config["archive"]).rstrip("/")
RESULTS = str(config["results"]).rstrip("/")
#: The bundled demo: synthesized by rule synth_demo when the folder is absent.
DEMO_ARCHIVE = "demo-archive"
STAGES = ("insitu", "radar", "budget")


wildcard_constraints:
    deployment=r"[A-Za-z0-9][A-Za-z0-9_-]{0,63}",


def index_table():
    """The validated deployment sheet written by checkpoint index."""
    path = checkpoints.index.get().output.deployments
    return pd.read_csv(path, dtype=str, keep_default_na=False)


def deployment_ids():
    return index_table()["deployment_id"].tolist()


def deployment_row(deployment):
    table = index_table()
    return table[table["deployment_id"] == deployment].iloc[0]


def existing(relpath):
    """Archive path of a sheet entry, listed as an input only when it exists: a
    missing file is reported by the stage for that deployment alone, instead of
    stopping the whole DAG."""
    if not relpath:
        return []
    path = os.path.join(ARCHIVE, relpath)
    return [path] if os.path.exists(path) else []


def get_insitu_files(wildcards):
    row = deployment_row(wildcards.deployment)
    return {
        "profiles": existing(row["profile_file"]),
        "icemass": existing(row["icemass_file"]),
    }


def get_sheet_row(wildcards):
    """The deployment's sheet row as a plain dict (passed as params)."""
    return deployment_row(wildcards.deployment).to_dict()


def get_matched_scenes(wildcards):
    """Scene files matched to one deployment by its match_scenes checkpoint."""
    path = checkpoints.match_scenes.get(deployment=wildcards.deployment).output.matches
    matches = pd.read_csv(path, dtype=str, keep_default_na=False)
    return [p for rel in sorted(set(matches["path"])) for p in existing(rel)]


def get_scene_files(wildcards):
    """Every scene file of the index (footprints are read from their headers)."""
    scenes = pd.read_csv(checkpoints.index.get().output.scenes, dtype=str,
                         keep_default_na=False)
    return [p for rel in sorted(set(scenes["path"])) for p in existing(rel)]


def get_forcing_files(wildcards):
    """Gridded shortwave and concentration files listed by checkpoint index."""
    import json

    with open(checkpoints.index.get().output.forcing) as f:
        listing = json.load(f)
    files = listing.get("shortwave", []) + listing.get("concentration", [])
    return [p for rel in files for p in existing(rel)]


def get_shortwave_csv(wildcards):
    return existing(deployment_row(wildcards.deployment)["shortwave_file"])


def all_stage_status(stage):
    def _inputs(wildcards):
        return [f"{RESULTS}/deployments/{d}/status/{stage}.json" for d in deployment_ids()]

    return _inputs
