# Figures, drawn in one batched job so they never dominate a rerun.


rule figures:
    input:
        budgets=all_stage_status("budget"),
        seasonal=f"{RESULTS}/tables/seasonal.csv",
        climatology=f"{RESULTS}/tables/climatology.csv",
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
