"""Tests of floeheat.budget: a hand-built case with closed forms, linearity, gaps, signs."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from floeheat import budget as B
from floeheat import constants as C

T0 = pd.Timestamp("2020-06-01")
DAYS = 30
EDGES = pd.date_range(T0, periods=DAYS * 24 + 1, freq="h").values
SEC = (EDGES - EDGES[0]) / np.timedelta64(1, "s")


def _sw(value=250.0):
    v = np.broadcast_to(np.asarray(value, float), (EDGES.size - 1,)).copy()
    return xr.Dataset({"sw_down": ("time", v),
                       "time_bnds": (("time", "nv"), np.stack([EDGES[:-1], EDGES[1:]], 1))},
                      coords={"time": EDGES[1:]})


def _fow(values, times=None, sources=("radar",), radii=(4000.0,)):
    times = EDGES[::24] if times is None else times
    v = np.asarray(values, float)
    v = np.broadcast_to(v.reshape(-1, 1, 1) if v.ndim == 1 else v,
                        (len(times), len(sources), len(radii))).copy()
    return xr.DataArray(v, dims=("time", "source", "radius"),
                        coords={"time": times, "source": list(sources), "radius": list(radii)})


def _storage(h):
    t = EDGES[::6]
    return xr.Dataset({"heat_content": ("profile", h(t))}, coords={"time": ("profile", t)})


def _ice(zb, fc):
    t = EDGES[::3]
    return xr.Dataset({"z_b": ("time", zb(t)), "f_c": ("time", fc(t))}, coords={"time": t})


def _s(t):
    return (t - EDGES[0]) / np.timedelta64(1, "s")


F, FOW, A_H, M, FC = 250.0, 0.2, 3.0, 1.0e-7, 2.0   # W m-2, 1, W m-2, m s-1, W m-2


def _case(**kw):
    return B.assemble_budget(
        _sw(F), EDGES[0], EDGES[-1], f_ow=_fow(np.full(EDGES[::24].size, FOW)),
        storage=_storage(lambda t: 5e7 + A_H * _s(t)),
        ice=_ice(lambda t: 2.0 - M * _s(t), lambda t: np.full(t.size, FC)), **kw)


def test_closed_forms():
    out = _case()
    a = C.ALBEDO_OPEN_WATER
    rl = C.RHO_ICE_KG_M3 * C.LATENT_HEAT_FUSION_J_KG
    t = SEC
    q_ow = (1 - a) * FOW * F * t
    q_st = A_H * t
    q_b = rl * M * t
    q_c = FC * t
    q_w = (1 - FOW) * (rl * M - FC) * t
    r = q_ow - (q_st + q_w)
    mj = 1e-6
    assert out.q_ow.values[:, 0, 0] == pytest.approx(q_ow * mj, rel=1e-9, abs=1e-9)
    assert out.q_st.values == pytest.approx(q_st * mj, rel=1e-9, abs=1e-9)
    assert out.q_b.values == pytest.approx(q_b * mj, rel=1e-9, abs=1e-9)
    assert out.q_c.values == pytest.approx(q_c * mj, rel=1e-9, abs=1e-9)
    assert out.q_w.values[:, 0, 0] == pytest.approx(q_w * mj, rel=1e-9, abs=1e-9)
    assert out.residual.values[:, 0, 0] == pytest.approx(r * mj, rel=1e-9, abs=1e-9)
    f_tr = -r[-1] / t[-1]
    assert np.nanmax(np.abs(out.f_tr.values[1:, 0, 0] - f_tr)) < 1e-9
    assert np.isnan(out.f_tr.values[0, 0, 0])
    t_ice = f_tr / ((1 - FOW) * F)
    assert out.t_ice.values[1:, 0, 0] == pytest.approx(np.full(t.size - 1, t_ice), rel=1e-9)
    assert out.t_area.values[1:, 0, 0] == pytest.approx(np.full(t.size - 1, f_tr / F), rel=1e-9)
    # season
    assert float(out.t_season[0, 0]) == pytest.approx(-r[-1] / ((1 - FOW) * F * t[-1]), rel=1e-9)
    assert float(out.sw_in_season[0, 0]) == pytest.approx((1 - FOW) * F * t[-1] * mj, rel=1e-9)
    assert bool(out.complete_season[0, 0]) and str(out.reason.values[0, 0]) == ""
    assert float(out.f_ow_mean[0, 0]) == pytest.approx(FOW)
    # identical windows: the interval collapses onto T_season
    assert float(out.t_season_lo[0, 0]) == pytest.approx(float(out.t_season[0, 0]), rel=1e-9)
    assert float(out.t_season_hi[0, 0]) == pytest.approx(float(out.t_season[0, 0]), rel=1e-9)
    # two 15-day windows (science.md default window)
    assert out.sizes["window"] == 2
    # partitioning (science.md): shares of the incident solar and of what entered
    assert float(out.share_ow[0, 0, 0]) == pytest.approx((1 - a) * FOW, rel=1e-9)
    assert float(out.share_tr[0, 0, 0]) == pytest.approx(f_tr / F, rel=1e-9)
    entered = (1 - a) * FOW * F + f_tr
    assert float(out.share_stored[0, 0, 0]) == pytest.approx(A_H / entered, rel=1e-9)
    s = out[["share_ow", "share_tr", "share_rest"]].to_array().sum("variable")
    assert np.allclose(s.values, 1.0)
    assert np.allclose((out.share_stored + out.share_to_ice).values, 1.0)
    # seasonal.csv row
    row = B.seasonal_table(out, "dep1", "arr1").iloc[0]
    assert row.sw_in_MJ == pytest.approx((1 - FOW) * F * t[-1] * mj)
    assert row.residual_MJ == pytest.approx(r[-1] * mj)
    assert row.complete and row.reason == "" and row.radius_m == 4000.0
    assert list(B.seasonal_table(out).columns) == [
        "deployment_id", "array_id", "source", "radius_m", "start", "end", "sw_in_MJ",
        "q_ow_MJ", "q_st_MJ", "q_b_MJ", "q_c_MJ", "q_w_MJ", "residual_MJ", "t_ice",
        "t_ice_lo", "t_ice_hi", "f_ow_mean", "complete", "reason"]
    assert out.sw_down.attrs["standard_name"] == "surface_downwelling_shortwave_flux_in_air"
    assert out.q_ow.attrs["units"] == "MJ m-2"


def test_weighting_switch():
    out = _case(weight_by_ice_fraction=False)
    rl = C.RHO_ICE_KG_M3 * C.LATENT_HEAT_FUSION_J_KG
    assert float(out.q_w[-1, 0, 0]) == pytest.approx((rl * M - FC) * SEC[-1] * 1e-6, rel=1e-9)


def test_signs_growth_and_positive_residual():
    # growth (bottom moves down) gives Q_b < 0; no sinks -> R = Q_ow > 0: flagged, kept
    out = B.assemble_budget(
        _sw(F), EDGES[0], EDGES[-1], f_ow=_fow(np.full(EDGES[::24].size, FOW)),
        storage=_storage(lambda t: np.full(t.size, 1e7)),
        ice=_ice(lambda t: 2.0 + M * _s(t), lambda t: np.zeros(t.size)))
    assert float(out.q_b[-1]) < 0
    assert float(out.residual[-1, 0, 0]) > 0
    assert float(out.t_season[0, 0]) < 0          # negative transmitted estimate, not clipped
    assert int(out.qc_season_positive_residual[0, 0]) == 1
    assert out.qc_positive_residual.values[1:].all()


def test_gap_in_f_ow_beyond_max():
    # daily f_ow with days 20-25 missing (a 6-day gap): complete False with a reason;
    # the first window (days 0-15) has no gap and keeps its values.
    vals = np.full(EDGES[::24].size, FOW)
    vals[20:26] = np.nan
    times = EDGES[::24]
    ok = np.isfinite(vals)
    f = _fow(vals[ok], times=times[ok])
    out = B.assemble_budget(_sw(F), EDGES[0], EDGES[-1], f_ow=f,
                            storage=_storage(lambda t: 5e7 + A_H * _s(t)),
                            ice=_ice(lambda t: 2.0 - M * _s(t), lambda t: np.full(t.size, FC)),
                            f_ow_max_gap=pd.Timedelta(days=C.MAX_SCENE_GAP_DAYS))
    assert not bool(out.complete_season[0, 0])
    assert "f_ow missing" in str(out.reason.values[0, 0])
    assert np.isnan(float(out.t_season[0, 0])) and np.isnan(float(out.q_st_season[0, 0]))
    assert np.isfinite(float(out.window_t_ice[0, 0, 0]))
    assert np.isnan(float(out.window_t_ice[1, 0, 0]))
    row = B.seasonal_table(out).iloc[0]
    assert not row.complete and np.isnan(row.t_ice)
    # a NaN sample (not dropped) is a gap too
    out2 = B.assemble_budget(_sw(F), EDGES[0], EDGES[-1], f_ow=_fow(vals))
    assert not bool(out2.complete_season[0, 0])


def test_missing_instrument():
    out = B.assemble_budget(_sw(F), EDGES[0], EDGES[-1],
                            f_ow=_fow(np.full(EDGES[::24].size, FOW)),
                            ice=_ice(lambda t: 2.0 - M * _s(t), lambda t: np.full(t.size, FC)))
    assert "q_st" not in out and "q_b" in out
    assert not bool(out.complete_season[0, 0])
    assert "no profiles" in str(out.reason.values[0, 0])
    assert np.isnan(out.residual.values).all()


def test_uncertainty_interval_matches_t_interval():
    # Two windows with different storage rates and equal denominators: then the
    # ratio-estimator interval equals the t-interval of the mean of the window values
    # (reference: scipy.stats.t.interval with the standard error of the mean).
    h = np.where(SEC < 15 * 86400, 2.0 * SEC, 2.0 * 15 * 86400 + 6.0 * (SEC - 15 * 86400))
    st_ds = xr.Dataset({"heat_content": ("profile", h)}, coords={"time": ("profile", EDGES)})
    out = B.assemble_budget(_sw(F), EDGES[0], EDGES[-1], f_ow=_fow(np.full(31, FOW)),
                            storage=st_ds,
                            ice=_ice(lambda t: np.full(t.size, 2.0), lambda t: np.zeros(t.size)))
    w = out.window_t_ice.values[:, 0, 0]
    lo, hi = stats.t.interval(0.90, 1, loc=w.mean(), scale=stats.sem(w))
    assert float(out.t_season_lo[0, 0]) == pytest.approx(lo, rel=1e-9)
    assert float(out.t_season_hi[0, 0]) == pytest.approx(hi, rel=1e-9)
    assert lo < float(out.t_season[0, 0]) < hi


def test_time_base_interval_rule():
    b = np.stack([EDGES[:-1], EDGES[1:]], 1)
    edges, keep = B.time_base(b, EDGES[0] + np.timedelta64(30, "m"), EDGES[10])
    # only intervals lying entirely inside count (science.md "Analysis window")
    assert keep.sum() == 9 and edges[0] == EDGES[1] and edges[-1] == EDGES[10]


def _run(sw, c, fow):
    return B.assemble_budget(
        _sw(sw), EDGES[0], EDGES[-1], f_ow=_fow(np.full(31, fow)),
        storage=_storage(lambda t: 1e6 * c[0] * _s(t) / 86400),
        ice=_ice(lambda t: 2.0 + 1e-3 * c[1] * _s(t) / 86400,
                 lambda t: np.full(t.size, c[2]))).residual.values


@settings(max_examples=15, deadline=None)
@given(st.floats(0.0, 500.0), st.floats(0.0, 500.0),
       st.lists(st.floats(-5.0, 5.0), min_size=3, max_size=3),
       st.lists(st.floats(-5.0, 5.0), min_size=3, max_size=3), st.floats(0.0, 1.0))
def test_linearity(sw1, sw2, c1, c2, fow):
    # The budget is linear in its terms at fixed f_ow: inputs X1 + X2 give R(X1) + R(X2).
    r12 = _run(sw1 + sw2, [a + b for a, b in zip(c1, c2, strict=True)], fow)
    assert r12 == pytest.approx(_run(sw1, c1, fow) + _run(sw2, c2, fow), rel=1e-7, abs=1e-6)


@settings(max_examples=15, deadline=None)
@given(st.floats(0.0, 1.0), st.floats(0.0, 1.0), st.floats(0.0, 500.0))
def test_fractions_in_unit_interval(f1, f2, sw):
    # f_ow in [0, 1] and the open-water share in [0, 1 - albedo] (science.md Partitioning)
    f = _fow(np.linspace(f1, f2, 31))
    out = B.assemble_budget(_sw(sw + 1.0), EDGES[0], EDGES[-1], f_ow=f)
    fo = out.f_ow.values[1:]
    assert ((fo >= 0) & (fo <= 1)).all()
    so = out.share_ow.values
    assert ((so >= 0) & (so <= 1 - C.ALBEDO_OPEN_WATER + 1e-12)).all()
    fm = out.f_ow_mean.values
    assert ((fm >= 0) & (fm <= 1)).all()
