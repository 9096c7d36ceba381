"""Accuracy and throughput of the backscatter classification on synthetic archives.

Writes small synthetic archives (one per seed; by default ``ACCURACY_SIZE``, the "tiny"
archive with the demo's 80 m pixels and floe pattern, ``--size tiny`` for the 200 m
pixels over a 50 m pattern) into a temporary folder, classifies
every backscatter acquisition with each method compared, and prints per acquisition:
the water-class IoU and F1 against the true mask scene of the same acquisition, and the
15 km open-water fraction around each buoy whose circle the scene covers (error against
the same circle on the true mask); then the means per method. Last it times the default
method on a large scene (the synthesizer's backscatter model applied to a tiled true
mask, chunked with dask, one thread) and prints pixels per second per core.

Usage::

    .venv/bin/python benchmarks/classify_accuracy.py [--seeds 1 2 3] [--size tiny] [--px 4096]
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from floeheat.classify import ClassifySettings, classify_scene, water_iou_f1
from floeheat.io.scenes import open_scene
from floeheat.openwater import circle_fractions, circle_window, projected_radius
from floeheat.synth.sizes import SIZES

#: The accuracy targets' archive: "tiny" (two arrays, 26 days, two backscatter
#: acquisitions) with the demo's resolution, 80 m pixels over an 80 m floe pattern, in
#: 400 px scenes (32 km). The "tiny" size itself samples a 50 m pattern at 200 m pixel
#: centres, so most leads are narrower than a pixel and appear as scattered specks.
ACCURACY_SIZE = replace(SIZES["tiny"], name="tiny-80m", scene_px=400, scene_res_m=80.0,
                        tile_res_m=80.0)

RADIUS_M = 15_000.0
COVERAGE_MIN = 0.5

METHODS = {
    "multiotsu (lee 3)": ClassifySettings(method="multiotsu", speckle_filter="lee"),
    "multiotsu (none)": ClassifySettings(method="multiotsu"),
    "contextual (lee 3)": ClassifySettings(speckle_filter="lee"),
    "contextual (median 3)": ClassifySettings(speckle_filter="median"),
    "contextual (none, noise subtracted)": ClassifySettings(subtract_noise=True),
    "contextual (none, map decision)": ClassifySettings(decision="map"),
    "contextual (none, no context)": ClassifySettings(context_iterations=0),
    "contextual (none, no speck removal)": ClassifySettings(speck_max_px=0),
    "contextual (none, scaled incidence)": ClassifySettings(incidence_model="scaled"),
    "contextual (none, scaled, no speck removal)": ClassifySettings(incidence_model="scaled",
                                                                    speck_max_px=0),
    "contextual (none), default": ClassifySettings(),
}


def _buoys_at(truth_dir: Path, meta: dict, t: np.datetime64) -> list[dict]:
    out = []
    for dep, d in meta["deployments"].items():
        with xr.open_dataset(truth_dir / d["truth_file"]) as ds:
            nt = ds["node_time"].values.astype("datetime64[ns]").astype(np.int64)
            ti = np.int64(t.astype("datetime64[ns]").astype(np.int64))
            if not nt[0] <= ti <= nt[-1]:
                continue
            pos = {k: float(np.interp(ti, nt, ds[k].values))
                   for k in ("x", "y", "longitude", "latitude")}
        out.append({"deployment_id": dep, **pos})
    return out


def load_acquisitions(root) -> list[dict]:
    """Every backscatter acquisition of a synthetic archive with its true mask and buoys.

    NetCDF backscatter is read with xarray by each variable's ``role`` attribute: the
    scene reader labels the NetCDF noise-floor variables by their polarisation, so that
    they shadow the sigma0 bands of the same name.
    """
    root = Path(root)
    truth_dir = root.with_name(root.name + ".truth")
    meta = json.loads((truth_dir / "truth.json").read_text())
    tab = pd.read_csv(root / "scenes.csv", keep_default_na=False).set_index("scene_id")
    acqs: dict[str, dict] = {}
    for sid, mid in meta["backscatter_mask_scene"].items():
        e = acqs.setdefault(mid, {"scene_id": mid, "bands": {}, "noise": {}, "inc": None})
        path = root / tab.loc[sid, "path"]
        if path.suffix == ".nc":
            with xr.open_dataset(path) as ds:
                for v in ds.data_vars.values():
                    role = v.attrs.get("role")
                    if role == "sigma0":
                        e["bands"][v.attrs["polarisation"]] = v.values.astype("f4")
                    elif role == "noise_equivalent_sigma0":
                        e["noise"][v.attrs["polarisation"]] = v.values.astype("f4")
                    elif role == "incidence_angle":
                        e["inc"] = v.values.astype("f4")
        else:
            with open_scene(path, "backscatter", bands=tab.loc[sid, "band"]) as sc:
                full = (slice(None), slice(None))
                for pol in sc.polarisations:
                    e["bands"][pol] = sc.read_window(*full, band=pol, scale="dB")
                for pol, b in sc.noise.items():
                    e["noise"][pol] = sc.read_window(*full, band=b, scale="dB")
                if sc.incidence_angle:
                    e["inc"] = sc.read_window(*full, band=sc.incidence_angle)
        with open_scene(root / tab.loc[mid, "path"], "mask") as ms:
            e["mask"] = ms.read_window(slice(None), slice(None))
            e["transform"], e["crs"], e["shape"] = ms.transform, ms.crs, ms.shape
        e["time"] = np.datetime64(pd.Timestamp(tab.loc[mid, "time"]).tz_localize(None), "ns")
    for e in acqs.values():
        e["buoys"] = _buoys_at(truth_dir, meta, e["time"])
    return list(acqs.values())


def circle_fow(mask, acq: dict, buoy: dict) -> tuple[float, float]:
    """(f_ow, coverage) of the 15 km circle around a buoy in a full-scene mask."""
    r = float(projected_radius([RADIUS_M], acq["crs"], buoy["longitude"], buoy["latitude"])[0])
    win = circle_window(acq["transform"], acq["shape"], buoy["x"], buoy["y"], r)
    if win is None:
        return float("nan"), 0.0
    s = circle_fractions(np.asarray(mask)[win], win[0].start, win[1].start, acq["transform"],
                         acq["shape"], buoy["x"], buoy["y"], [r],
                         coverage_threshold=COVERAGE_MIN)
    return float(s.f_ow[0]), float(s.coverage[0])


def evaluate(acqs: list[dict], settings: ClassifySettings) -> dict:
    """IoU, F1 per acquisition and f_ow errors per (acquisition, buoy)."""
    rows, errs = [], []
    for a in acqs:
        pred = classify_scene(a["bands"], a["inc"], a["noise"], settings=settings)
        iou, f1 = water_iou_f1(pred, a["mask"])
        rows.append((a["scene_id"], iou, f1))
        for b in a["buoys"]:
            f_true, cov = circle_fow(a["mask"], a, b)
            if cov < COVERAGE_MIN or not np.isfinite(f_true):
                continue
            f_pred, _ = circle_fow(pred, a, b)
            errs.append(f_pred - f_true)
    e = np.array(errs)
    return {"rows": rows, "errors": e,
            "iou": float(np.mean([r[1] for r in rows])),
            "f1": float(np.mean([r[2] for r in rows])),
            "mae": float(np.mean(np.abs(e))) if e.size else float("nan"),
            "bias": float(np.mean(e)) if e.size else float("nan")}


def large_scene(px: int, seed: int = 0) -> tuple[dict, np.ndarray, np.ndarray]:
    """A px x px two-band scene from the synthesizer's backscatter model on a tiled mask."""
    import floeheat.synth.icefield as icefield
    from floeheat.synth import write_archive

    with tempfile.TemporaryDirectory() as tmp:
        write_archive(Path(tmp) / "a", seed=1, size=ACCURACY_SIZE)
        acq = load_acquisitions(Path(tmp) / "a")[0]
    mask = acq["mask"]
    reps = int(np.ceil(px / mask.shape[0]))
    big = np.tile(np.where(mask == 255, 1, mask), (reps, reps))[:px, :px].astype(np.uint8)

    class _Field:
        tile_u = np.random.default_rng(seed).random((64, 64)).astype(np.float32)
        tile_res_m = 200.0

    class _Plan:
        npx = px
        windy = True

        @staticmethod
        def centres():
            j = np.arange(px) * 200.0 + 100.0
            return j, -j

    bands = icefield.backscatter_from_mask(np.random.default_rng(seed), _Field, _Plan, big)
    return bands, big, np.array(0)


def throughput(px: int, chunk: int = 1024) -> float:
    """Pixels per second per core of the default method (one dask thread)."""
    import dask
    import dask.array as da

    bands, truth, _ = large_scene(px)
    arrs = {p: da.from_array(bands[p], chunks=chunk) for p in ("HH", "HV")}
    inc = da.from_array(bands["incidence_angle"], chunks=chunk)
    t0 = time.perf_counter()
    with dask.config.set(scheduler="synchronous"):
        out = classify_scene(arrs, inc, settings=replace(ClassifySettings(), chunk_px=chunk))
        res = out.compute()
    dt = time.perf_counter() - t0
    iou, _ = water_iou_f1(res, truth)
    print(f"large scene {px} x {px} px, chunks {chunk}: {dt:.2f} s, "
          f"{px * px / dt:,.0f} px/s per core (1 thread), water IoU {iou:.3f}")
    return px * px / dt


def main(argv=None):
    from floeheat.synth import write_archive

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, nargs="+", default=[1, 2, 3, 4, 5])
    ap.add_argument("--size", default=None, help="synthesizer size (default ACCURACY_SIZE)")
    ap.add_argument("--px", type=int, default=4096, help="side of the timed scene, pixels")
    ap.add_argument("--methods", nargs="*", default=None, help="subset of method labels")
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        acqs = []
        for s in args.seeds:
            write_archive(Path(tmp) / f"s{s}", seed=s, size=args.size or ACCURACY_SIZE)
            for a in load_acquisitions(Path(tmp) / f"s{s}"):
                a["seed"] = s
                acqs.append(a)
    labels = args.methods or list(METHODS)
    summary = []
    for label in labels:
        res = evaluate(acqs, METHODS[label])
        print(f"\n== {label}")
        for a, (sid, iou, f1) in zip(acqs, res["rows"]):
            print(f"  seed {a['seed']:>3} {sid:<14} water IoU {iou:.3f}  F1 {f1:.3f}")
        print(f"  mean IoU {res['iou']:.3f}  F1 {res['f1']:.3f}; 15 km f_ow over "
              f"{res['errors'].size} buoy circles: mean |error| {res['mae']:.4f}, "
              f"bias {res['bias']:+.4f}")
        summary.append((label, res))
    print("\nmethod                                 IoU    F1    |df_ow|  bias")
    for label, r in summary:
        print(f"{label:<38} {r['iou']:.3f}  {r['f1']:.3f}  {r['mae']:.4f}  {r['bias']:+.4f}")
    if args.px:
        throughput(args.px)


if __name__ == "__main__":
    main()
