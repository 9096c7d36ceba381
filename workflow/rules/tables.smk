# Basin-wide tables and the run record. Rule tables first screens the budget windows
# for where a 1-D budget may not hold (advection, drift, shear, residual outliers), then
# builds the seasonal and climatology tables without the excluded windows.


rule tables:
    input:
        budgets=all_part_records("budget"),
        sheet=SHEET,
        rejected=f"{RESULTS}/index/rejected.csv",
        bathymetry=get_bathymetry_files,
    output:
        screen=f"{RESULTS}/tables/screen.csv",
        screen_windows=f"{RESULTS}/tables/screen_windows.csv",
        screen_track=f"{RESULTS}/tables/screen_track.csv",
        seasonal=f"{RESULTS}/tables/seasonal.csv",
        climatology_unsplit=f"{RESULTS}/tables/climatology_unsplit.csv",
        climatology=f"{RESULTS}/tables/climatology.csv",
        failures=f"{RESULTS}/tables/failures.csv",
        windows=f"{RESULTS}/tables/windows.csv",
        attribution=f"{RESULTS}/tables/attribution.csv",
    params:
        budgets=all_stage_status("budget"),
        climatology=config["climatology"],
        screen=config["screen"],
    log:
        f"{RESULTS}/logs/tables.log",
    threads: 1
    resources:
        mem_mb=1500,
        runtime=20,
    script:
        "../scripts/tables.py"


rule manifest:
    input:
        seasonal=f"{RESULTS}/tables/seasonal.csv",
        climatology=f"{RESULTS}/tables/climatology.csv",
        failures=f"{RESULTS}/tables/failures.csv",
        figures=f"{RESULTS}/figures",
        budgets=all_part_records("budget"),
        # Recorded by checksum: a new lock reruns the manifest.
        lock=[LOCK] if os.path.exists(LOCK) else [],
    output:
        manifest=f"{RESULTS}/manifest.json",
    params:
        archive=ARCHIVE,
        results=RESULTS,
        config=config,
    log:
        f"{RESULTS}/logs/manifest.log",
    threads: 1
    resources:
        mem_mb=500,
        runtime=10,
    script:
        "../scripts/manifest.py"
