"""The workflow on an archive whose scenes are all calibrated backscatter (the same
acquisitions as the tiny archive, classified by rule classify) against the run on masks:
season transmittances within 0.01."""

from __future__ import annotations

import json

import pandas as pd
import pytest
import xarray as xr

from floeheat.synth import write_archive

pytestmark = pytest.mark.workflow


@pytest.fixture(scope="module")
def backscatter_run(tmp_path_factory, run_workflow):
    archive = tmp_path_factory.mktemp("tiny-bs") / "archive"
    write_archive(archive, seed=1, size="tiny", scene_content="backscatter")
    results = tmp_path_factory.mktemp("tiny-bs-results") / "results"
    # the tiny size's leads are narrower than its 200 m pixels: no speck removal
    # (floeheat.classify, "Choice by measured accuracy")
    settings = results.parent / "classify.yaml"
    settings.write_text("classify:\n  speck_max_px: 0\n")
    run_workflow("--configfile", str(settings), "--config", f"archive={archive}",
                 f"results={results}")
    return archive, results


def test_season_transmittance_from_backscatter_matches_masks(backscatter_run, tiny_run):
    archive, results = backscatter_run
    scenes = pd.read_csv(archive / "scenes.csv")
    assert set(scenes["content"]) == {"backscatter"}
    key = ["deployment_id", "source", "radius_m"]
    bs = pd.read_csv(results / "tables" / "seasonal.csv").set_index(key)
    ms = pd.read_csv(tiny_run / "tables" / "seasonal.csv").set_index(key)
    radar = [k for k in ms.index if k[1] == "radar"]
    assert radar
    diffs = (bs.loc[radar, "t_ice"] - ms.loc[radar, "t_ice"]).abs()
    assert diffs.notna().all() and (diffs <= 0.01).all(), diffs.to_string()


def test_outputs_say_the_fractions_came_from_classified_backscatter(backscatter_run, tiny_run):
    _, results = backscatter_run
    for run, want in ((results, "classified backscatter"), (tiny_run, "mask")):
        for status in sorted((run / "deployments").glob("*/status/radar.json")):
            dep = status.parent.parent
            assert json.loads(status.read_text())["radar_input"] == want
            assert set(pd.read_csv(dep / "work" / "radar_fractions.csv")["content"]) == {want}
            floes = pd.read_csv(dep / "floe_context.csv")
            assert len(floes) and set(floes["content"]) == {want}
            assert xr.open_zarr(dep / "budget.zarr").attrs["radar_input"] == want
            assert (run / "figures" / "deployments" / dep.name / "floes.png").is_file()
    assert len(list((results / "classified").glob("batch-*/*.zarr"))) == len(
        pd.read_csv(backscatter_run[0] / "scenes.csv")["scene_id"].str.replace(
            r"-h[hv]$", "", regex=True).unique())
    agreement = pd.read_csv(tiny_run / "tables" / "classification_agreement.csv")
    assert len(agreement) == 2 and (agreement["agreement"] > 0.9).all()


def test_changing_a_classifier_setting_reruns_classification_and_radar(backscatter_run,
                                                                        tmp_path, run_workflow):
    # the classified stores reach the radar jobs through checkpoint match_scenes; a new
    # classification must rerun it (Snakemake follows what a checkpoint feeds a job only
    # when the checkpoint runs), then radar, and never the in-situ stage
    archive, results = backscatter_run
    settings = tmp_path / "classify.yaml"
    settings.write_text("classify:\n  speck_max_px: 0\n  method: multiotsu\n")
    out = run_workflow("-n", "--configfile", "config/config.yaml", str(settings), "--config",
                       f"archive={archive}", f"results={results}").stdout
    jobs = {}
    for line in out.split("Job stats:")[-1].splitlines():
        parts = line.split()
        if len(parts) == 2 and parts[1].isdigit() and parts[0] != "total":
            jobs[parts[0]] = int(parts[1])
    n = len(pd.read_csv(archive / "deployments.csv"))
    assert jobs.get("classify", 0) >= 1, (jobs, out[-3000:])
    assert jobs.get("match_scenes") == n and jobs.get("radar") == n, jobs
    assert "insitu" not in jobs, jobs

