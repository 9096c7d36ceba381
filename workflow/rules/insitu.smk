# In-situ instruments: drift track, ice base and conduction from the thermistor string,
# heat storage from the profiles (one job per part of the sheet's deployments; each
# deployment's files are read together, since its instruments share them).


rule insitu:
    input:
        unpack(get_insitu_files),
        sheet=SHEET,
    output:
        record=part_record("insitu"),
    params:
        archive=ARCHIVE,
        rows=get_part_rows,
        status=part_status("insitu"),
        track=config["track"],
        ice=config["ice"],
        storage=config["storage"],
        season=config["season"],
    log:
        f"{RESULTS}/logs/insitu/{{part}}.log",
    # on a cluster, several parts' insitu jobs share one submission
    # (profiles/slurm: group-components)
    group: "insitu"
    threads: 1
    resources:
        # one deployment's profiles and string are held in memory (as float64) at a
        # time: a few times their size
        mem_mb=sized_mb(800, per_input_mb=6.0, per_member=True),
        runtime=sized_min(10, per_input_gb_min=60),
    script:
        "../scripts/insitu.py"
