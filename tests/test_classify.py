"""Tests of floeheat.classify: the pure pieces, chunking, no data, and the accuracy
targets on synthetic archives (seeds 11, 12, 13 of ``ACCURACY_SIZE``, the tiny archive at
the demo's 80 m resolution; the settings were tuned on seeds 1-5, so these seeds are held
out), with a guard on the "tiny" size's sub-pixel leads."""

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


def _acquisitions(tmp_path_factory, bench, size):
    from floeheat.synth import write_archive

    out = []
    for s in SEEDS:
        root = tmp_path_factory.mktemp(f"classify{s}") / "archive"
        write_archive(root, seed=s, size=size)
        for a in bench.load_acquisitions(root):
            a["seed"], a["root"] = s, root
            out.append(a)
    return out


@pytest.fixture(scope="session")
def acquisitions(tmp_path_factory, bench):
    """Every backscatter acquisition of three synthetic archives at 80 m (written once)."""
    return _acquisitions(tmp_path_factory, bench, bench.ACCURACY_SIZE)


@pytest.fixture(scope="session")
def tiny_acquisitions(tmp_path_factory, bench):
    """The same seeds at the "tiny" size: 200 m pixels over a 50 m floe pattern."""
    return _acquisitions(tmp_path_factory, bench, "tiny")


@pytest.fixture(scope="session")
def results(acquisitions, bench):
    return {"contextual": bench.evaluate(acquisitions, ClassifySettings()),
            "multiotsu": bench.evaluate(acquisitions, ClassifySettings(method="multiotsu"))}


# ------------------------------------------------------------------ accuracy targets


def test_water_iou_and_f1_targets_per_acquisition(results):
    rows = results["contextual"]["rows"]
    assert len(rows) == 2 * len(SEEDS)           # calm and wind-roughened scenes among them
    for sid, iou, f1 in rows:
        assert iou >= 0.8 and f1 >= 0.9, (sid, iou, f1)


def test_sub_pixel_leads_regression_guard(tiny_acquisitions, bench):
    # The "tiny" size's leads are mostly narrower than its 200 m pixels: no speck removal
    # there (the setting for such products), and a guard on the measured level, not the
    # targets (a classifier trained on the truth itself stays below them, module docstring)
    res = bench.evaluate(tiny_acquisitions, ClassifySettings(speck_max_px=0))
    rows = res["rows"]
    assert min(r[1] for r in rows) >= 0.72
    assert np.mean([r[1] for r in rows]) >= 0.77
    assert np.mean(np.abs(res["errors"])) <= 0.005 and abs(np.mean(res["errors"])) < 0.003


def test_open_water_fraction_15km_targets(results):
    e = results["contextual"]["errors"]
    assert e.size >= 6                      # buoy circles covered by the scenes
    assert np.mean(np.abs(e)) <= 0.005
    assert abs(np.mean(e)) < 0.003


def test_speck_removal_and_scaled_incidence_run_chunked(acquisitions):
    a = acquisitions[2]
    st = ClassifySettings(incidence_model="scaled", speck_max_px=2)
    ref = classify_scene(a["bands"], a["inc"], a["noise"], settings=st)
    lazy = classify_scene({p: da.from_array(v, chunks=96) for p, v in a["bands"].items()},
                          da.from_array(a["inc"], chunks=96),
                          {p: da.from_array(v, chunks=96) for p, v in a["noise"].items()},
                          settings=st)
    np.testing.assert_array_equal(lazy.compute(), ref)
    from skimage import measure
    lab = measure.label(ref == 0, connectivity=2)
    assert np.bincount(lab.ravel())[1:].min() > 2          # no water speck of 1-2 pixels


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
    assert st.depth_px() == 1 + 2 * 4 + 2 + 4 + 1
    with pytest.raises(ValueError):
        ClassifySettings(incidence_model="nope")


def test_water_iou_ignores_no_data():
    p = np.array([0, 0, 255, 1])
    t = np.array([0, 1, 0, 255])
    assert water_iou_f1(p, t) == (0.5, pytest.approx(2 / 3))


# ------------------------------------------------------------------ the classify stage


def test_classify_stage_stores_read_like_masks(tiny_acquisitions, tmp_path):
    import pandas as pd

    from floeheat.steps.classify import (
        AGREEMENT_COLUMNS,
        acquisitions,
        batches,
        open_classified,
        run_agreement,
        run_classify,
    )

    root = tiny_acquisitions[0]["root"]
    scenes = pd.read_csv(root / "scenes.csv", dtype=str, keep_default_na=False)
    groups = batches(scenes, 1)
    assert len(groups) == 2                                  # one acquisition per batch
    acq = acquisitions(scenes)
    stores = {}
    settings = {"speck_max_px": 0, "chunk_px": 64}
    for name, keys in groups.items():
        rows = acq[acq["acquisition"].isin(keys)].drop(columns="acquisition")
        out = tmp_path / "classified" / name
        assert run_classify(str(root), rows.to_dict(orient="records"), str(out),
                            settings) == [f"{keys[0]}.zarr"]
        stores[keys[0]] = str(out / f"{keys[0]}.zarr")
    by_mask = {a["scene_id"]: a for a in tiny_acquisitions if a["root"] == root}
    table = run_agreement(str(root), str(root / "scenes.csv"), stores,
                          str(tmp_path / "agreement.csv"), {"water": 0, "ice": 1, "nodata": 255})
    assert list(table.columns) == list(AGREEMENT_COLUMNS) and len(table) == 2
    for row in table.itertuples():
        a = by_mask[row.mask_scene_id]
        with open_classified(stores[row.acquisition]) as cs:
            got = cs.read_window(slice(None), slice(None))
            assert cs.shape == a["shape"] and cs.transform == a["transform"]
        want = classify_scene(a["bands"], a["inc"], a["noise"],
                              settings=ClassifySettings(**settings))
        np.testing.assert_array_equal(got, want)          # chunked read = whole-scene result
        assert row.water_iou == pytest.approx(water_iou_f1(want, a["mask"])[0])
        assert 0.9 < row.agreement <= 1.0
