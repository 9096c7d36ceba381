# Figures, drawn in one batched job so they never dominate a rerun (the per-deployment
# figures by one process per thread).


rule figures:
    input:
        budgets=all_part_records("budget"),
        sheet=SHEET,
        seasonal=f"{RESULTS}/tables/seasonal.csv",
        climatology=f"{RESULTS}/tables/climatology.csv",
        attribution=f"{RESULTS}/tables/attribution.csv",
        bulkflux=f"{RESULTS}/tables/bulkflux.csv",
        bulkflux_windows=f"{RESULTS}/tables/bulkflux_windows.csv",
        screen=f"{RESULTS}/tables/screen.csv",
        screen_track=f"{RESULTS}/tables/screen_track.csv",
    params:
        budgets=all_stage_status("budget"),
        distance_m=config["screen"]["distance_m"],
        disagree_factor=config["bulkflux"]["disagree_factor"],
    output:
        figures=directory(f"{RESULTS}/figures"),
    log:
        f"{RESULTS}/logs/figures.log",
    # the per-deployment figures are drawn by one process per thread
    threads: 2
    resources:
        mem_mb=2000,
        runtime=30,
    script:
        "../scripts/figures.py"
