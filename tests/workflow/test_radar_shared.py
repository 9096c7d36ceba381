"""The radar stage's shared scene handles (floeheat.steps.scenes.SharedScenes) give the
same fractions and floe context as a scene opened afresh for every deployment."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import yaml

from floeheat.steps.scenes import SharedScenes, run_radar, scene_uses

REPO = Path(__file__).resolve().parents[2]


def test_shared_handles_read_what_fresh_ones_read(tiny_run, tiny_archive, tmp_path):
    radar = yaml.safe_load((REPO / "config" / "config.yaml").read_text())["radar"]
    settings = {"radii_m": radar["radii_m"], "coverage_threshold": radar["coverage_threshold"],
                "mask_codes": radar["mask_codes"], "floe_radius_m": radar["floe_radius_m"],
                "classified": {}}
    deps = sorted(p.name for p in (tiny_run / "deployments").iterdir())
    matches = [str(tiny_run / "deployments" / d / "matches.csv") for d in deps]
    uses = scene_uses(tiny_archive, matches, {}, radar["mask_codes"])
    shared = SharedScenes(uses)

    def run(dep: str, out: Path, shared_scenes):
        status = out / "deployments" / dep / "status" / "radar.json"
        run_radar(str(tiny_archive), str(tiny_run / "deployments" / dep / "status" /
                                         "insitu.json"),
                  str(tiny_run / "deployments" / dep / "matches.csv"), str(status),
                  shared=shared_scenes, **settings)
        return out / "deployments" / dep

    for dep in deps:
        a, b = run(dep, tmp_path / "shared", shared), run(dep, tmp_path / "fresh", None)
        for name in ("work/radar_fractions.csv", "floe_context.csv"):
            assert (a / name).read_bytes() == (b / name).read_bytes(), f"{dep}: {name}"
        assert len(pd.read_csv(a / "work" / "radar_fractions.csv"))
    shared.close()
    # the deployments of the tiny archive share scenes: fewer files opened than read
    assert 0 < shared.n_opened < sum(uses.values())
