# The per-deployment budget: forcing and microwave open water sampled at the track,
# radar fractions in time, storage, ice base and the budget terms -> budget.zarr.


rule budget:
    input:
        insitu=f"{RESULTS}/deployments/{{deployment}}/status/insitu.json",
        radar=f"{RESULTS}/deployments/{{deployment}}/status/radar.json",
        shortwave=f"{RESULTS}/forcing/shortwave.zarr",
        concentration=f"{RESULTS}/forcing/concentration.zarr",
        shortwave_csv=get_shortwave_csv,
    output:
        status=f"{RESULTS}/deployments/{{deployment}}/status/budget.json",
    params:
        row=get_sheet_row,
        radar_max_gap_days=config["radar"]["max_gap_days"],
        microwave=config["microwave"],
        budget=config["budget"],
        radar_radii_m=config["radar"]["radii_m"],
        ensemble=config["ensemble"],
        ice=config["ice"],
        coverage_threshold=config["radar"]["coverage_threshold"],
    log:
        f"{RESULTS}/logs/budget/{{deployment}}.log",
    threads: 1
    resources:
        mem_mb=sized_mb(1500, per_input_mb=2.0),
        runtime=sized_min(15, per_input_gb_min=30),
    script:
        "../scripts/budget.py"
