"""Target 6: floeheat against a straightforward serial script of the same budget.

The plain script below is the budget as a researcher would write it by hand: one
process, one deployment after the other; every scene whose time falls in the
deployment's record is loaded whole and the circles are counted with full-scene
distance arrays; the gridded shortwave and concentration files are loaded whole for
every deployment. The science itself (track cleaning, ice base, TEOS-10 storage, the
budget terms) is floeheat's own functions, called directly: the comparison is about
how the work is organised, and the season tables must agree within 1e-6.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr
import yaml

from benchmarks._common import (
    REPO,
    Result,
    archive_spec,
    archive_summary,
    fixed_cost_notes,
    fresh,
    job_benchmarks,
    per_rule_note,
    run_workflow,
    say,
    synth_archive,
)

TOL = 1e-6
NUMERIC = ("sw_in_MJ", "q_ow_MJ", "q_st_MJ", "q_b_MJ", "q_c_MJ", "q_w_MJ", "residual_MJ",
           "t_ice", "f_ow_mean")


def _whole_scene_fractions(archive: Path, track: pd.DataFrame, scenes: pd.DataFrame,
                           radii_m, threshold: float, codes: dict) -> pd.DataFrame:
    """Per scene: load it whole, then count water and valid pixels in every circle."""
    from floeheat.io.scenes import open_scene
    from floeheat.openwater import projected_radius
    from floeheat.steps.scenes import FRACTION_COLUMNS, position_at

    radii = np.sort(np.asarray(radii_m, float))
    rows = []
    t0, t1 = track["time"].iloc[0], track["time"].iloc[-1]
    for sc_row in scenes.itertuples(index=False):
        t = pd.Timestamp(sc_row.time).tz_localize(None)
        if not t0 <= t <= t1:
            continue
        with open_scene(archive / sc_row.path, "mask", mask_codes=codes) as sc:
            pixels = sc.read_window(slice(None), slice(None))  # the whole scene
            tr, (h, w), crs = sc.transform, sc.shape, sc.crs
        lat, lon, x, y = position_at(track, [np.datetime64(t, "ns")], crs)
        x, y = float(x[0]), float(y[0])
        rproj = projected_radius(radii, crs, lon[0], lat[0])
        xc = tr.c + tr.a * (np.arange(w) + 0.5)
        yc = tr.f + tr.e * (np.arange(h) + 0.5)
        d2 = (xc[None, :] - x) ** 2 + (yc[:, None] - y) ** 2
        water = pixels == 0
        valid = water | (pixels == 1)
        stats = []
        for r in rproj:
            inside = d2 <= r * r
            # all grid points of the circle, beyond the scene's edge too
            i = np.arange(np.floor((tr.f - (y + r)) / -tr.e) - 1,
                          np.ceil((tr.f - (y - r)) / -tr.e) + 1)
            j = np.arange(np.floor((x - r - tr.c) / tr.a) - 1,
                          np.ceil((x + r - tr.c) / tr.a) + 1)
            gx = tr.c + tr.a * (j + 0.5)
            gy = tr.f + tr.e * (i + 0.5)
            n_circle = int(((gx[None, :] - x) ** 2 + (gy[:, None] - y) ** 2 <= r * r).sum())
            n_w, n_v = int((water & inside).sum()), int((valid & inside).sum())
            stats.append((n_w, n_v, n_circle))
        if not any(s[2] for s in stats) or not any((d2 <= rproj.max() ** 2).ravel()):
            continue
        for r, (n_w, n_v, n_c) in zip(radii, stats, strict=True):
            cov = n_v / n_c if n_c else np.nan
            ok = n_v > 0 and cov >= threshold
            rows.append((sc_row.scene_id, sc_row.time, float(r),
                         n_w / n_v if ok else np.nan, cov, n_w, n_v, n_c, ok, "mask"))
    return pd.DataFrame(rows, columns=list(FRACTION_COLUMNS))


def plain_budget(archive: Path, out: Path, cfg: dict) -> pd.DataFrame:
    """The whole budget, serially, one deployment at a time; returns the season rows."""
    from floeheat.budget import assemble_budget, seasonal_table
    from floeheat.io.gridded import open_concentration, open_shortwave, read_shortwave_csv
    from floeheat.steps.budget import (
        microwave_fraction_series,
        radar_fraction_series,
        shortwave_at_track,
    )
    from floeheat.steps.insitu import run_insitu
    from floeheat.steps.scenes import read_track
    from floeheat.steps.status import read_status

    deps = pd.read_csv(archive / "deployments.csv", dtype=str, keep_default_na=False)
    scenes = pd.read_csv(archive / "scenes.csv", dtype=str, keep_default_na=False)
    scenes = scenes[scenes["content"] == "mask"]
    sw_files = sorted((archive / "shortwave").glob("*.nc"))
    ci_files = sorted((archive / "concentration").glob("*.nc"))
    radar, mw, bud = cfg["radar"], cfg["microwave"], cfg["budget"]
    out_rows = []
    for row in deps.to_dict(orient="records"):
        dep = row["deployment_id"]
        ddir = out / dep
        row.update(start=row["start"].rstrip("Z"), end=row["end"].rstrip("Z"))  # UTC
        rec = run_insitu(str(archive), row, str(ddir / "status" / "insitu.json"),
                         track=cfg["track"], ice=cfg["ice"], storage=cfg["storage"],
                         season=cfg["season"])
        if not rec.get("ok"):
            continue
        insitu = read_status(ddir / "status" / "insitu.json")
        track = read_track(insitu["track"])
        frac = _whole_scene_fractions(archive, track, scenes, radar["radii_m"],
                                      radar["coverage_threshold"], radar["mask_codes"])
        frac_csv = ddir / "radar_fractions.csv"
        frac.to_csv(frac_csv, index=False, float_format="%.10g")
        start, end = pd.Timestamp(insitu["window_start"]), pd.Timestamp(insitu["window_end"])
        if row.get("shortwave_file"):
            sw = read_shortwave_csv(archive / row["shortwave_file"])
        else:
            sw = shortwave_at_track(open_shortwave(sw_files).load(), track, start, end)
        b = sw["time_bnds"].values
        inside = (b[:, 0] >= np.datetime64(start)) & (b[:, 1] <= np.datetime64(end))
        target = b[inside, 0] + (b[inside, 1] - b[inside, 0]) / 2
        series = {}
        f = radar_fraction_series(str(frac_csv), target, radar["radii_m"],
                                  radar["max_gap_days"]) if len(frac) else None
        if f is not None:
            series["radar"] = f
        f = microwave_fraction_series(open_concentration(ci_files).load(), track, start, end,
                                      target, mw, radar["max_gap_days"])
        if f is not None:
            series["microwave"] = f
        radii = sorted({float(r) for da in series.values() for r in da["radius"].values})
        f_ow = xr.concat(
            [da.drop_vars([c for c in da.coords if c not in ("time", "radius")])
             .assign_coords(time=target).reindex(radius=radii).expand_dims(source=[s])
             for s, da in series.items()], dim="source").transpose("time", "source", "radius")
        storage = xr.open_dataset(insitu["storage"]).load() if insitu.get("storage") else None
        ice = xr.open_dataset(insitu["ice"]).load() if insitu.get("ice") else None
        ds = assemble_budget(sw.isel(time=np.flatnonzero(inside)), start, end, f_ow=f_ow,
                             storage=storage, ice=ice, albedo_ow=bud["albedo_ow"],
                             window_days=bud["window_days"],
                             weight_by_ice_fraction=bud["weight_by_ice_fraction"],
                             deployment_id=dep)
        table = seasonal_table(ds, deployment_id=dep, array_id=row.get("array_id") or "")
        wanted = {("radar", float(r)) for r in radar["radii_m"]} | \
            {("microwave", float(r)) for r in mw["radii_m"]}
        out_rows.append(table[[(s, float(r)) in wanted for s, r in
                               zip(table["source"], table["radius_m"], strict=True)]])
    return pd.concat(out_rows, ignore_index=True)


def compare(plain: pd.DataFrame, seasonal_csv: Path) -> tuple[float, int, int]:
    """Largest absolute difference over the season values both give, rows compared,
    and values present in one table only."""
    ours = pd.read_csv(seasonal_csv)
    ours = ours[ours[list(NUMERIC)].notna().any(axis=1)]
    key = ["deployment_id", "source", "radius_m"]
    plain = plain.assign(radius_m=plain["radius_m"].astype(float))
    m = ours.merge(plain, on=key, suffixes=("", "_plain"), how="outer", indicator=True)
    both = m[m["_merge"] == "both"]
    worst, mismatched = 0.0, int((m["_merge"] != "both").sum())
    for col in NUMERIC:
        a, b = both[col].to_numpy(float), both[f"{col}_plain"].to_numpy(float)
        mismatched += int((np.isnan(a) != np.isnan(b)).sum())
        ok = np.isfinite(a) & np.isfinite(b)
        if ok.any():
            worst = max(worst, float(np.max(np.abs(a[ok] - b[ok]))))
    return worst, len(both), mismatched


def run(scratch, scale: str) -> Result:
    fresh(scratch)
    if scale == "full":
        spec = archive_spec(16, scene_px=4096, record_days=30, name="t6-full")
    else:
        spec = archive_spec(8, scene_px=2048, record_days=16, name="t6-quick")
    archive = synth_archive(scratch.parent, spec)
    cfg = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    say(f"target 6: floeheat workflow on {archive_summary(archive)}")
    started = time.time()
    t_floeheat = run_workflow(archive, scratch / "results")
    seasonal = scratch / "results" / "tables" / "seasonal.csv"
    t_seasonal = seasonal.stat().st_mtime - started  # written atomically, when complete
    say("target 6: the plain serial script")
    t0, c0 = time.perf_counter(), time.process_time()
    plain = plain_budget(archive, fresh(scratch / "plain"), cfg)
    t_plain, c_plain = time.perf_counter() - t0, time.process_time() - c0
    jobs = job_benchmarks(scratch / "results")
    worst, n_rows, mismatched = compare(plain, seasonal)
    equal = worst <= TOL and mismatched == 0
    notes = [f"floeheat (2 cores, whole workflow incl. figures) {t_floeheat:.0f} s; plain "
             f"serial script (season table only, no figures) {t_plain:.0f} s; floeheat "
             f"{t_plain / t_floeheat:.1f}x faster (target >= 10x)",
             f"CPU time: floeheat's {len(jobs)} jobs {jobs['cpu_time'].sum():.0f} s (mean job "
             f"load {jobs['mean_load'].mean():.0f} % of a core), plain script {c_plain:.0f} s",
             f"floeheat had written the season table after {t_seasonal:.0f} s "
             f"({t_seasonal / t_plain:.3f} of the plain time); the figures and the other "
             "tables took the rest",
             per_rule_note(jobs),
             *fixed_cost_notes(jobs),
             f"season tables: {n_rows} rows compared, largest difference {worst:.2e} "
             f"(target <= {TOL:g}), values present in only one: {mismatched} -> "
             f"{'equal' if equal else 'NOT EQUAL'}"]
    sizes = f"{archive_summary(archive)} of {spec.scene_px} x {spec.scene_px} px, 30 d" \
        if scale == "full" else f"{archive_summary(archive)} of {spec.scene_px} px, 16 d"
    return Result(6, "Against a straightforward script (floeheat time / plain time)",
                  t_floeheat / t_plain, 0.1, sizes, notes, also=equal)
