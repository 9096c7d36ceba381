# Radar scenes: footprints read once per run, a checkpoint per part of the deployments
# that matches scenes to each track (so the DAG fans out over the parts and their
# matched scenes), and the open-water fractions and floe context of each deployment,
# one job per part over its members' matched scenes (reading only the window of pixels
# each circle needs from every mask or classified store, rule classify).


rule scene_footprints:
    input:
        scenes=f"{RESULTS}/index/scenes.csv",
        files=get_scene_files,
    output:
        footprints=f"{RESULTS}/index/footprints.csv",
    params:
        archive=ARCHIVE,
    log:
        f"{RESULTS}/logs/scene_footprints.log",
    threads: 1
    resources:
        mem_mb=1000,
        runtime=30,
    script:
        "../scripts/scene_footprints.py"


checkpoint match_scenes:
    input:
        footprints=f"{RESULTS}/index/footprints.csv",
        insitu=part_record("insitu"),
        sheet=SHEET,
        # Unused here, like radar_only below: Snakemake 9.27 looks at what a job fed by
        # a checkpoint (radar) gets from it, and at its params, only when the checkpoint
        # runs in the same invocation. So whatever should rerun radar reruns this
        # checkpoint: a new classification, or a change of the radar stage's own
        # settings (DEVELOPERS.md, "Rerun only what changed").
        classified=all_classify_outputs,
    output:
        matches=f"{RESULTS}/parts/match_scenes/{{part}}.csv",
    params:
        insitu=part_status("insitu"),
        matches=part_matches,
        radii_m=config["radar"]["radii_m"],
        coverage_threshold=config["radar"]["coverage_threshold"],
        radar_only={"mask_codes": config["radar"]["mask_codes"],
                    "floe_radius_m": config["radar"]["floe_radius_m"]},
    log:
        f"{RESULTS}/logs/match_scenes/{{part}}.log",
    threads: 1
    resources:
        mem_mb=500,
        runtime=10,
    script:
        "../scripts/match_scenes.py"


rule radar:
    input:
        insitu=part_record("insitu"),
        matches=f"{RESULTS}/parts/match_scenes/{{part}}.csv",
        sheet=SHEET,
        scenes=get_matched_scenes,
        classified=get_classified_batches,
    output:
        record=part_record("radar"),
    params:
        archive=ARCHIVE,
        insitu=part_status("insitu"),
        matches=part_matches,
        status=part_status("radar"),
        radii_m=config["radar"]["radii_m"],
        coverage_threshold=config["radar"]["coverage_threshold"],
        mask_codes=config["radar"]["mask_codes"],
        classified=get_classified_stores,
        floe_radius_m=config["radar"]["floe_radius_m"],
    log:
        f"{RESULTS}/logs/radar/{{part}}.log",
    threads: 1
    resources:
        # only the windows the circles need are read, so memory barely grows with the
        # scenes' size; time grows with the bytes of the matched scenes
        mem_mb=sized_mb(1500, per_input_mb=0.01, cap_mb=8000, per_member=True),
        runtime=sized_min(10, per_input_gb_min=5),
    script:
        "../scripts/radar.py"
