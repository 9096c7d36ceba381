# Gridded forcing read once per run into stores laid out for point series (small
# spatial chunks, long time chunks). Depends on the forcing files alone.


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
    threads: 2
    resources:
        mem_mb=2000,
        runtime=60,
    script:
        "../scripts/forcing_store.py"
