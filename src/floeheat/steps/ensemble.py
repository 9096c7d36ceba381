"""The budget stage's ensemble: draws, members, intervals and attribution of one
deployment (science in :mod:`floeheat.ensemble`), and the run-wide attribution table.

:func:`budget_ensemble` is called by the budget stage on the deterministic budget; it
adds the ``member`` dimension to ``budget.zarr`` and replaces ``t_season_lo/hi`` by the
ensemble's 5th and 95th percentiles. ``ensemble.members: 0`` switches it off (the
window t-interval then stays).
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from floeheat import constants as C
from floeheat import ensemble as E
from floeheat.openwater import per_scene_arrays
from floeheat.steps.status import atomic_path, read_status

__all__ = ["budget_ensemble", "write_window_members", "read_window_members",
           "attribution_rows", "write_attribution_rows", "attribution_table",
           "write_attribution"]

log = logging.getLogger(__name__)

#: Columns of attribution.csv before the per-factor shares.
ATTRIBUTION_KEYS = ("deployment_id", "source", "radius_m", "t_ice", "t_ice_lo", "t_ice_hi",
                    "t_ice_sd", "n_members")
#: Columns of attribution.csv: the keys, then one share per factor.
ATTRIBUTION_COLUMNS = (*ATTRIBUTION_KEYS, *(f"share_{f}" for f in E.FACTORS))


def _mids(edges) -> np.ndarray:
    e = np.asarray(edges, dtype="datetime64[ns]")
    return e[:-1] + (e[1:] - e[:-1]) // 2


def _radar_scenes(fractions_csv, radii_m) -> tuple | None:
    table = fractions_csv if isinstance(fractions_csv, pd.DataFrame) else \
        pd.read_csv(fractions_csv, parse_dates=["time"])
    if table.empty:
        return None
    radii = sorted(float(r) for r in radii_m)
    keys = ("n_water", "n_valid", "coverage")
    times, wide = per_scene_arrays(table, keys, radii)
    return times, *(wide[k] for k in keys), radii


def budget_ensemble(ds: xr.Dataset, settings: dict, *, deployment_id: str,
                    radar_fractions_csv: str | pd.DataFrame | None = None,
                    radar_max_gap_days: float = C.MAX_SCENE_GAP_DAYS,
                    coverage_threshold: float | None = None,
                    ice_settings: dict | None = None, ice: xr.Dataset | None = None,
                    sensor_spacing_m: float | None = None, threads: int = 1
                    ) -> tuple[xr.Dataset, pd.DataFrame | None]:
    """Add the ensemble to a deterministic budget Dataset.

    ``radar_fractions_csv`` is the radar stage's per-scene table (a path, or the table
    itself). Returns the Dataset (central values untouched; ``t_season_lo/hi`` from the
    ensemble; ``member`` and ``factor`` dims added) and the per-member window
    transmittances (one row per window x source x radius, one column per member), or
    ``(ds, None)`` when ``settings["members"]`` is 0.
    """
    members = int(settings.get("members", C.ENSEMBLE_MEMBERS))
    if members <= 0 or ds.sizes.get("source", 0) == 0 or ds.sizes.get("radius", 0) == 0:
        return ds, None
    ice_settings = dict(ice_settings or {})
    factors = dict(settings.get("factors", {}))
    seed = int(settings.get("seed", 0))
    spacing = float(sensor_spacing_m) if sensor_spacing_m else C.ICE_SENSOR_SPACING_DEFAULT_M
    central = {
        "albedo_ow": float(ds.attrs.get("albedo_ow", C.ALBEDO_OPEN_WATER)),
        "rho_i_kg_m3": float(ice_settings.get("rho_i_kg_m3", C.RHO_ICE_KG_M3)),
        "latent_heat_J_kg": float(ice_settings.get("latent_heat_J_kg",
                                                   C.LATENT_HEAT_FUSION_J_KG)),
        "k_ice_W_m_K": float(ice_settings.get("k_ice_W_m_K", C.K_ICE_W_M_K)),
        "bulk_salinity": float(ice_settings.get("bulk_salinity", 0.0)),
        "coverage_threshold": float(C.COVERAGE_THRESHOLD if coverage_threshold is None
                                    else coverage_threshold),
        "sensor_spacing_m": spacing,
    }
    draws = E.draw_factors(factors, central, members, seed, deployment_id)
    varied = draws.attrs["varied"].split()

    mids = _mids(ds["time"].values)
    melt = central["rho_i_kg_m3"] * central["latent_heat_J_kg"]
    t_band = None
    if ice is not None and "melt_energy" in ice:
        e = ice["melt_energy"].sel(time=slice(ds["time"].values[0], ds["time"].values[-1]))
        if np.isfinite(e.values).any():
            melt = float(np.nanmean(e.values))
    if ice is not None and "t_band" in ice and ice["t_band"].notnull().any():
        from floeheat.budget import interp_in_time

        t_band = interp_in_time(ice["t_band"], mids, hold=pd.Timedelta(days=1)).values
    form = ice_settings.get("conductivity", "constant")
    k_ratio = E.conduction_ratio(draws["k_ice_W_m_K"].values, central["k_ice_W_m_K"], form,
                                 draws["bulk_salinity"].values, central["bulk_salinity"],
                                 t_band)
    k_note = ("k0 + beta S / T at the fit band's temperature" if form == "salinity" and
              t_band is not None else
              "k0 alone (the string record gives no fit-band temperature)" if
              form == "salinity" else "constant k_i")

    f_ow_members = None
    radar_varied = {"coverage_threshold", "f_ow_sampling"} & set(varied)
    scenes = (_radar_scenes(radar_fractions_csv, ds["radius"].values)
              if radar_fractions_csv is not None and radar_varied and
              "radar" in ds["source"].values
              else None)
    if scenes is not None:
        times, n_water, n_valid, cover, radii = scenes
        noise = E.scene_noise(members, times.size, seed, deployment_id) \
            if "f_ow_sampling" in varied else None
        corr = float(factors.get("f_ow_sampling", {}).get(
            "correlation_length_m", C.F_OW_CORRELATION_LENGTH_M))
        gap = pd.Timedelta(days=radar_max_gap_days)

        def f_ow_members(sl: slice, only: str | None) -> dict:
            thr = (draws["coverage_threshold"].values[sl]
                   if only in (None, "coverage_threshold") and
                   "coverage_threshold" in varied
                   else np.full(sl.stop - sl.start, central["coverage_threshold"]))
            nz = noise[sl] if noise is not None and only in (None, "f_ow_sampling") else None
            # radii the radar source was not computed at stay NaN, as in the central f_ow
            return {"radar": E.radar_member_fractions(times, n_water, n_valid, cover, radii,
                                                      mids, thr, nz, corr, gap)}

    kwargs = dict(f_ow_members=f_ow_members, melt_energy_J_m3=melt, central=central,
                  k_ratio=k_ratio, threads=threads,
                  chunk_members=int(settings.get("chunk_members", C.ENSEMBLE_CHUNK_MEMBERS)))
    joint = E.budget_members(ds, draws, **kwargs)
    alone = {f: E.budget_members(ds, draws, only=f, **kwargs)["t_season"].values
             for f in varied}
    var_alone = {f: E.member_variance(alone[f], axis=0) for f in varied}
    shares = E.shares_of_variances(var_alone) if alone else {}

    out = ds.copy()
    out = out.assign_coords(member=("member", draws["member"].values))
    for name in draws.data_vars:
        out[f"ensemble_{name}"] = ("member", draws[name].values,
                                   {"long_name": f"ensemble draw of {name}"})
    t_m = joint["t_season"].values
    lo, hi = E.interval(t_m)
    complete = np.isfinite(ds["t_season"].values)
    lo, hi = np.where(complete, lo, np.nan), np.where(complete, hi, np.nan)
    method = (f"5th and 95th percentiles of a {members}-member Monte Carlo ensemble over "
              f"{', '.join(varied) or 'no factor'} (floeheat.ensemble)")
    out["t_season_lo"] = (("source", "radius"), lo, {
        "units": "1", "long_name": "lower bound of the 90 % interval of t_season",
        "method": method})
    out["t_season_hi"] = (("source", "radius"), hi, {
        "units": "1", "long_name": "upper bound of the 90 % interval of t_season",
        "method": method})
    out["t_season_member"] = (("member", "source", "radius"), t_m, {
        "units": "1", "long_name": "season transmittance of each ensemble member"})
    out["residual_season_member"] = (("member", "source", "radius"),
                                     joint["residual_season"].values,
                                     {"units": "MJ m-2",
                                      "long_name": "season residual of each ensemble member"})
    out["window_t_ice_member"] = (("member", "window", "source", "radius"),
                                  joint["window_t_ice"].values,
                                  {"units": "1", "long_name":
                                   "window transmittance of each ensemble member"})
    out["n_members_finite"] = (("source", "radius"),
                               np.isfinite(t_m).sum(axis=0).astype(np.int32),
                               {"units": "1", "long_name": "members with a season value"})
    if varied:
        out = out.assign_coords(factor=("factor", np.array(varied, dtype=str)))
        var = np.stack([var_alone[f] for f in varied])
        out["variance_share"] = (("factor", "source", "radius"),
                                 np.stack([shares[f] for f in varied]), {
                                     "units": "1",
                                     "long_name": "share of the spread of t_season due to "
                                                  "each factor (one-at-a-time variance over "
                                                  "the sum over factors)"})
        out["variance_alone"] = (("factor", "source", "radius"), var, {
            "units": "1", "long_name": "variance of t_season with the factor varied alone"})
    out.attrs.update(
        ensemble_members=members, ensemble_seed=seed, ensemble_factors=" ".join(varied),
        ensemble_conductivity=k_note, ensemble_melt_energy_J_m3=melt,
        ensemble_sensor_spacing_m=spacing,
        t_season_interval=method)

    w = joint["window_t_ice"]
    frame = w.transpose("window", "source", "radius", "member").values
    nw, ns, nr, _ = frame.shape
    idx = pd.MultiIndex.from_product([range(nw), range(ns), range(nr)])
    table = pd.DataFrame(frame.reshape(nw * ns * nr, members),
                         columns=[f"m{m:03d}" for m in range(members)])
    table.insert(0, "window_start", ds["window_start"].values[idx.get_level_values(0)])
    table.insert(1, "source", ds["source"].values[idx.get_level_values(1)].astype(str))
    table.insert(2, "radius_m", ds["radius"].values[idx.get_level_values(2)].astype(float))
    return out, table


def write_window_members(table: pd.DataFrame | None, path: Path, deployment_id: str) -> dict:
    """Write the per-member window table (CSV, atomically); returns the product entry."""
    if table is None:
        return {}
    out = table.copy()
    out.insert(0, "deployment_id", deployment_id)
    out["window_start"] = pd.to_datetime(out["window_start"]).dt.strftime("%Y-%m-%dT%H:%M:%S")
    with atomic_path(Path(path)) as tmp:
        out.to_csv(tmp, index=False, float_format="%.10g", lineterminator="\n")
    return {"window_members": str(path)}


def read_window_members(budget_status: list[str], windows: pd.DataFrame) -> np.ndarray | None:
    """Per-member window transmittance aligned with the rows of ``windows``.

    Returns an array (n_rows, n_members), NaN for rows without members, or None when
    no deployment carries an ensemble (or the ensembles differ in size).
    """
    parts = []
    for path in sorted(budget_status):
        record = read_status(path)
        if record.get("ok") and record.get("window_members"):
            parts.append(pd.read_csv(record["window_members"], parse_dates=["window_start"]))
    if not parts or windows.empty:
        return None
    sizes = {sum(c.startswith("m") and c[1:].isdigit() for c in p.columns) for p in parts}
    if len(sizes) != 1:
        log.warning("ensembles of different sizes; the climatology uses central values")
        return None
    members = pd.concat(parts, ignore_index=True)
    cols = [c for c in members.columns if c.startswith("m") and c[1:].isdigit()]
    keys = ["deployment_id", "source", "radius_m", "window_start"]
    left = windows[keys].copy().reset_index(drop=True)
    left["window_start"] = pd.to_datetime(left["window_start"])
    left["deployment_id"] = left["deployment_id"].astype(str)
    members["deployment_id"] = members["deployment_id"].astype(str)
    merged = left.merge(members, on=keys, how="left", validate="many_to_one")
    return merged[cols].to_numpy(float)


#: Variables of budget.zarr that the attribution rows are made of.
ATTRIBUTION_VARIABLES = ("variance_share", "t_season_member", "t_season", "t_season_lo",
                         "t_season_hi")


def attribution_rows(ds: xr.Dataset, deployment_id: str) -> pd.DataFrame:
    """One deployment's rows of attribution.csv, from its budget Dataset: per source x
    radius with a season value, the interval, the members' spread and each factor's
    share (no rows without an ensemble)."""
    cols = list(ATTRIBUTION_COLUMNS)
    if "variance_share" not in ds:
        return pd.DataFrame(columns=cols)
    share = ds["variance_share"]
    t_m = np.asarray(ds["t_season_member"].values, float)
    t, t_lo, t_hi = (np.asarray(ds[k].values, float)
                     for k in ("t_season", "t_season_lo", "t_season_hi"))
    rows = []
    for i, s in enumerate(ds["source"].values):
        for j, r in enumerate(ds["radius"].values):
            if not np.isfinite(float(t[i, j])):
                continue
            row = {"deployment_id": deployment_id, "source": str(s),
                   "radius_m": float(r), "t_ice": float(t[i, j]),
                   "t_ice_lo": float(t_lo[i, j]),
                   "t_ice_hi": float(t_hi[i, j]),
                   "t_ice_sd": float(np.sqrt(E.member_variance(t_m[:, i, j])))
                   if np.isfinite(t_m[:, i, j]).any() else float("nan"),
                   "n_members": int(np.isfinite(t_m[:, i, j]).sum())}
            for k, f in enumerate(share["factor"].values):
                row[f"share_{f}"] = float(share.values[k, i, j])
            rows.append(row)
    return pd.DataFrame(rows).reindex(columns=cols) if rows else pd.DataFrame(columns=cols)


def write_attribution_rows(ds: xr.Dataset, path: Path, deployment_id: str) -> dict:
    """Write one deployment's attribution rows (CSV at full precision, atomically), for
    the run-wide table to gather without opening the store; returns the product entry."""
    with atomic_path(Path(path)) as tmp:
        attribution_rows(ds, deployment_id).to_csv(tmp, index=False, lineterminator="\n")
    return {"attribution": str(path)}


def attribution_table(budget_status: list[str]) -> pd.DataFrame:
    """One row per deployment x source x radius: the interval and each factor's share.

    Gathers the rows each budget wrote (``attribution`` in its status record); a record
    without them (a results folder from an earlier version) has its store read.
    """
    cols = list(ATTRIBUTION_COLUMNS)
    parts = []
    for path in sorted(budget_status):
        record = read_status(path)
        if not record.get("ok"):
            continue
        if record.get("attribution"):
            part = pd.read_csv(record["attribution"], dtype={"deployment_id": str,
                                                              "source": str})
        else:
            store = xr.open_zarr(record["budget_zarr"], consolidated=True, chunks=None)
            if "variance_share" not in store:
                continue
            # one read per array, not one per value
            part = attribution_rows(store[list(ATTRIBUTION_VARIABLES)].load(),
                                    record["deployment_id"])
        if len(part):
            parts.append(part.reindex(columns=cols))
    table = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=cols)
    return table.sort_values(["deployment_id", "source", "radius_m"], kind="stable")


def write_attribution(budget_status: list[str], path: str) -> None:
    """Write tables/attribution.csv (see :func:`attribution_table`), atomically."""
    table = attribution_table(budget_status)
    with atomic_path(Path(path)) as tmp:
        table.to_csv(tmp, index=False, float_format="%.10g", lineterminator="\n")
