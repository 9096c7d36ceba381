"""Tests of floeheat.ensemble (and its stage logic): draws against their published spreads,
members against closed forms, the zero-spread identity, attribution, the bootstrap with
members, and a quick calibration check (3 seeds) on the synthetic calibration world."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy import stats

from floeheat import constants as C
from floeheat import ensemble as E
from floeheat.budget import assemble_budget
from floeheat.climatology import bootstrap_median_by_array
from floeheat.icebase import ice_conductivity, ice_enthalpy_bl99
from floeheat.openwater import radar_time_series
from floeheat.steps.ensemble import (
    attribution_table,
    budget_ensemble,
    read_window_members,
    write_attribution_rows,
    write_window_members,
)
from floeheat.synth.calibration import analyse_case, calibration_case

T0 = pd.Timestamp("2020-06-01")
DAYS = 20
EDGES = pd.date_range(T0, periods=DAYS * 24 + 1, freq="h").values.astype("datetime64[ns]")
FACTORS = {
    "albedo_ow": {"dist": "normal", "spread": C.ALBEDO_OPEN_WATER_SD},
    "rho_i": {"dist": "uniform", "spread": C.RHO_ICE_HALF_WIDTH_KG_M3},
    "latent_heat": {"dist": "uniform", "spread": C.LATENT_HEAT_REL_HALF_WIDTH},
    "k_ice": {"dist": "normal", "spread": C.K_ICE_SD_W_M_K,
              "salinity_spread": C.BULK_SALINITY_SD},
    "storage_bound": {"dist": "uniform", "spread": C.STORAGE_BOUND_HALF_WIDTH},
    "ice_bottom_pick": {"dist": "normal", "spread": C.ICE_BOTTOM_PICK_SD_SPACINGS},
    "shortwave_bias": {"dist": "normal", "spread": C.SHORTWAVE_BIAS_SD},
    "coverage_threshold": {"dist": "uniform", "spread": C.COVERAGE_THRESHOLD_HALF_WIDTH},
    "f_ow_sampling": {"dist": "normal", "correlation_length_m": C.F_OW_CORRELATION_LENGTH_M},
}
CENTRAL = {"albedo_ow": C.ALBEDO_OPEN_WATER, "rho_i_kg_m3": C.RHO_ICE_KG_M3,
           "latent_heat_J_kg": C.LATENT_HEAT_FUSION_J_KG, "k_ice_W_m_K": C.K_ICE_W_M_K,
           "bulk_salinity": 4.0, "coverage_threshold": C.COVERAGE_THRESHOLD,
           "sensor_spacing_m": 0.02}


def _budget(f=0.1, sens=True, sources=("radar",), radii=(4000.0,), **kwargs):
    """A hand-built deterministic budget: constant sunlight and open water (``f`` times
    1, 1/2, 1/3 ... by source), storage growing linearly with its z2 sensitivity, the
    bottom melting 0.2 m, F_c 3 W m-2."""
    n = EDGES.size - 1
    sw = xr.Dataset({"sw_down": ("time", np.full(n, 250.0)),
                     "time_bnds": (("time", "nv"), np.stack([EDGES[:-1], EDGES[1:]], 1))},
                    coords={"time": EDGES[1:]})
    per_source = f / np.arange(1.0, len(sources) + 1)
    fo = xr.DataArray(np.broadcast_to(per_source[None, :, None], (2, len(sources), len(radii))),
                      dims=("time", "source", "radius"),
                      coords={"time": EDGES[[0, -1]], "source": list(sources),
                              "radius": list(radii)})
    t = EDGES[::6]
    s = np.linspace(0.0, 1.0, t.size)
    storage = xr.Dataset({"heat_content": ("profile", 20e6 * s)}, coords={"time": ("profile", t)})
    if sens:
        storage["heat_content_z2_lo"] = ("profile", 18e6 * s)
        storage["heat_content_z2_hi"] = ("profile", 23e6 * s)
    ice = xr.Dataset({"z_b": ("time", 1.8 - 0.2 * s), "f_c": ("time", np.full(t.size, 3.0))},
                     coords={"time": t})
    return assemble_budget(sw, EDGES[0], EDGES[-1], f_ow=fo, storage=storage, ice=ice, **kwargs)


def _only(name, members=64, spread=None):
    spec = {name: dict(FACTORS[name])}
    if spread is not None:
        spec[name]["spread"] = spread
    return E.draw_factors(spec, CENTRAL, members, 5, "B1")


# --- draws ------------------------------------------------------------------------------

def test_albedo_draws_have_the_published_spread():
    d = E.draw_factors({"albedo_ow": FACTORS["albedo_ow"]}, CENTRAL, 4000, 1, "B1")
    # Pegau & Paulson 2001: leads under cloudy skies 0.066 +- 0.007
    assert d.albedo_ow.mean() == pytest.approx(0.066, abs=0.0005)
    assert d.albedo_ow.std() == pytest.approx(0.007, rel=0.05)


def test_density_draws_span_the_published_range():
    d = E.draw_factors({"rho_i": FACTORS["rho_i"]}, CENTRAL, 4000, 1, "B1")
    v = d.rho_i_kg_m3.values
    # Timco & Frederking 1996: 900-940 kg m-3 below the waterline (centred on 917 here)
    assert v.min() >= 897.0 and v.max() <= 937.0
    # variance of a uniform distribution of width 40 (scipy.stats.uniform)
    assert v.var() == pytest.approx(stats.uniform(897.0, 40.0).var(), rel=0.08)


def test_latent_heat_half_width_is_half_the_brine_correction():
    # Bitz & Lipscomb 1999 melt energy of 4 g/kg ice at -1.8 degC, per kg, against L0
    drop = 1.0 - (-ice_enthalpy_bl99(-1.8, 4.0) / C.RHO_ICE_KG_M3) / C.LATENT_HEAT_FUSION_J_KG
    assert drop == pytest.approx(0.107, abs=0.002)  # computed from the BL99 enthalpy
    assert C.LATENT_HEAT_REL_HALF_WIDTH == pytest.approx(drop / 2.0, abs=0.01)


def test_draws_are_seeded_shared_and_independent():
    a = E.draw_factors(FACTORS, CENTRAL, 50, 7, "B1")
    b = E.draw_factors(FACTORS, CENTRAL, 50, 7, "B1")
    c = E.draw_factors(FACTORS, CENTRAL, 50, 7, "B2")
    for name in a.data_vars:
        np.testing.assert_array_equal(a[name], b[name])
    # run-wide constants are shared by all deployments; the pick error is not
    np.testing.assert_array_equal(a.albedo_ow, c.albedo_ow)
    assert not np.array_equal(a.pick_start_m, c.pick_start_m)
    # dropping one factor leaves the others' draws as they were
    fewer = {k: v for k, v in FACTORS.items() if k != "rho_i"}
    d = E.draw_factors(fewer, CENTRAL, 50, 7, "B1")
    np.testing.assert_array_equal(a.shortwave_bias, d.shortwave_bias)
    assert (d.rho_i_kg_m3 == C.RHO_ICE_KG_M3).all()
    assert "rho_i" not in d.attrs["varied"].split()


def test_unknown_distribution_is_refused():
    with pytest.raises(ValueError, match="distribution"):
        E.draw_factors({"albedo_ow": {"dist": "gamma", "spread": 1}}, CENTRAL, 3, 1, "B1")


# --- sampling error of f_ow ---------------------------------------------------------------

def test_sampling_sd_is_the_binomial_standard_error():
    radius, length, cover, f = 4000.0, 1000.0, 1.0, 0.1
    n = np.pi * radius**2 * cover / length**2
    p = (f * n + 0.5) / (n + 1.0)
    # standard deviation of a fraction over n independent patches: scipy.stats.binom
    ref = stats.binom(int(round(n)), p).std() / round(n)
    assert E.sampling_sd(f, cover, radius, length) == pytest.approx(ref, rel=0.01)


def test_radar_members_refilter_and_perturb_the_scenes():
    st = pd.date_range("2020-06-01", periods=6, freq="2D").values.astype("datetime64[ns]")
    tt = pd.date_range("2020-06-01", "2020-06-11", freq="6h").values.astype("datetime64[ns]")
    n_valid = np.full((6, 1), 10000.0)
    n_water = np.full((6, 1), 1000.0)
    cover = np.array([[1.0], [0.45], [1.0], [1.0], [1.0], [1.0]])
    out = E.radar_member_fractions(st, n_water, n_valid, cover, [4000.0], tt, [0.5, 0.4])
    central = radar_time_series(st, np.where(cover >= 0.5, 0.1, np.nan), tt, [4000.0])
    np.testing.assert_allclose(out[0], central.values)
    assert np.isfinite(out[1]).all()
    noise = np.random.default_rng(0).standard_normal((3000, 6))
    pert = E.radar_member_fractions(st, n_water, n_valid, np.ones((6, 1)), [4000.0],
                                    st[:1], np.full(3000, 0.5), noise)
    sd = E.sampling_sd(0.1, 1.0, 4000.0, C.F_OW_CORRELATION_LENGTH_M)
    assert np.std(pert[:, 0, 0]) == pytest.approx(sd, rel=0.1)


def test_conduction_ratio_follows_the_salinity_form():
    # check-values: k(S=5, T=-5) = 1.9000 and k(S=0) = 2.03 with beta = 0.13
    r = E.conduction_ratio([2.03], 2.03, "salinity", [0.0], 5.0, [-5.0])
    assert float(r[0, 0]) == pytest.approx(2.03 / 1.9, rel=1e-9)
    assert float(ice_conductivity(-5.0, 5.0)) == pytest.approx(1.9, abs=1e-9)


# --- members against closed forms ---------------------------------------------------------

def test_members_without_spread_reproduce_the_central_budget():
    ds = _budget()
    draws = E.draw_factors({}, CENTRAL, 8, 1, "B1")
    m = E.budget_members(ds, draws, chunk_members=3)
    np.testing.assert_allclose(m.t_season.values, np.broadcast_to(ds.t_season.values,
                                                                  (8, 1, 1)), rtol=1e-10)
    np.testing.assert_allclose(m.window_t_ice.values[0], ds.window_t_ice.values, rtol=1e-10)


def test_shortwave_bias_scales_numerator_and_denominator():
    ds = _budget()
    d = _only("shortwave_bias")
    m = E.budget_members(ds, d)
    b = d.shortwave_bias.values[:, None, None]
    s = {k: ds[f"{k}_season"].values for k in ("q_ow", "q_st", "q_w", "sw_in")}
    expect = -(b * s["q_ow"] - s["q_st"] - s["q_w"]) / (b * s["sw_in"])  # T_season, science.md
    np.testing.assert_allclose(m.t_season.values, expect, rtol=1e-9)


def test_pick_errors_shift_the_basal_melt():
    ds = _budget(f=0.1)
    d = _only("ice_bottom_pick")
    e = C.RHO_ICE_KG_M3 * C.LATENT_HEAT_FUSION_J_KG
    m = E.budget_members(ds, d, melt_energy_J_m3=e)
    shift = (d.pick_start_m - d.pick_end_m).values[:, None, None] * e * 1e-6   # MJ m-2
    expect = ds.t_season.values + 0.9 * shift / ds.sw_in_season.values  # Q_w weighted by 1-f
    np.testing.assert_allclose(m.t_season.values, expect, rtol=1e-9)


def test_storage_bound_interpolates_the_sensitivity_series():
    ds = _budget()
    d = _only("storage_bound")
    d["storage_bound"][:2] = [1.0, -1.0]
    m = E.budget_members(ds, d)
    for k, name in ((0, "q_st_z2_hi"), (1, "q_st_z2_lo")):
        expect = -(ds.q_ow_season - float(ds[name][-1]) - ds.q_w_season) / ds.sw_in_season
        np.testing.assert_allclose(m.t_season.values[k], expect.values, rtol=1e-9)


def test_conductivity_and_melt_energy_scale_their_terms():
    ds = _budget()
    d = E.draw_factors({"k_ice": FACTORS["k_ice"], "rho_i": FACTORS["rho_i"]}, CENTRAL, 16,
                       2, "B1")
    kr = E.conduction_ratio(d.k_ice_W_m_K.values, C.K_ICE_W_M_K)
    er = d.rho_i_kg_m3.values / C.RHO_ICE_KG_M3
    m = E.budget_members(ds, d, k_ratio=kr)
    qw = 0.9 * (er[:, None, None] * ds.q_b_season.values - kr[:, None, None] * ds.q_c_season.values)
    expect = -(ds.q_ow_season.values - ds.q_st_season.values - qw) / ds.sw_in_season.values
    np.testing.assert_allclose(m.t_season.values, expect, rtol=1e-9)


def _hourly_members(ds, d, k_ratio, f_radar):
    """Reference: each member's budget summed hour by hour, one member at a time (the
    factor definitions of the floeheat.ensemble docstring written out plainly)."""
    te = ds.time.values.astype("datetime64[ns]").astype(np.int64) * 1e-9
    dt = np.diff(te)
    first = np.searchsorted(ds.time.values[:-1], ds.window_start.values)
    weighted = str(ds.attrs["weight_by_ice_fraction"]) == "True"
    season, windows = [], []
    for m in range(d.sizes["member"]):
        fm = ds.f_ow.values[1:].copy()
        fm[:, 0, :] = f_radar[m]
        sw = d.shortwave_bias.values[m] * ds.sw_down.values[1:]
        q_ow = (1 - d.albedo_ow.values[m]) * fm * (sw * dt * 1e-6)[:, None, None]
        den = (1 - fm) * (sw * dt * 1e-6)[:, None, None]
        e = (d.rho_i_kg_m3.values[m] / C.RHO_ICE_KG_M3
             * d.latent_heat_J_kg.values[m] / C.LATENT_HEAT_FUSION_J_KG)
        shift = d.pick_start_m.values[m] - d.pick_end_m.values[m]
        q_b = e * (np.diff(ds.q_b.values) + C.RHO_ICE_KG_M3 * C.LATENT_HEAT_FUSION_J_KG
                   * 1e-6 * shift * dt / (te[-1] - te[0]))
        q_c = k_ratio[m] * np.diff(ds.q_c.values)
        q_w = ((1 - fm) if weighted else 1.0) * (q_b - q_c)[:, None, None]
        bound = d.storage_bound.values[m]
        other = ds.q_st_z2_hi.values if bound > 0 else ds.q_st_z2_lo.values
        q_st = ds.q_st.values + abs(bound) * (other - ds.q_st.values)
        r = q_ow - np.diff(q_st)[:, None, None] - q_w
        season.append(-(q_ow.sum(0) - q_st[-1] - q_w.sum(0)) / den.sum(0))
        windows.append(-np.add.reduceat(r, first) / np.add.reduceat(den, first))
    return np.array(season), np.array(windows)


@pytest.mark.parametrize("conductivity", ["salinity", "constant"])
@pytest.mark.parametrize("weighted", [True, False])
def test_members_match_an_hour_by_hour_computation(weighted, conductivity):
    # every factor at once, a conductivity ratio varying in time (salinity form), the
    # radar f_ow perturbed per member beside a second source, a gap in the storage
    ds = _budget(sources=("radar", "microwave"), radii=(4000.0, 8000.0),
                 weight_by_ice_fraction=weighted)
    n = ds.sizes["time"] - 1
    ds["q_st"] = ds.q_st.where(np.arange(n + 1) != 100)
    d = E.draw_factors(FACTORS, CENTRAL, 12, 4, "B1")
    rng = np.random.default_rng(1)
    f_radar = rng.uniform(0.0, 0.3, (12, n, 2))
    f_radar[3, 40:60, 1] = np.nan
    t_band = np.linspace(-8.0, -2.0, n)
    kr = E.conduction_ratio(d.k_ice_W_m_K.values, C.K_ICE_W_M_K, conductivity,
                            d.bulk_salinity.values, 4.0, t_band)
    m = E.budget_members(ds, d, k_ratio=kr, chunk_members=5,
                         f_ow_members=lambda sl, only: {"radar": f_radar[sl]})
    season, windows = _hourly_members(ds, d, kr, f_radar)
    np.testing.assert_allclose(m.t_season.values, season, rtol=1e-10)
    np.testing.assert_allclose(m.window_t_ice.values, windows, rtol=1e-10, atol=1e-14)
    assert np.isnan(m.window_t_ice.values).any() and np.isfinite(m.window_t_ice.values).any()


def test_chunking_does_not_change_the_members():
    ds = _budget()
    d = E.draw_factors(FACTORS, CENTRAL, 30, 3, "B1")
    a = E.budget_members(ds, d, chunk_members=7, threads=2)
    b = E.budget_members(ds, d, chunk_members=30)
    np.testing.assert_array_equal(a.t_season.values, b.t_season.values)


def test_interval_and_shares():
    lo, hi = E.interval(np.arange(1001.0))
    # numpy's linear percentile of 0..1000 (numpy.percentile reference)
    assert (lo, hi) == tuple(np.percentile(np.arange(1001.0), [5, 95]))
    s = E.variance_shares({"a": np.array([1.0, 3.0]), "b": np.array([2.0, 2.0])})
    assert float(s["a"]) == 1.0 and float(s["b"]) == 0.0


def test_bootstrap_with_identical_members_is_the_array_bootstrap():
    v = np.array([0.02, 0.03, 0.05, 0.04, 0.06])
    g = np.array(["a", "a", "b", "c", "c"])
    ref = bootstrap_median_by_array(v, g, 300, np.random.default_rng(4))
    got = E.bootstrap_median_with_members(v, np.repeat(v[:, None], 5, 1), g, 300,
                                          np.random.default_rng(4))
    assert got == pytest.approx(ref, abs=0.0)


# --- the stage logic ------------------------------------------------------------------------

def test_budget_ensemble_adds_members_and_keeps_central(tmp_path):
    ds = _budget()
    settings = {"members": 40, "seed": 3, "factors": FACTORS}
    out, table = budget_ensemble(ds, settings, deployment_id="B1", ice_settings=CENTRAL,
                                 sensor_spacing_m=0.02)
    np.testing.assert_array_equal(out.t_season.values, ds.t_season.values)  # bit-identical
    assert out.sizes["member"] == 40
    lo, mid, hi = (out[v].item() for v in ("t_season_lo", "t_season", "t_season_hi"))
    assert lo <= mid <= hi
    shares = out.variance_share.values[:, 0, 0]
    assert np.nansum(shares) == pytest.approx(1.0)
    assert table.shape == (ds.sizes["window"], 3 + 40)
    # the per-member window table goes round its file and lines up with the windows
    rec = write_window_members(table, tmp_path / "m.csv", "B1")
    status = tmp_path / "budget.json"
    status.write_text(json.dumps({"ok": True, "deployment_id": "B1",
                                  "window_members": rec["window_members"]}))
    windows = pd.DataFrame({"deployment_id": "B1", "source": "radar", "radius_m": 4000.0,
                            "window_start": pd.to_datetime(ds.window_start.values)})
    mv = read_window_members([str(status)], windows.iloc[::-1])
    np.testing.assert_allclose(mv, table.iloc[::-1, 3:].to_numpy(), rtol=1e-9)


def test_attribution_rows_gathered_from_files_equal_those_read_from_the_stores(tmp_path):
    from floeheat.steps.budget import write_budget_store

    statuses = []
    for dep, seed in (("B2", 5), ("B1", 3)):
        ds = _budget(sources=("radar", "microwave"), radii=(4000.0, 8000.0))
        out, _ = budget_ensemble(ds, {"members": 24, "seed": seed, "factors": FACTORS},
                                 deployment_id=dep, ice_settings=CENTRAL,
                                 sensor_spacing_m=0.02)
        write_budget_store(out, tmp_path / dep / "budget.zarr")
        rec = write_attribution_rows(out, tmp_path / dep / "attribution.csv", dep)
        for name, extra in (("with", rec), ("without", {})):
            status = tmp_path / dep / f"{name}.json"
            status.write_text(json.dumps({"ok": True, "deployment_id": dep, **extra,
                                          "budget_zarr": str(tmp_path / dep / "budget.zarr")}))
        statuses.append(tmp_path / dep)
    gathered = attribution_table([str(p / "with.json") for p in statuses])
    from_stores = attribution_table([str(p / "without.json") for p in statuses])
    assert len(gathered) == 8 and list(gathered["deployment_id"].unique()) == ["B1", "B2"]
    pd.testing.assert_frame_equal(gathered.reset_index(drop=True),
                                  from_stores.reset_index(drop=True))
    shares = gathered.filter(like="share_").sum(axis=1)
    np.testing.assert_allclose(shares, 1.0)
    # without radar scenes the radar factors move nothing: a share of exactly 0, not the
    # rounding noise of a variance of equal values
    assert (gathered["share_coverage_threshold"] == 0.0).all()
    assert (gathered["share_f_ow_sampling"] == 0.0).all()


def test_no_members_switches_the_ensemble_off():
    ds = _budget()
    out, table = budget_ensemble(ds, {"members": 0}, deployment_id="B1")
    assert table is None and out is ds


# --- calibration, quick tier (3 seeds; the coverage is reported by the benchmark) -----------

@pytest.mark.parametrize("seed", [0, 1, 2])
def test_calibration_intervals_are_finite_ordered_and_hold_the_central(seed):
    case = calibration_case(seed, FACTORS, days=16)
    ds = analyse_case(case, {"members": 60, "seed": 11, "factors": FACTORS})
    lo, mid, hi = (ds[v].values[0] for v in ("t_season_lo", "t_season", "t_season_hi"))
    assert np.isfinite([lo, mid, hi]).all()
    assert (lo <= mid).all() and (mid <= hi).all() and (lo < hi).all()
    assert np.isfinite(case["truth"]).all()
