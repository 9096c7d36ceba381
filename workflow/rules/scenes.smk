# Radar scenes: the checkpoint that matches scenes to each deployment's track, and the
# open-water fractions per deployment, batched over its matched scenes (one job reads
# only the window of pixels each circle needs from every scene).


checkpoint match_scenes:
    input:
        scenes=f"{RESULTS}/index/scenes.csv",
        insitu=all_stage_status("insitu"),
    output:
        matches=f"{RESULTS}/index/matches.csv",
    params:
        archive=ARCHIVE,
        radii_m=config["radar"]["radii_m"],
        coverage_threshold=config["radar"]["coverage_threshold"],
    log:
        f"{RESULTS}/logs/match_scenes.log",
    threads: 1
    resources:
        mem_mb=1000,
        runtime=30,
    script:
        "../scripts/match_scenes.py"


rule radar:
    input:
        insitu=f"{RESULTS}/deployments/{{deployment}}/status/insitu.json",
        scenes=get_matched_scenes,
    output:
        status=f"{RESULTS}/deployments/{{deployment}}/status/radar.json",
    params:
        archive=ARCHIVE,
        matched=get_matched_scene_rows,
        radii_m=config["radar"]["radii_m"],
        coverage_threshold=config["radar"]["coverage_threshold"],
        mask_codes=config["radar"]["mask_codes"],
    log:
        f"{RESULTS}/logs/radar/{{deployment}}.log",
    threads: 1
    resources:
        mem_mb=1500,
        runtime=60,
    script:
        "../scripts/radar.py"
