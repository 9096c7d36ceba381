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
    part=r"part-\d+",


_INDEX_CACHE = {}


def index_table():
    """The validated deployment sheet written by checkpoint index (read once per
    version of the file: input functions ask for it for every job)."""
    path = checkpoints.index.get().output.deployments
    key = (path, os.stat(path).st_mtime_ns)
    if key not in _INDEX_CACHE:
        _INDEX_CACHE.clear()
        _INDEX_CACHE[key] = pd.read_csv(path, dtype=str, keep_default_na=False)
    return _INDEX_CACHE[key]


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


#: The validated sheet (checkpoint index): an input of every rule whose params or inputs
#: are read from it, so that a job re-evaluated on a cluster node may read it too.
SHEET = f"{RESULTS}/index/deployments.csv"


# --- parts: consecutive deployments sharing one job of each per-deployment stage ----
# (floeheat.steps.parts). Rules insitu, match_scenes, radar and budget run per part;
# each writes every member's own status record and declares the part's record.
def parts():
    """Part name -> its deployment ids (sheet order, at most jobs.max_per_stage parts)."""
    from floeheat.steps.parts import deployment_parts

    return deployment_parts(deployment_ids(), config["jobs"]["max_per_stage"])


def part_members(wildcards):
    return parts()[wildcards.part]


def status_path(deployment, stage):
    """A deployment's status record of one stage (written by its part's job)."""
    return f"{RESULTS}/deployments/{deployment}/status/{stage}.json"


def part_record(stage):
    """The declared output of a per-deployment stage's job, as an input pattern."""
    return f"{RESULTS}/parts/{stage}/{{part}}.json"


def part_status(stage):
    """deployment -> status record of ``stage``, for the members of one part (params)."""

    def _paths(wildcards):
        return {d: status_path(d, stage) for d in part_members(wildcards)}

    return _paths


def part_matches(wildcards):
    """deployment -> its matches.csv, for the members of one part (params)."""
    return {d: f"{RESULTS}/deployments/{d}/matches.csv" for d in part_members(wildcards)}


def get_part_rows(wildcards):
    """The sheet rows of one part's deployments, as plain dicts (params)."""
    table = index_table()
    rows = table[table["deployment_id"].isin(part_members(wildcards))]
    return rows.to_dict(orient="records")


def get_insitu_files(wildcards):
    files = {"profiles": [], "icemass": []}
    for dep in part_members(wildcards):
        row = deployment_row(dep)
        files["profiles"] += existing(row["profile_file"])
        files["icemass"] += existing(row["icemass_file"])
    return files


def part_matches_table(wildcards):
    """The matches of one part's deployments (its match_scenes checkpoint)."""
    path = checkpoints.match_scenes.get(part=wildcards.part).output.matches
    return pd.read_csv(path, dtype=str, keep_default_na=False)


def get_matched_scenes(wildcards):
    """Scene files matched to one part's deployments by its match_scenes checkpoint."""
    matches = part_matches_table(wildcards)
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
    """Point shortwave files of one part's deployments (inputs)."""
    return sorted({p for paths in part_shortwave_csv(wildcards).values() for p in paths})


def part_shortwave_csv(wildcards):
    """deployment -> its point shortwave files, for one part (params)."""
    return {d: existing(deployment_row(d)["shortwave_file"]) for d in part_members(wildcards)}


def all_part_records(stage):
    """Every part's record of ``stage`` (inputs of the run-wide rules)."""

    def _inputs(wildcards):
        return [part_record(stage).format(part=name) for name in parts()]

    return _inputs


def all_stage_status(stage):
    """Every deployment's status record of ``stage``, in sheet order (params of the
    run-wide rules, which declare the parts' records as inputs)."""

    def _paths(wildcards):
        return [status_path(d, stage) for d in deployment_ids()]

    return _paths


# --- where a 1-D budget holds (rules tables, bulkflux) ----------------------------
#: Settings of rule bulkflux: its own section plus the budget's window length and the
#: freezing point's air saturation, so that its windows match the budget's.
BULKFLUX_SETTINGS = {
    **config["bulkflux"],
    "window_days": config["budget"]["window_days"],
    "saturation_fraction": config["storage"]["saturation_fraction"],
}


def get_bathymetry_files(wildcards):
    """The archive's bathymetry grid: NetCDF files classed by checkpoint index, or
    GeoTIFF files under bathymetry/ (empty: no advection screen)."""
    import glob
    import json

    with open(checkpoints.index.get().output.forcing) as f:
        listing = json.load(f)
    files = [p for rel in listing.get("bathymetry", []) for p in existing(rel)]
    tifs = sorted(glob.glob(os.path.join(ARCHIVE, "bathymetry", "*.tif")) +
                  glob.glob(os.path.join(ARCHIVE, "bathymetry", "*.tiff")))
    return files + tifs


def get_array_ids(wildcards):
    """deployment_id -> array_id of every deployment (passed as params)."""
    table = index_table()
    return dict(zip(table["deployment_id"], table["array_id"]))


# --- job resources sized from the inputs (profiles/slurm sends them to sbatch) -------
def sized_mb(base_mb, per_input_mb=0.0, cap_mb=64000, per_member=False):
    """mem_mb for a rule: ``base_mb`` plus ``per_input_mb`` per MB of input, capped, and
    doubled on each retry (``attempt``) so that a job killed for memory asks for more.
    ``per_member``: a part's job holds one deployment at a time, so its input size is
    shared out over the part's members (their mean)."""

    def _mem(wildcards, input, attempt):
        size = input.size_mb
        if per_member:
            size /= max(1, len(part_members(wildcards)))
        return int(min(cap_mb, base_mb + per_input_mb * size) * 2 ** (attempt - 1))

    return _mem


def sized_min(base_min, per_input_gb_min=0.0, cap_min=24 * 60):
    """runtime [min] for a rule: ``base_min`` plus ``per_input_gb_min`` per GB of input,
    capped, and doubled on each retry."""

    def _runtime(wildcards, input, attempt):
        return int(min(cap_min, base_min + per_input_gb_min * input.size_mb / 1024)
                   * 2 ** (attempt - 1))

    return _runtime


# --- classification of backscatter (rules classify, classification_agreement, radar) ---
#: Settings of floeheat.classify.ClassifySettings (config section classify).
CLASSIFY_SETTINGS = {k: v for k, v in config["classify"].items() if k != "scenes_per_job"}
SCENE_COLUMNS = ["scene_id", "path", "time", "content", "band", "acquisition_id"]


def scene_table():
    """The scene table written by checkpoint index."""
    return pd.read_csv(checkpoints.index.get().output.scenes, dtype=str,
                       keep_default_na=False)


def classify_batches():
    """Batch name -> its backscatter acquisitions (index order, scenes_per_job each)."""
    from floeheat.steps.classify import batches

    return batches(scene_table(), config["classify"]["scenes_per_job"])


def all_classify_outputs(wildcards):
    """Every classification batch's folder of stores (rule classify)."""
    return [f"{RESULTS}/classified/{name}" for name in classify_batches()]


def classified_store(key, batch_of):
    return f"{RESULTS}/classified/{batch_of[key]}/{key}.zarr"


def get_classify_rows(wildcards):
    """The scene rows of one classification batch (passed as params)."""
    from floeheat.steps.classify import acquisitions

    acq = acquisitions(scene_table())
    rows = acq[acq["acquisition"].isin(classify_batches()[wildcards.batch])]
    return rows[SCENE_COLUMNS].to_dict(orient="records")


def get_classify_files(wildcards):
    return [p for row in get_classify_rows(wildcards) for p in existing(row["path"])]


def get_classified_stores(wildcards):
    """Matched backscatter scene_id -> classified store, for the scenes of one part's
    deployments that no matched mask of the same time serves (per deployment)."""
    from floeheat.steps.classify import acquisitions

    matches = part_matches_table(wildcards)
    wanted = set()
    for _, own in matches.groupby("deployment_id"):
        mask_times = set(own.loc[own["content"] == "mask", "time"])
        back = own[(own["content"] == "backscatter") & ~own["time"].isin(mask_times)]
        wanted |= set(back["scene_id"])
    if not wanted:
        return {}
    acq = acquisitions(scene_table())
    key_of = dict(zip(acq["scene_id"], acq["acquisition"]))
    batch_of = {k: b for b, keys in classify_batches().items() for k in keys}
    return {sid: classified_store(key_of[sid], batch_of)
            for sid in sorted(wanted) if sid in key_of}


def get_classified_batches(wildcards):
    return sorted({os.path.dirname(p) for p in get_classified_stores(wildcards).values()})


def get_twin_stores(wildcards):
    """Acquisition -> classified store, for acquisitions the archive also holds as masks."""
    from floeheat.steps.classify import mask_twins

    batch_of = {k: b for b, keys in classify_batches().items() for k in keys}
    return {k: classified_store(k, batch_of) for k in sorted(mask_twins(scene_table()))}


def get_twin_batches(wildcards):
    return sorted({os.path.dirname(p) for p in get_twin_stores(wildcards).values()})


def get_twin_masks(wildcards):
    from floeheat.steps.classify import mask_twins

    table = scene_table()
    paths = dict(zip(table["scene_id"], table["path"]))
    return [p for sid in sorted(set(mask_twins(table).values())) for p in existing(paths[sid])]
