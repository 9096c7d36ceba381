"""Tests of floeheat.storage against TEOS-10 / EOS-80 check values and closed forms."""

from __future__ import annotations

import warnings

import gsw
import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st

from floeheat import constants as C
from floeheat import storage as S

# TEOS-10 web example inputs (from memory; they reproduce the references below exactly).
SP_WEB = np.array([34.5487, 34.7275, 34.8605, 34.6810, 34.5680, 34.5600])
T_WEB = np.array([28.7856, 28.4329, 22.8103, 10.2600, 6.8863, 4.4036])
P_WEB = np.array([10.0, 50.0, 125.0, 250.0, 600.0, 1000.0])


def _profiles(p, t, sp, lat, lon, time=None):
    p, t, sp = (np.atleast_2d(np.asarray(a, dtype=float)) for a in (p, t, sp))
    n = p.shape[0]
    coords = {"latitude": ("profile", np.full(n, float(lat))),
              "longitude": ("profile", np.full(n, float(lon)))}
    if time is not None:
        coords["time"] = ("profile", np.asarray(time, dtype="datetime64[ns]"))
    return xr.Dataset({"pressure": (("profile", "level"), p),
                       "temperature": (("profile", "level"), t),
                       "salinity": (("profile", "level"), sp)}, coords=coords)


def test_teos10_web_examples():
    pr = S.seawater_properties(_profiles(P_WEB, T_WEB, SP_WEB, 4.0, 188.0))
    sa = pr.absolute_salinity.values[0]
    # check-values.md s.1: SA_from_SP reference 34.711778344814114 ... 34.732363065590846;
    # newer SAAR table differs by ~1.5e-5, atol 1e-4 as advised there.
    assert sa[0] == pytest.approx(34.711778344814114, abs=1e-4)
    assert sa[-1] == pytest.approx(34.732363065590846, abs=1e-4)
    # check-values.md s.1: CT_from_t reference 28.809919826700281 ... 4.323575748610455
    # (with the reference SA; the SA difference above moves CT by < 1e-5).
    ct = pr.conservative_temperature.values[0]
    assert ct[0] == pytest.approx(28.809919826700281, abs=1e-5)
    assert ct[-1] == pytest.approx(4.323575748610455, abs=1e-5)
    # check-values.md s.1: CT_freezing(SA, p, 1) -1.899683776424096 ... -2.677162675412748
    ctf = pr.freezing_ct.values[0]
    assert ctf[0] == pytest.approx(-1.899683776424096, abs=1e-5)
    assert ctf[-1] == pytest.approx(-2.677162675412748, abs=1e-5)


def test_arctic_points():
    # check-values.md s.1: SA_from_SP at 75N, -150E: SP 30, p 0 -> 30.144338552637;
    # SP 34.8, p 300 -> 34.968187177552.
    pr = S.seawater_properties(_profiles([0.0, 300.0], [-1.6, 0.5], [30.0, 34.8], 75.0, -150.0))
    assert pr.absolute_salinity.values[0, 0] == pytest.approx(30.144338552637, abs=1e-9)
    assert pr.absolute_salinity.values[0, 1] == pytest.approx(34.968187177552, abs=1e-9)
    # check-values.md s.1: CT_from_t(30, -1.6, 0) = -1.590880172507 (SA given as 30).
    assert gsw.CT_from_t(30.0, -1.6, 0.0) == pytest.approx(-1.590880172507, abs=1e-11)


@pytest.mark.parametrize("sat, p, expected", [
    (0.0, 0.0, -1.916533673921), (1.0, 0.0, -1.918431173806),      # check-values.md s.1
    (0.0, 100.0, -1.993244965417), (1.0, 100.0, -1.995140715521),  # check-values.md s.1
])
def test_freezing_ct_saturation(sat, p, expected):
    sp = gsw.SP_from_SA(35.16504, p, -150.0, 75.0)  # so that SA = 35.16504 exactly
    pr = S.seawater_properties(_profiles([p], [0.0], [sp], 75.0, -150.0), saturation_fraction=sat)
    assert pr.absolute_salinity.values[0, 0] == pytest.approx(35.16504, abs=1e-10)
    assert pr.freezing_ct.values[0, 0] == pytest.approx(expected, abs=1e-9)


def test_cp0_identity():
    # TEOS-10 manual Eq. 3.3.3; check-values.md s.1: enthalpy(SA, CT, 0) / cp0 == CT.
    sa, ct = np.array([30.0, 34.9]), np.array([-1.6, 2.0])
    assert np.allclose(gsw.enthalpy(sa, ct, 0.0) / C.CP0_J_KG_K, ct, atol=1e-10)


def _props(depth, dtheta, rho=1025.0, time=None):
    depth = np.atleast_2d(np.asarray(depth, float))
    dtheta = np.atleast_2d(np.asarray(dtheta, float))
    coords = {}
    if time is not None:
        coords["time"] = ("profile", np.asarray(time, dtype="datetime64[ns]"))
    return xr.Dataset({
        "depth": (("profile", "level"), depth),
        "conservative_temperature": (("profile", "level"), dtheta - 1.8),
        "freezing_ct": (("profile", "level"), np.full_like(dtheta, -1.8)),
        "density": (("profile", "level"), np.broadcast_to(rho, dtheta.shape).astype(float)),
    }, coords=coords)


def test_heat_content_closed_form_linear_integrand():
    # Closed form: dTheta = a + b z between samples (trapezoid exact), constant a + b z0
    # (mixed) between the draft and the first sample z0; rho0 constant.
    a, b, rho, cp = 0.3, -0.01, 1025.0, C.CP0_J_KG_K
    z = np.arange(2.0, 40.0, 5.0)
    draft, z2 = 1.3, 20.5
    pr = _props(z, a + b * z)
    h = float(S.heat_content(pr, z2, draft, density="constant").heat_content[0])
    expect = cp * rho * ((a + b * z[0]) * (z[0] - draft)
                         + a * (z2 - z[0]) + 0.5 * b * (z2**2 - z[0] ** 2))
    assert h == pytest.approx(expect, rel=1e-12)


def test_draft_below_shallowest_sample_and_short_profile():
    pr = _props([[1.0, 5.0, 10.0, 30.0], [1.0, 5.0, 10.0, np.nan]], [[0.2] * 4] * 2)
    out = S.heat_content(pr, 20.0, 3.0, density="constant")
    # uniform 0.2 K over 17 m (closed form)
    assert out.heat_content.values[0] == pytest.approx(C.CP0_J_KG_K * 1025 * 0.2 * 17.0)
    assert out.reaches_z2.values.tolist() == [True, False]
    assert np.isnan(out.heat_content.values[1])


def test_eos80_cross_check_of_heat_content():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        import seawater as sw
        from seawater.library import T90conv

    # First check the EOS-80 set-up (Fofonoff & Millard 1983 p30, check-values.md s.2):
    # fp(S=40, p=500) = -2.588567 degC (IPTS-68): seawater returns ITS-90, x 1.00024.
    assert sw.fp(40.0, 500.0) * 1.00024 == pytest.approx(-2.588567, abs=2e-6)
    # p35: cp(40, T68=40, 10000) = 3849.500; seawater takes ITS-90 (T90conv).
    assert sw.cp(40.0, T90conv(40.0), 10000.0) == pytest.approx(3849.500, abs=1e-3)
    # Cross-check: a uniform layer 2-20 m, SP 31, t -1.0 degC; EOS-80 heat above freezing
    # per area = rho cp (t - t_f) dz. TEOS-10 (cp0, CT) and EOS-80 (cp, t) differ by well
    # under 1 % here (common practice, no source, for the tolerance).
    p = np.arange(2.0, 30.0, 2.0)
    t = np.full_like(p, -1.0)
    spv = np.full_like(p, 31.0)
    prof = _profiles(p, t, spv, 80.0, 0.0)
    props = S.seawater_properties(prof)
    h = float(S.heat_content(props, 20.0, float(props.depth[0, 0])).heat_content[0])
    zz = props.depth.values[0]
    sel = (zz >= zz[0]) & (zz <= 20.0)
    pm = float(np.mean(p[sel]))
    eos = (sw.dens(31.0, -1.0, pm) * sw.cp(31.0, -1.0, pm) * (-1.0 - sw.fp(31.0, pm))
           * (20.0 - zz[0]))
    assert h == pytest.approx(eos, rel=0.01)


def test_threshold_and_isopycnal_depths():
    z = xr.DataArray([[1.0, 10.0, 20.0, 30.0], [1.0, 10.0, 20.0, 30.0]],
                     dims=("profile", "level"))
    rho = xr.DataArray([[1024.0, 1024.05, 1024.25, 1025.0],
                        [1024.0, 1024.2, 1024.3, 1025.0]], dims=("profile", "level"))
    thr = S.threshold_depth(z, rho, 0.1).values
    # hand arithmetic: 10 + (0.05/0.2) * 10 = 12.5 ; 1 + (0.1/0.2) * 9 = 5.5
    assert thr == pytest.approx([12.5, 5.5])
    pr = xr.Dataset({"depth": z, "potential_density": rho})
    zz = S.integration_depth(pr)
    assert float(zz.z2) == pytest.approx(12.5 + C.Z2_MARGIN_M)
    assert zz.z2_profile.values == pytest.approx([12.5, 5.5])
    iso = S.integration_depth(pr, "isopycnal", sigma0_kg_m3=24.5)
    # 20 + (0.25/0.75) * 10 and 20 + (0.2/0.7) * 10: the deepest of the two
    assert float(iso.z2) == pytest.approx(20.0 + 0.25 / 0.75 * 10.0)
    assert float(S.integration_depth(pr, "fixed", z2_m=33.0).z2) == 33.0
    with pytest.raises(ValueError):
        S.integration_depth(pr, "bogus")


def test_isostatic_draft_arithmetic():
    # hand arithmetic: (917 * 2 + 330 * 0.2) / 1025
    assert S.isostatic_draft(2.0, 0.2) == pytest.approx((917 * 2 + 330 * 0.2) / 1025)
    assert S.isostatic_draft(2.0, 0.0, rho_w_kg_m3=1020.0) == pytest.approx(1834 / 1020)


@settings(max_examples=30, deadline=None)
@given(
    upper=st.lists(st.floats(0.0, 3.0), min_size=6, max_size=6),
    lower=st.floats(0.0, 2.0),
    z2=st.floats(21.0, 39.0),
    z2b=st.floats(21.0, 39.0),
)
def test_constant_layer_below_z2_leaves_q_st_unchanged(upper, lower, z2, z2b):
    # science.md "Integration depth z2": a layer constant in time does not change Q_st.
    z = np.arange(2.0, 42.0, 2.0)
    d = np.full((2, z.size), lower)
    d[0, :6] = upper[:3] * 2
    d[1, :6] = upper[3:] * 2
    pr = _props(np.tile(z, (2, 1)), d)
    q1 = S.storage_change(S.heat_content(pr, z2, 0.0).heat_content).values
    q2 = S.storage_change(S.heat_content(pr, z2b, 0.0).heat_content).values
    assert q1 == pytest.approx(q2, rel=1e-9, abs=1e-3)


def test_heat_storage_sensitivity_and_thickness_draft():
    p = np.arange(1.0, 60.0, 1.0)
    t0 = np.where(p < 12, -1.5, -1.6)
    t1 = np.where(p < 12, -1.2, -1.6)
    sp = np.where(p < 15, 28.0, 31.0)
    time = np.array(["2020-06-01", "2020-06-11"], dtype="datetime64[ns]")
    prof = _profiles(np.vstack([p, p]), np.vstack([t0, t1]), np.vstack([sp, sp]), 80.0, 0.0,
                     time)
    out = S.heat_storage(prof, draft_m=1.0, method="fixed", z2_m=30.0, offset_m=5.0)
    # only the top 12 m changed: Q_st is the same for z2 = 25, 30, 35 m
    assert float(out.q_st[1]) > 0
    assert float(out.q_st_z2_lo[1]) == pytest.approx(float(out.q_st[1]), rel=1e-9)
    assert float(out.q_st_z2_hi[1]) == pytest.approx(float(out.q_st[1]), rel=1e-9)
    # closed form (constant density): the change dCT is uniform down to the sample at
    # p = 11 dbar and falls linearly to 0 at the next (p = 12): cp0 rho0 times
    # dCT (z11 - draft) + dCT (z12 - z11) / 2
    outc = S.heat_storage(prof, draft_m=1.0, method="fixed", z2_m=30.0, density="constant")
    props = S.seawater_properties(prof)
    dct = (props.conservative_temperature[1] - props.conservative_temperature[0]).values
    zz = props.depth.values[0]
    assert np.ptp(dct[:11]) < 1e-3 and abs(dct[11]) < 1e-12
    expect = C.CP0_J_KG_K * C.RHO0_KG_M3 * (dct[10] * (zz[10] - 1.0)
                                            + 0.5 * dct[10] * (zz[11] - zz[10]))
    assert float(outc.q_st[1]) == pytest.approx(expect, rel=2e-4)
    # draft from thickness uses the profile's surface density
    thick = xr.DataArray([2.0, 2.0], dims="time", coords={"time": time})
    out2 = S.heat_storage(prof, method="fixed", z2_m=30.0, ice_thickness_m=thick)
    rho_s = float(props.density[0, 0])
    assert float(out2.draft[0]) == pytest.approx(917 * 2.0 / rho_s)
    assert out.z2_profile.dims == ("profile",)
