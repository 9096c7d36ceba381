# Where the one-dimensional budget holds: the advection, drift, shear and residual
# screen of the budget windows (run-wide), and the bulk-flux cross-check of the
# ocean-to-ice heat flux (per deployment, then one table).


rule screen:
    input:
        budgets=all_stage_status("budget"),
        bathymetry=get_bathymetry_files,
    output:
        screen=f"{RESULTS}/tables/screen.csv",
        windows=f"{RESULTS}/tables/screen_windows.csv",
        track=f"{RESULTS}/tables/screen_track.csv",
    params:
        screen=config["screen"],
    log:
        f"{RESULTS}/logs/screen.log",
    threads: 1
    resources:
        mem_mb=1500,
        runtime=20,
    script:
        "../scripts/screen.py"


rule bulkflux:
    input:
        insitu=f"{RESULTS}/deployments/{{deployment}}/status/insitu.json",
        profiles=get_profile_file,
    output:
        status=f"{RESULTS}/deployments/{{deployment}}/status/bulkflux.json",
    params:
        row=get_sheet_row,
        settings=BULKFLUX_SETTINGS,
    log:
        f"{RESULTS}/logs/bulkflux/{{deployment}}.log",
    # short, right after insitu: bundled with it on a cluster
    group: "insitu"
    threads: 1
    resources:
        mem_mb=1000,
        runtime=10,
    script:
        "../scripts/bulkflux.py"


rule bulkflux_table:
    input:
        records=all_stage_status("bulkflux"),
    output:
        table=f"{RESULTS}/tables/bulkflux.csv",
        windows=f"{RESULTS}/tables/bulkflux_windows.csv",
    log:
        f"{RESULTS}/logs/bulkflux_table.log",
    threads: 1
    resources:
        mem_mb=500,
        runtime=10,
    script:
        "../scripts/bulkflux_table.py"
