# Where the one-dimensional budget holds: the bulk-flux cross-check of the ocean-to-ice
# heat flux (run-wide). The advection, drift, shear and residual screen of the budget
# windows runs in rule tables, whose climatology it feeds.


rule bulkflux:
    input:
        insitu=all_part_records("insitu"),
        sheet=SHEET,
    output:
        table=f"{RESULTS}/tables/bulkflux.csv",
        windows=f"{RESULTS}/tables/bulkflux_windows.csv",
    params:
        insitu=all_stage_status("insitu"),
        array_ids=get_array_ids,
        settings=BULKFLUX_SETTINGS,
    log:
        f"{RESULTS}/logs/bulkflux.log",
    # hourly series per deployment from the insitu records: light enough for one job
    threads: 1
    resources:
        mem_mb=1000,
        runtime=20,
    script:
        "../scripts/bulkflux.py"
