# Radar scenes: footprints read once per run, a per-deployment checkpoint that matches
# scenes to the track (so the DAG fans out over deployments and their matched scenes),
# and the open-water fractions and floe context per deployment, batched over its matched
# scenes (one job reads only the window of pixels each circle needs from every mask or
# classified store, rule classify).


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
        insitu=f"{RESULTS}/deployments/{{deployment}}/status/insitu.json",
    output:
        matches=f"{RESULTS}/deployments/{{deployment}}/matches.csv",
    params:
        radii_m=config["radar"]["radii_m"],
        coverage_threshold=config["radar"]["coverage_threshold"],
    log:
        f"{RESULTS}/logs/match_scenes/{{deployment}}.log",
    threads: 1
    resources:
        mem_mb=500,
        runtime=10,
    script:
        "../scripts/match_scenes.py"


rule radar:
    input:
        insitu=f"{RESULTS}/deployments/{{deployment}}/status/insitu.json",
        matches=f"{RESULTS}/deployments/{{deployment}}/matches.csv",
        scenes=get_matched_scenes,
        classified=get_classified_batches,
    output:
        status=f"{RESULTS}/deployments/{{deployment}}/status/radar.json",
    params:
        archive=ARCHIVE,
        radii_m=config["radar"]["radii_m"],
        coverage_threshold=config["radar"]["coverage_threshold"],
        mask_codes=config["radar"]["mask_codes"],
        classified=get_classified_stores,
        floe_radius_m=config["radar"]["floe_radius_m"],
    log:
        f"{RESULTS}/logs/radar/{{deployment}}.log",
    threads: 1
    resources:
        # only the windows the circles need are read, so memory barely grows with the
        # scenes' size; time grows with the bytes of the matched scenes
        mem_mb=sized_mb(1500, per_input_mb=0.01, cap_mb=8000),
        runtime=sized_min(10, per_input_gb_min=5),
    script:
        "../scripts/radar.py"
