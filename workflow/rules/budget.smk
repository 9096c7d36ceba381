# The budget of each deployment (one job per part): shortwave and microwave open water
# sampled at the tracks of all the part's deployments in one pass over each forcing
# store, then per deployment radar fractions in time, storage, ice base and the budget
# terms -> budget.zarr.


rule budget:
    input:
        insitu=part_record("insitu"),
        radar=part_record("radar"),
        sheet=SHEET,
        shortwave=f"{RESULTS}/forcing/shortwave.zarr",
        concentration=f"{RESULTS}/forcing/concentration.zarr",
        shortwave_csv=get_shortwave_csv,
    output:
        record=part_record("budget"),
    params:
        rows=get_part_rows,
        insitu=part_status("insitu"),
        radar=part_status("radar"),
        status=part_status("budget"),
        shortwave_csv=part_shortwave_csv,
        radar_max_gap_days=config["radar"]["max_gap_days"],
        microwave=config["microwave"],
        budget=config["budget"],
        radar_radii_m=config["radar"]["radii_m"],
        ensemble=config["ensemble"],
        ice=config["ice"],
        coverage_threshold=config["radar"]["coverage_threshold"],
    log:
        f"{RESULTS}/logs/budget/{{part}}.log",
    threads: 1
    resources:
        mem_mb=sized_mb(1500, per_input_mb=2.0, per_member=True),
        runtime=sized_min(15, per_input_gb_min=30),
    script:
        "../scripts/budget.py"
