# Figures, drawn in one batched job so they never dominate a rerun.


rule figures:
    input:
        budgets=all_stage_status("budget"),
        seasonal=f"{RESULTS}/tables/seasonal.csv",
        climatology=f"{RESULTS}/tables/climatology.csv",
        attribution=f"{RESULTS}/tables/attribution.csv",
        bulkflux=f"{RESULTS}/tables/bulkflux.csv",
        bulkflux_windows=f"{RESULTS}/tables/bulkflux_windows.csv",
        screen=f"{RESULTS}/tables/screen.csv",
        screen_track=f"{RESULTS}/tables/screen_track.csv",
    params:
        distance_m=config["screen"]["distance_m"],
        disagree_factor=config["bulkflux"]["disagree_factor"],
    output:
        figures=directory(f"{RESULTS}/figures"),
    log:
        f"{RESULTS}/logs/figures.log",
    threads: 1
    resources:
        mem_mb=1500,
        runtime=30,
    script:
        "../scripts/figures.py"
