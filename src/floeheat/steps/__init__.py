"""I/O adapters of the workflow stages: read inputs, call the science, write outputs.

One module per stage. Each public ``run_*`` function takes plain paths and settings
(never the Snakemake object), writes its products atomically and returns the stage's
status record (see :mod:`floeheat.steps.status`).
"""
