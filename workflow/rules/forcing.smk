# Gridded forcing read once per run into stores laid out for one pass along time (the
# whole grid per chunk over a run of time steps): every budget job samples all its
# deployments' tracks in one pass. Depends on the forcing files alone.


rule forcing_store:
    input:
        files=get_forcing_files,
    output:
        shortwave=directory(f"{RESULTS}/forcing/shortwave.zarr"),
        concentration=directory(f"{RESULTS}/forcing/concentration.zarr"),
    params:
        archive=ARCHIVE,
        listing=f"{RESULTS}/index/forcing.json",
    log:
        f"{RESULTS}/logs/forcing_store.log",
    # every budget job waits for it, and it needs only the index: start it first, on one
    # core beside the instrument jobs (dask workers = threads; for a large grid raise
    # them with --set-threads forcing_store=N)
    priority: 10
    threads: 1
    resources:
        # read and written a run of time steps at a time: memory grows slowly with the
        # files, time with their size
        mem_mb=sized_mb(2000, per_input_mb=0.5, cap_mb=32000),
        runtime=sized_min(15, per_input_gb_min=20),
    script:
        "../scripts/forcing_store.py"
