# Classification of backscatter acquisitions into ice/water masks: one job per batch of
# `classify.scenes_per_job` acquisitions (in index order), one Zarr store per
# acquisition; each batch depends only on its scene files and the classifier settings.
# The radar stage reads the stores like masks; where the archive also holds a mask of an
# acquisition, the two are compared in tables/classification_agreement.csv.


rule classify:
    wildcard_constraints:
        batch=r"batch-\d{4}",
    input:
        files=get_classify_files,
    output:
        stores=directory(f"{RESULTS}/classified/{{batch}}"),
    params:
        archive=ARCHIVE,
        rows=get_classify_rows,
        settings=CLASSIFY_SETTINGS,
    log:
        f"{RESULTS}/logs/classify/{{batch}}.log",
    threads: 1
    resources:
        # bands are read and classified chunk by chunk (bounded memory); time grows with
        # the pixels, about 1 s per million (benchmarks/classify_accuracy.py)
        mem_mb=2000,
        runtime=sized_min(10, per_input_gb_min=20),
    script:
        "../scripts/classify.py"


rule classification_agreement:
    input:
        scenes=f"{RESULTS}/index/scenes.csv",
        classified=get_twin_batches,
        masks=get_twin_masks,
    output:
        table=f"{RESULTS}/tables/classification_agreement.csv",
    params:
        archive=ARCHIVE,
        stores=get_twin_stores,
        mask_codes=config["radar"]["mask_codes"],
    log:
        f"{RESULTS}/logs/classification_agreement.log",
    threads: 1
    resources:
        mem_mb=2000,
        runtime=30,
    script:
        "../scripts/classification_agreement.py"
