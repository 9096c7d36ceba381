# Archive: the demo synthesizer (only for the bundled demo) and the index checkpoint.


if ARCHIVE == DEMO_ARCHIVE:

    rule synth_demo:
        output:
            sheet=f"{DEMO_ARCHIVE}/deployments.csv",
        params:
            seed=config["demo"]["seed"],
            size=config["demo"]["size"],
            hemisphere=config["demo"]["hemisphere"],
            variant=config["demo"]["variant"],
            outdir=DEMO_ARCHIVE,
        log:
            f"{RESULTS}/logs/synth_demo.log",
        script:
            "../scripts/synth_demo.py"


checkpoint index:
    input:
        sheet=f"{ARCHIVE}/deployments.csv",
    output:
        deployments=f"{RESULTS}/index/deployments.csv",
        scenes=f"{RESULTS}/index/scenes.csv",
        forcing=f"{RESULTS}/index/forcing.json",
        rejected=f"{RESULTS}/index/rejected.csv",
    params:
        archive=ARCHIVE,
    log:
        f"{RESULTS}/logs/index.log",
    script:
        "../scripts/index.py"
