"""Tests of floeheat.icebase: handbook values, worked examples and synthetic strings."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st

from floeheat import constants as C
from floeheat import icebase as I


@pytest.mark.parametrize("s, t, k", [
    (5.0, -5.0, 1.9000), (8.0, -2.0, 1.5100), (0.0, -10.0, 2.0300),  # check-values.md s.3
])
def test_conductivity_table(s, t, k):
    # Untersteiner 1964 form k0 + beta S / T, beta = 0.13 (check-values.md s.3 table)
    assert I.ice_conductivity(t, s) == pytest.approx(k, abs=5e-5)
    assert np.isnan(I.ice_conductivity(0.5, 4.0))


@pytest.mark.parametrize("s, t, q", [
    (5.0, -5.0, -2.999179e8), (8.0, -2.0, -2.448210e8), (0.0, -10.0, -3.255900e8),
])
def test_bl99_enthalpy_table(s, t, q):
    # Bitz & Lipscomb 1999 enthalpy, check-values.md s.4 table
    assert I.ice_enthalpy_bl99(t, s) == pytest.approx(q, rel=2e-7)
    assert I.melt_energy_per_volume("enthalpy", t, s) == pytest.approx(-q, rel=2e-7)


def test_melt_rate_worked_number():
    # check-values.md s.6: a flux of 10 W m-2 melts 0.282 cm/day (rho_i 917, L 3.34e5)
    time = pd.date_range("2020-07-01", periods=2, freq="1D")
    zb = xr.DataArray([2.0, 2.0 - 0.00282], dims="time", coords={"time": time})
    qb = I.basal_melt_energy(zb)
    assert float(qb[-1]) / 86400.0 == pytest.approx(10.0, rel=1e-3)
    # growth (bottom moves down) gives Q_b < 0 (science.md)
    assert float(I.basal_melt_energy(zb[::-1].assign_coords(time=time))[-1]) < 0


def test_bulk_flux_worked_example():
    # check-values.md s.6: u* = 0.01, dT = 0.1 -> 24.550 W m-2 (rho 1025, cp0, c_h 0.006)
    assert I.bulk_heat_flux(0.01, -1.7, -1.8) == pytest.approx(24.550, abs=5e-4)
    # and 25.966 with rho 1026, cw 4218
    assert I.bulk_heat_flux(0.01, -1.7, -1.8, rho_kg_m3=1026.0, cp_J_kg_K=4218.0) == \
        pytest.approx(25.966, abs=5e-4)


def test_fourier_law_on_linear_profile():
    # Fourier's law, F = -k dT/dz, z down: ice warmer above its base (dT/dz < 0) -> F_c > 0
    z = np.arange(-0.2, 3.0, 0.02)
    g = -1.5  # K m-1
    zb = 1.6
    T = np.where(z < zb, -1.8 + g * (z - zb), -1.8)
    da = xr.DataArray(T[None], dims=("time", "sensor"))
    out = I.conductive_flux(da, z, xr.DataArray([zb], dims="time"), span_m=0.2)
    assert float(out.f_c[0]) == pytest.approx(-C.K_ICE_W_M_K * g, rel=1e-9)
    sal = I.conductive_flux(da, z, xr.DataArray([zb], dims="time"), span_m=0.2,
                            conductivity="salinity", salinity_ppt=5.0)
    tb = float(sal.t_band[0])
    k = C.K_ICE_W_M_K + C.K_ICE_BETA_W_M_PPT * 5.0 / tb
    assert float(sal.f_c[0]) == pytest.approx(-k * g, rel=1e-9)


def _string(n_hours=72, melt_m_day=0.02, seed=0, gradient=-0.8, noise=0.01):
    """Synthetic string: air above 0, ice with a linear profile, water at -1.75."""
    rng = np.random.default_rng(seed)
    time = pd.date_range("2020-07-01", periods=n_hours, freq="h")
    z = np.round(np.arange(-0.5, 3.5, 0.02), 4)
    hours = np.arange(n_hours)
    zb = 1.8 - melt_m_day * hours / 24.0
    tw = -1.75
    air = 0.5 + 3.0 * np.sin(2 * np.pi * hours / 24.0)[:, None]
    ice = tw + gradient * (z[None, :] - zb[:, None])
    T = np.where(z[None, :] < 0.0, air, np.where(z[None, :] < zb[:, None], ice, tw))
    T = T + rng.normal(0.0, noise, T.shape)
    ds = xr.Dataset({"temperature": (("time", "sensor"), T)},
                    coords={"time": time, "depth": ("sensor", z)})
    return ds, zb


def test_ice_bottom_found_robustly():
    ds, zb = _string(melt_m_day=0.05)
    T = ds.temperature.values.copy()
    T[:, 60] = np.nan                     # dead sensor
    T[:, 80] = 12.0                       # stuck far from its neighbours
    T[10, 95] = 25.0                      # spikes
    T[30, 70] = -30.0
    ds["temperature"] = (("time", "sensor"), T)
    out = I.ice_base(ds, smooth_hours=6.0)
    err = np.abs(out.z_b.values - zb)
    assert np.nanmax(err) < 0.03          # within 1.5 sensor spacings
    assert not out.qc_z_b_not_found.values.any()
    # conduction: -k * gradient (Fourier's law)
    assert float(out.f_c.median()) == pytest.approx(-C.K_ICE_W_M_K * -0.8, rel=0.1)
    # basal melt energy: rho_i L times the bottom's rise (science.md definition)
    # (tolerance: the 3 cm of the bottom's position, common practice, no source)
    e = C.RHO_ICE_KG_M3 * C.LATENT_HEAT_FUSION_J_KG
    assert float(out.q_b[-1]) == pytest.approx(e * (zb[0] - zb[-1]), abs=e * 0.03)
    assert float(out.q_b[-1]) > 0
    # the top surface sits between the last air sensor (-0.02) and the first ice one (0)
    assert float(out.z_top.median()) == pytest.approx(-0.01, abs=0.011)


def test_mask_and_despike():
    ds, _ = _string(n_hours=48)
    T = ds.temperature.copy()
    T[:, 100] = 9.0
    T[5, 120] = 15.0
    m = I.mask_bad_sensors(T)
    assert bool(m.qc_masked[:, 100].all())
    assert int(m.qc_masked.sum()) == 48
    d = I.despike(m.temperature)
    assert np.isnan(float(d[5, 120]))
    assert d.attrs["n_spikes"] >= 1


def _logger_record(seed: int, n_time: int = 300, n_sensor: int = 12) -> np.ndarray:
    """Synthetic string readings at a logger's 0.0625 K resolution, with gaps, spikes,
    a dead sensor and runs of identical readings near and far from the neighbours."""
    rng = np.random.default_rng(seed)
    t = np.linspace(-6.0, -1.8, n_sensor)[None, :] + rng.normal(0, 0.05, (n_time, n_sensor))
    t = np.round(t / 0.0625) * 0.0625
    t[rng.random(t.shape) < 0.05] = np.nan
    t[rng.random(t.shape) < 0.01] += 4.0          # spikes
    t[:, 3] = np.where(rng.random(n_time) < 0.7, np.nan, t[:, 3])  # mostly dead
    t[40:90, 5] = 3.0                             # stuck far from its neighbours
    t[100:160, 7] = np.nanmedian(t[:, 7])         # stuck where the sensor belongs
    t[200:230, 9] = -50.0                         # stuck, then a gap inside a run
    t[215, 9] = np.nan
    t[-30:, 11] = t[-30, 11]                      # stuck to the end of the record
    return t


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_mask_bad_sensors_runs_as_a_plain_loop(seed):
    # reference: runs of identical readings counted with itertools.groupby (Python's
    # standard library), each judged as mask_bad_sensors' docstring says
    import itertools
    raw = _logger_record(seed)
    out = I.mask_bad_sensors(xr.DataArray(raw, dims=("time", "sensor")), stuck_steps=24,
                             tolerance_K=0.2)
    v = raw.copy()
    v[(v < -60) | (v > 30)] = np.nan
    v[:, np.mean(~np.isfinite(v), axis=0) > 0.5] = np.nan
    ref = v.copy()
    for j in range(v.shape[1]):
        mates = [k for k in range(j - 2, j + 3) if 0 <= k < v.shape[1] and k != j]
        i = 0
        for _, run in itertools.groupby(v[:, j].tolist(), key=lambda x: ("nan", id(x))
                                        if x != x else x):
            n = len(list(run))
            if n >= 24 and np.isfinite(v[i, j]):
                with np.errstate(all="ignore"):
                    near = np.array([np.nanmedian(v[k, mates]) if np.isfinite(v[k, mates]).any()
                                     else np.nan for k in range(i, i + n)])
                if np.nanmedian(np.abs(v[i:i + n, j] - near)) > 0.2:
                    ref[i:i + n, j] = np.nan
            i += n
    np.testing.assert_array_equal(out.temperature.values, ref)
    assert np.isnan(ref[40:90, 5]).all() and np.isfinite(ref[101:160, 7]).all()


@pytest.mark.parametrize("seed", [0, 1])
def test_despike_as_xarray_rolling_median(seed):
    # reference: xarray's own rolling median (DataArray.rolling(...).median()) in the
    # formula of despike's docstring; sensors first, to check the dimension order
    da = xr.DataArray(_logger_record(seed).T, dims=("sensor", "time"),
                      coords={"sensor": [f"s{k:02d}" for k in range(12)]})
    med = da.rolling(time=7, center=True, min_periods=1).median()
    dev = abs(da - med)
    mad = dev.rolling(time=7, center=True, min_periods=1).median()
    spike = dev > 5.0 * 1.4826 * mad + 0.05
    out = I.despike(da, window=7, n_mad=5.0, floor_K=0.05)
    assert out.dims == da.dims and (out.sensor == da.sensor).all()
    np.testing.assert_array_equal(out.values, da.where(~spike).values)
    assert out.attrs["n_spikes"] == int(spike.sum()) > 0


def test_heated_rise_serves_where_temperature_fails():
    # isothermal ice (gradient 0): the temperature method cannot find the base
    ds, zb = _string(n_hours=24, gradient=0.0, melt_m_day=0.0)
    z = ds.depth.values
    rise = np.where(z < zb[0], 0.9, 0.3)[None, :].repeat(24, 0)
    ds["heated_rise"] = (("time", "sensor"), rise)
    raw = I.find_ice_bottom(ds.temperature, z, heated_rise=ds.heated_rise)
    assert (raw.source.values == 2).all()
    # midpoint between the deepest ice sensor and the first water sensor
    assert np.all(np.abs(raw.z_b.values - zb[0]) <= 0.02)
    no = I.find_ice_bottom(ds.temperature, z)
    assert (no.source.values == 0).all() and np.isnan(no.z_b.values).all()


def test_sounder_gives_z_b_and_is_compared():
    ds, zb = _string()
    snd = zb + 0.01
    ds["ice_bottom_depth"] = ("time", snd)
    out = I.ice_base(ds, smooth_hours=6.0)
    assert np.allclose(out.z_b.values[3:-3], snd[3:-3], atol=1e-9)
    assert out.attrs["sounder_n"] == ds.sizes["time"]
    assert abs(out.attrs["sounder_mean_m"] + 0.01) < 0.02
    assert (out.z_b_source.values == 3).all()


@settings(max_examples=40, deadline=None)
@given(st.lists(st.floats(0.5, 3.0), min_size=2, max_size=20), st.floats(1e8, 4e8),
       st.floats(0.1, 5.0))
def test_basal_melt_energy_properties(zb, e, lam):
    da = xr.DataArray(np.array(zb), dims="time")
    q = I.basal_melt_energy(da, e).values
    # sign: Q_b > 0 when the bottom rose (melt), < 0 when it fell (growth); 0 at t0
    assert q[0] == 0.0
    assert np.sign(q[-1]) == np.sign(zb[0] - zb[-1]) or abs(zb[0] - zb[-1]) < 1e-12
    # linear in the melt energy per volume
    assert I.basal_melt_energy(da, lam * e).values == pytest.approx(lam * q, rel=1e-9,
                                                                     abs=1e-3)
    # closed form for constant e (science.md): e (z_b(t0) - z_b(t))
    assert q == pytest.approx(e * (zb[0] - np.array(zb)), rel=1e-9, abs=1e-3)


def test_interface_meets_the_freezing_point_when_the_mixed_layer_is_warmer():
    # Interface condition (science.md, "Ice bottom and conduction"): the ice base is at
    # the freezing point of the water below, while the mixed layer may be warmer. A
    # linear ice profile (-1 K m-1) reaching -1.8 degC at 1.5 m over water at -1.75 degC:
    # the pick must land on 1.5 m when the freezing temperature is given (analytic
    # geometry).
    from floeheat.icebase import find_ice_bottom

    z = np.arange(0.0, 3.0, 0.05)
    prof = np.where(z <= 1.5, -0.3 + (-1.8 + 0.3) * z / 1.5, -1.75)
    T = xr.DataArray(np.tile(prof, (4, 1)), dims=("time", "sensor"))
    with_tf = find_ice_bottom(T, z, freezing_temperature_degC=-1.8).z_b.values
    without = find_ice_bottom(T, z).z_b.values
    np.testing.assert_allclose(with_tf, 1.5, atol=1e-6)
    # without it, the walk down the ice sensors still ends on the coldest ice sensor
    # (the crossing with the warmer water temperature is clipped there)
    np.testing.assert_allclose(without, 1.5, atol=1e-6)


def test_heating_cycle_pick_wins_where_temperature_cannot_see_the_interface():
    # Water exactly at the freezing point and an ice base at the freezing point leave no
    # temperature contrast at the interface; the heating-cycle response (ice heats up
    # more than water, archive-format.md "heated_temperature_rise") still marks it.
    # Geometry of the synthetic case only; the thresholds are common practice, no source.
    from floeheat.icebase import find_ice_bottom

    z = np.arange(0.0, 3.0, 0.05)
    prof = np.where(z <= 1.5, -0.3 + (-1.8 + 0.3) * z / 1.5, -1.8)
    # the base at 1.5 m, but the coldest ice is indistinguishable from the water
    prof = np.where((z > 1.2) & (z <= 1.5), -1.8, prof)
    # six 3-hourly steps: all within half of HEATED_MAX_GAP of the single cycle
    time = pd.date_range("2024-07-01", periods=6, freq="3h")
    T = xr.DataArray(np.tile(prof, (6, 1)), dims=("time", "sensor"), coords={"time": time})
    rise = np.where(z <= 1.5, 0.8, 0.3)
    R = np.full((6, z.size), np.nan)
    R[0] = rise  # one heating cycle at the first step
    R = xr.DataArray(R, dims=("time", "sensor"), coords={"time": time})
    out = find_ice_bottom(T, z, heated_rise=R)
    # the heating pick is the midpoint between the last heated-ice sensor and the next
    np.testing.assert_allclose(out.z_b.values, 1.525, atol=1e-9)
    assert (out.source.values == 2).all()


def test_two_layer_cost_equals_the_direct_sums():
    # reference: the least-squares costs summed sensor by sensor for each candidate
    # (ice above zc: a line through (zc, target); water below: a constant)
    rng = np.random.default_rng(11)
    z = np.sort(rng.uniform(0.5, 3.0, 24))
    t = np.where(z < 1.7, -1.8 + 2.0 * (1.7 - z), -1.75) + rng.normal(0.0, 0.01, z.size)
    grid = np.union1d(np.arange(0.5, 3.0, 0.01), z)
    expect = []
    for zc in grid:
        ice, wat = z <= zc, z > zc
        if ice.sum() < 3 or wat.sum() < 2:
            expect.append(np.inf)
            continue
        dz, dt = z[ice] - zc, t[ice] + 1.8
        slope = np.sum(dz * dt) / np.sum(dz * dz)
        expect.append(np.sum((dt - slope * dz) ** 2) + np.sum((t[wat] - t[wat].mean()) ** 2))
    got = I._two_layer_cost(z[::-1], t[::-1], -1.8, grid)  # any sensor order
    np.testing.assert_allclose(got, expect, rtol=1e-9, atol=1e-12)
    assert np.isinf(got).sum() > 0 and np.isfinite(got).sum() > 100
