# In-situ instruments of one deployment: drift track, ice base and conduction from the
# thermistor string, heat storage from the profiles (one job: they share the files).


rule insitu:
    input:
        unpack(get_insitu_files),
    output:
        status=f"{RESULTS}/deployments/{{deployment}}/status/insitu.json",
    params:
        archive=ARCHIVE,
        row=get_sheet_row,
        track=config["track"],
        ice=config["ice"],
        storage=config["storage"],
        season=config["season"],
    log:
        f"{RESULTS}/logs/insitu/{{deployment}}.log",
    # on a cluster, several deployments' insitu jobs share one submission
    # (profiles/slurm: group-components)
    group: "insitu"
    threads: 1
    resources:
        # profiles and string are held in memory (as float64): a few times their size
        mem_mb=sized_mb(800, per_input_mb=6.0),
        runtime=sized_min(10, per_input_gb_min=60),
    script:
        "../scripts/insitu.py"
