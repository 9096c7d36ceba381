"""A synthetic world for checking the ensemble's calibration (synthetic data only).

One case is one deployment whose truth is known: true constants are drawn from the same
distributions the ensemble uses (around the configured central values), and the inputs
the budget sees carry errors drawn from those distributions too: the shortwave forcing
is biased, each radar scene's f_ow carries its sampling error, the ice-bottom pick is
off at each end, the storage bound sits somewhere within the sensitivity offset, and
the central rho_i, L and k_i differ from the true ones. The true season transmittance
is the budget of the true inputs.

What this world leaves out on purpose (it would be an error the ensemble does not
model): f_ow between scenes is linear in the truth too, and every scene's coverage is
above the largest threshold drawn, so the coverage-threshold factor has nothing to
change here.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from floeheat import constants as C

__all__ = ["calibration_case", "analyse_case", "CENTRAL"]

#: Central values the analysis of a case uses (the package defaults).
CENTRAL = {
    "albedo_ow": C.ALBEDO_OPEN_WATER,
    "rho_i_kg_m3": C.RHO_ICE_KG_M3,
    "latent_heat_J_kg": C.LATENT_HEAT_FUSION_J_KG,
    "k_ice_W_m_K": C.K_ICE_W_M_K,
    "bulk_salinity": 4.0,
    "coverage_threshold": C.COVERAGE_THRESHOLD,
    "conductivity": "constant",
}

_PIXEL_M = 40.0


def _truth_draw(spec: dict, name: str, rng: np.random.Generator) -> float:
    s = spec.get(name, {})
    dist, spread = s.get("dist", "none"), float(s.get("spread", 0.0))
    if dist == "normal":
        return float(rng.normal(0.0, spread))
    if dist == "uniform":
        return float(rng.uniform(-spread, spread))
    return 0.0


def calibration_case(seed: int, spec: dict, *, days: int = 40, radii_m=(4000.0, 15000.0),
                     sensor_spacing_m: float = 0.02, case: int = 0) -> dict:
    """One synthetic deployment with known truth, and its observed inputs.

    Parameters
    ----------
    seed, case : int
        Seed of the world (the truth's draws); ``case`` numbers deployments of one
        seed (the run-wide constants are shared by all cases of a seed).
    spec : dict
        Config ``ensemble.factors`` (the distributions of the errors).
    days : int
        Length of the window.
    radii_m : sequence of float
    sensor_spacing_m : float

    Returns
    -------
    dict
        ``start``, ``end``; observed ``shortwave`` (Dataset), ``scenes`` (DataFrame in
        the radar fractions layout), ``storage`` and ``ice`` (Datasets in the in-situ
        layout); ``truth`` (the true season transmittance, array over radius) and
        ``truth_inputs`` (the true inputs, for the true budget).

    Examples
    --------
    >>> c = calibration_case(1, {}, days=10)
    >>> sorted(c)[:4], c["truth"].shape
    (['end', 'ice', 'name', 'scenes'], (2,))
    """
    from floeheat.budget import assemble_budget
    from floeheat.ensemble import sampling_sd

    g = np.random.default_rng(np.random.SeedSequence([int(seed), 7]))          # run-wide
    rng = np.random.default_rng(np.random.SeedSequence([int(seed), 11, int(case)]))
    start = pd.Timestamp("2024-06-01")
    end = start + pd.Timedelta(days=days)
    edges = pd.date_range(start, end, freq="h").values.astype("datetime64[ns]")
    n = edges.size - 1
    hours = np.arange(n) + 0.5
    # --- true forcing and constants -----------------------------------------------------
    sw_true = 240.0 * (1.0 + 0.7 * np.cos(2 * np.pi * (hours % 24 - 12) / 24)) \
        * rng.uniform(0.6, 1.0, n)
    albedo = CENTRAL["albedo_ow"] + _truth_draw(spec, "albedo_ow", g)
    bias = 1.0 + _truth_draw(spec, "shortwave_bias", g)
    rho = CENTRAL["rho_i_kg_m3"] + _truth_draw(spec, "rho_i", g)
    lat = CENTRAL["latent_heat_J_kg"] * (1.0 + _truth_draw(spec, "latent_heat", g))
    k = CENTRAL["k_ice_W_m_K"] + _truth_draw(spec, "k_ice", g)
    _truth_draw({"k_ice": {"dist": spec.get("k_ice", {}).get("dist", "none"),
                           "spread": spec.get("k_ice", {}).get("salinity_spread", 0.0)}},
                "k_ice", g)
    bound = float(np.clip(_truth_draw(spec, "storage_bound", g), -1.0, 1.0))
    pick = spec.get("ice_bottom_pick", {})
    eps0 = _truth_draw({"p": pick}, "p", rng) * sensor_spacing_m
    eps1 = _truth_draw({"p": pick}, "p", rng) * sensor_spacing_m
    # --- open water: scenes every 1-2.5 days, the truth linear between them ------------
    t_s = [start - pd.Timedelta(hours=12)]
    while t_s[-1] < end:
        t_s.append(t_s[-1] + pd.Timedelta(hours=float(rng.uniform(24, 60))))
    t_s = np.array(t_s, dtype="datetime64[ns]")
    base = np.clip(0.08 + np.cumsum(rng.normal(0.0, 0.015, t_s.size)), 0.01, 0.4)
    f_true = np.stack([np.clip(base * s, 0.0, 1.0) for s in (1.2, 0.9)[:len(radii_m)]], 1) \
        if len(radii_m) == 2 else np.repeat(base[:, None], len(radii_m), 1)
    coverage = np.clip(rng.uniform(0.65, 1.2, (t_s.size, 1)), 0, 1) * np.ones((1, len(radii_m)))
    radii = np.asarray(radii_m, float)
    corr = float(spec.get("f_ow_sampling", {}).get("correlation_length_m",
                                                   C.F_OW_CORRELATION_LENGTH_M))
    noisy = spec.get("f_ow_sampling", {}).get("dist", "none") != "none"
    z = rng.standard_normal(t_s.size)[:, None] if noisy else np.zeros((t_s.size, 1))
    f_obs = np.clip(f_true + z * sampling_sd(f_true, coverage, radii[None, :], corr), 0, 1)
    n_circle = np.round(np.pi * radii**2 / _PIXEL_M**2)[None, :] * np.ones((t_s.size, 1))
    n_valid = np.round(n_circle * coverage)
    n_water = np.round(f_obs * n_valid)
    rows = []
    for i, t in enumerate(t_s):
        for j, r in enumerate(radii):
            rows.append({"scene_id": f"s{i:03d}", "time": pd.Timestamp(t), "radius_m": r,
                         "f_ow": n_water[i, j] / n_valid[i, j], "coverage": coverage[i, j],
                         "n_water": int(n_water[i, j]), "n_valid": int(n_valid[i, j]),
                         "n_circle": int(n_circle[i, j]), "accepted": True})
    scenes = pd.DataFrame(rows)
    mids = edges[:-1] + (edges[1:] - edges[:-1]) // 2
    xs = t_s.astype(np.int64).astype(float)
    fm_true = np.stack([np.interp(mids.astype(np.int64).astype(float), xs, f_true[:, j])
                        for j in range(radii.size)], 1)
    # --- storage: the central bound's series, the truth somewhere within the offset ----
    prof_t = pd.date_range(start - pd.Timedelta(hours=6), end + pd.Timedelta(hours=6),
                           freq="6h").values.astype("datetime64[ns]")
    s = (prof_t - prof_t[0]) / (prof_t[-1] - prof_t[0])
    amp = rng.uniform(20e6, 60e6)
    h_c = amp * s**1.3 + 2e5 * rng.standard_normal(s.size)
    h_lo = h_c * (1.0 - rng.uniform(0.02, 0.12))
    h_hi = h_c * (1.0 + rng.uniform(0.02, 0.12))
    h_true = h_c + max(bound, 0.0) * (h_hi - h_c) + max(-bound, 0.0) * (h_lo - h_c)

    def storage(h, lo=None, hi=None):
        ds = xr.Dataset({"heat_content": ("profile", h)},
                        coords={"time": ("profile", prof_t)})
        if lo is not None:
            ds["heat_content_z2_lo"] = ("profile", lo)
            ds["heat_content_z2_hi"] = ("profile", hi)
        return ds

    # --- ice: true bottom and gradient; observed pick off at each end ------------------
    ice_t = pd.date_range(start - pd.Timedelta(hours=2), end + pd.Timedelta(hours=2),
                          freq="h").values.astype("datetime64[ns]")
    u = np.clip((ice_t - edges[0]) / (edges[-1] - edges[0]), 0.0, 1.0)
    melt = rng.uniform(0.2, 0.6)
    zb_true = 1.8 - melt * u**1.2
    grad = -rng.uniform(1.0, 3.0) * np.ones(ice_t.size)      # K m-1, z down (summer)
    zb_obs = zb_true + eps0 + (eps1 - eps0) * u
    e_c = CENTRAL["rho_i_kg_m3"] * CENTRAL["latent_heat_J_kg"]

    def ice(zb, kk, e):
        return xr.Dataset({"z_b": ("time", zb), "f_c": ("time", -kk * grad),
                           "melt_energy": ("time", np.full(ice_t.size, e))},
                          coords={"time": ice_t})

    sw_obs = sw_true / bias
    bnds = np.stack([edges[:-1], edges[1:]], 1)

    def shortwave(v):
        return xr.Dataset({"sw_down": ("time", v), "time_bnds": (("time", "nv"), bnds)},
                          coords={"time": edges[1:]})

    f_da = xr.DataArray(fm_true[:, None, :], dims=("time", "source", "radius"),
                        coords={"time": mids, "source": ["radar"], "radius": radii})
    truth_ds = assemble_budget(shortwave(sw_true), start, end, f_ow=f_da,
                               storage=storage(h_true), ice=ice(zb_true, k, rho * lat),
                               albedo_ow=albedo, f_ow_hold=pd.Timedelta(hours=1))
    return {
        "name": f"case-{int(seed)}-{int(case)}",
        "start": start, "end": end, "shortwave": shortwave(sw_obs), "scenes": scenes,
        "storage": storage(h_c, h_lo, h_hi), "ice": ice(zb_obs, CENTRAL["k_ice_W_m_K"], e_c),
        "truth": truth_ds["t_season"].values[0], "truth_budget": truth_ds,
        "sensor_spacing_m": sensor_spacing_m,
        "truth_inputs": {"albedo_ow": albedo, "shortwave_bias": bias, "rho_i": rho,
                         "latent_heat": lat, "k_ice": k, "storage_bound": bound,
                         "pick": (eps0, eps1), "f_true_scenes": f_true},
    }


def analyse_case(case: dict, settings: dict, *, max_gap_days: float = C.MAX_SCENE_GAP_DAYS
                 ) -> xr.Dataset:
    """The budget and ensemble of a case's observed inputs, as the budget stage does.

    Parameters
    ----------
    case : dict
        From :func:`calibration_case`.
    settings : dict
        Config ``ensemble`` (members, seed, factors).

    Returns
    -------
    xarray.Dataset
        The budget with ``t_season``, ``t_season_lo``, ``t_season_hi`` on
        ``(source, radius)`` (source ``radar``).

    Examples
    --------
    >>> c = calibration_case(2, {"albedo_ow": {"dist": "normal", "spread": 0.007}}, days=8)
    >>> ds = analyse_case(c, {"members": 20, "seed": 3, "factors": {
    ...     "albedo_ow": {"dist": "normal", "spread": 0.007}}})
    >>> bool((ds.t_season_lo <= ds.t_season_hi).all())
    True
    """
    from floeheat.budget import assemble_budget
    from floeheat.openwater import radar_time_series
    from floeheat.steps.ensemble import budget_ensemble

    sc = case["scenes"]
    radii = np.sort(sc["radius_m"].unique())
    wide = sc.pivot_table(index=["time", "scene_id"], columns="radius_m", values="f_ow",
                          aggfunc="first").reindex(columns=radii)
    edges = case["shortwave"]["time_bnds"].values
    mids = edges[:, 0] + (edges[:, 1] - edges[:, 0]) // 2
    f = radar_time_series(wide.index.get_level_values("time").values, wide.to_numpy(float),
                          mids, radii, max_gap=pd.Timedelta(days=max_gap_days))
    f = f.drop_vars("flag").expand_dims(source=["radar"]).transpose("time", "source", "radius")
    ds = assemble_budget(case["shortwave"], case["start"], case["end"], f_ow=f,
                         storage=case["storage"], ice=case["ice"],
                         albedo_ow=CENTRAL["albedo_ow"])
    out, _ = budget_ensemble(ds, settings, deployment_id=case["name"],
                             radar_fractions_csv=sc, radar_max_gap_days=max_gap_days,
                             coverage_threshold=CENTRAL["coverage_threshold"],
                             ice_settings=CENTRAL, ice=case["ice"],
                             sensor_spacing_m=case["sensor_spacing_m"])
    return out
