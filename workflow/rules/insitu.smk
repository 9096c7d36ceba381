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
    threads: 1
    resources:
        mem_mb=1000,
        runtime=20,
    script:
        "../scripts/insitu.py"
