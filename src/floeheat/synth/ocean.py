"""Mixed layer, seasonal halocline and ice: the forward model that makes the budget.

Per deployment and hour, sunlight enters the ocean through open water,
``(1 - albedo_ow) f_ow F_sw``, and through the ice, ``T_i (1 - f_ow) F_sw`` (T_i the
deployment's true transmittance). A share ``SOLAR_NSTM_SHARE`` is laid down just below
the mixed layer (the near-surface temperature maximum), the rest warms the mixed layer.
The ocean loses the bulk flux ``F_w = rho0 cp0 c_h u* (Theta_ml - Theta_f)`` under the
ice only, so the loss per unit surface is ``(1 - f_ow) F_w``; ``u* = sqrt(Cd) |u_ice|``.
At the ice base ``rho_i L dm/dt = F_w + F_c`` (F_c = -k_i dT/dz, positive downward into
the interface); the top melts at a prescribed rate.

Energy is conserved in the very quantity the analysis measures: the heat content
``H = cp0 * integral of rho (Theta - Theta_f(S_A, p)) dz`` from the ice base (isostatic
draft) to ``TRUTH_Z2_M``, evaluated by :func:`heat_content` (trapezoid in depth over the
samples; the water between the ice base and the shallowest sample taken as mixed,
i.e. with that sample's value). ``H`` is stepped with the fluxes, and each profile's
mixed-layer temperature is solved so that its ``H`` equals the stepped value. So
``H(t1) - H(t0)`` equals the sum of the forcing exactly, and the season residual is
``-sum T_i (1 - f_ow) F_sw dt``.

Below ``Z_CONSTANT_M`` (the cold upper halocline and the warm deeper layer of older
heat near 105 m) temperature and salinity never change, so Q_st is the same for any
bound below that depth.
"""

from __future__ import annotations

from dataclasses import dataclass

import gsw
import numpy as np

from floeheat.constants import (
    ALBEDO_OPEN_WATER,
    BULK_HEAT_EXCHANGE_CH,
    CP0_J_KG_K,
    K_ICE_W_M_K,
    LATENT_HEAT_FUSION_J_KG,
    RHO0_KG_M3,
    RHO_ICE_KG_M3,
    RHO_SNOW_KG_M3,
    SATURATION_FRACTION,
)

from .scenario import (
    DRAG_COEFFICIENT,
    SOLAR_NSTM_SHARE,
    TRUTH_Z2_M,
    Z_CONSTANT_M,
    Deployment,
    Scenario,
    rng_for,
)

__all__ = ["heat_content", "Template", "template", "OceanIce", "simulate",
           "true_profiles", "draft_m", "P_TOP_DBAR"]

#: Shallowest CTD level, dbar (just below the thickest ice's draft).
P_TOP_DBAR = 4.0
#: Largest temperature gradient in the ice, K m-1 (so that |F_c| <= k_i * 1.2, about
#: 2.4 W m-2). Scenario parameter.
ICE_GRADIENT_MAX_K_M = 1.2
#: Salinity of the deep water at the bottom of the profiles, g kg-1. Scenario parameter.
SA_DEEP_G_KG = 34.85


def _smoothstep(x):
    x = np.clip(x, 0.0, 1.0)
    return x * x * (3.0 - 2.0 * x)


def heat_content(sa, ct, p_dbar, lat_deg, draft, z2_m=TRUTH_Z2_M, ct_freezing=None):
    """Heat content above freezing from the ice base to ``z2_m``, J m-2.

    ``cp0 * integral of rho (Theta - Theta_f) dz`` with in-situ density, TEOS-10
    freezing conservative temperature (air-saturated), depth from ``gsw.z_from_p``,
    the trapezoid rule between samples, linear interpolation at ``z2_m`` and the water
    between the ice base (``draft``, m below sea level) and the shallowest sample taken
    as mixed. Samples must be complete (no NaN) down to ``z2_m``.

    Parameters
    ----------
    sa, ct, p_dbar : array_like, (..., level)
        Absolute salinity (g kg-1), conservative temperature (degC), pressure (dbar),
        levels by increasing pressure.
    lat_deg : array_like, (...,)
        Latitude.
    draft : array_like, (...,)
        Depth of the ice base below sea level, m.
    ct_freezing : array_like, optional
        ``gsw.CT_freezing(sa, p, 1)`` when already known (it is the slow part).

    Examples
    --------
    >>> p = np.arange(4.0, 50.0)
    >>> sa = np.full(p.shape, 30.0)
    >>> ct = gsw.CT_freezing(sa, p, 1.0) + 0.1
    >>> h = heat_content(sa, ct, p, 80.0, 2.0)
    >>> bool(abs(h / (CP0_J_KG_K * 1024.0 * 0.1 * 38.0) - 1) < 0.01)
    True
    """
    sa, ct, p = np.broadcast_arrays(np.asarray(sa, float), np.asarray(ct, float),
                                    np.asarray(p_dbar, float))
    lat = np.asarray(lat_deg, float)[..., None]
    z = -gsw.z_from_p(p, lat)
    if ct_freezing is None:
        ct_freezing = gsw.CT_freezing(sa, p, SATURATION_FRACTION)
    g = gsw.rho(sa, ct, p) * (ct - ct_freezing)
    seg = 0.5 * (g[..., 1:] + g[..., :-1]) * np.diff(z, axis=-1)
    # fraction of each segment above z2
    frac = np.clip((z2_m - z[..., :-1]) / np.diff(z, axis=-1), 0.0, 1.0)
    g_at = g[..., :-1] + (g[..., 1:] - g[..., :-1]) * frac
    part = 0.5 * (g[..., :-1] + g_at) * frac * np.diff(z, axis=-1)
    full = frac >= 1.0
    total = np.where(full, seg, part).sum(axis=-1)
    top = g[..., 0] * (z[..., 0] - np.asarray(draft, float))
    return CP0_J_KG_K * (total + top)


def draft_m(h_ice_m, h_snow_m, rho_w):
    """Isostatic draft ``(rho_i h_i + rho_s h_s) / rho_w``, m.

    Examples
    --------
    >>> round(float(draft_m(2.0, 0.0, 1025.0)), 4)
    1.7893
    """
    return (RHO_ICE_KG_M3 * np.asarray(h_ice_m) + RHO_SNOW_KG_M3 * np.asarray(h_snow_m)) / rho_w


@dataclass
class Template:
    """Background profile and the shapes of its two time-varying parts."""

    sa: np.ndarray    # (..., level) g kg-1
    ct_bg: np.ndarray  # background conservative temperature, degC
    w_ml: np.ndarray   # weight of the mixed-layer excess
    bump: np.ndarray   # shape of the near-surface temperature maximum (peak 1)
    sa_ml: np.ndarray  # (...,)
    h_ml: np.ndarray   # (...,)
    ct_f: np.ndarray   # freezing conservative temperature (..., level)


def _season_state(dep: Deployment, t_days_after_onset):
    td = np.asarray(t_days_after_onset, float)
    h = dep.h_ml_winter_m + (dep.h_ml_summer_m - dep.h_ml_winter_m) * np.clip(td / 40.0, 0, 1)
    sa_ml = dep.sa_ml_g_kg - dep.freshening_g_kg * _smoothstep(td / 90.0)
    return h, sa_ml


def template(dep: Deployment, t_days_after_onset, p_dbar, lat_deg) -> Template:
    """Build the profile template of a deployment at times, on pressure levels."""
    h, sa_ml = _season_state(dep, t_days_after_onset)
    h = h[..., None]
    sml = sa_ml[..., None]
    p = np.asarray(p_dbar, float)
    z = -gsw.z_from_p(p, np.asarray(lat_deg, float)[..., None])
    zc = Z_CONSTANT_M
    sa_c = dep.sa_ml_g_kg + 1.6
    x = (z - h) / (zc - h)
    sa = np.where(z <= h, sml, sml + (sa_c - sml) * _smoothstep(x))
    sa = np.where(z > zc, sa_c + (SA_DEEP_G_KG - sa_c) * (1 - np.exp(-(z - zc) / 45.0)), sa)
    tf = gsw.CT_freezing(sa, p, SATURATION_FRACTION)
    tf_ml0 = gsw.CT_freezing(sml, 0.0, SATURATION_FRACTION)
    deep = 0.03 + 1.2 * np.exp(-(((z - 105.0) / 28.0) ** 2))
    ct = np.where(z <= h, tf_ml0, tf + 0.03 * np.clip(x, 0, 1))
    ct = np.where(z > zc, tf + deep, ct)
    w = np.clip(1.0 - (z - h) / 1.5, 0.0, 1.0)
    wn = np.minimum(8.0, zc - 0.5 - h)
    xb = (z - h) / wn
    bump = np.where((xb > 0) & (xb < 1), np.sin(np.pi * xb) ** 2, 0.0)
    return Template(sa=sa, ct_bg=ct, w_ml=w, bump=bump, sa_ml=sa_ml, h_ml=h[..., 0], ct_f=tf)


@dataclass
class OceanIce:
    """Noise-free state of one deployment (nodes: hourly instants; intervals between)."""

    node_time: np.ndarray
    heat_J_m2: np.ndarray       # H at nodes (stepped)
    excess_K: np.ndarray        # mixed-layer excess over surface freezing, nodes
    nstm_amp_K: np.ndarray      # NSTM amplitude, nodes
    z_bottom_m: np.ndarray      # ice bottom in the string frame, nodes
    z_ice_top_m: np.ndarray
    z_snow_top_m: np.ndarray
    draft_m: np.ndarray
    t_ml_degC: np.ndarray       # in situ, nodes
    t_freeze_degC: np.ndarray   # in situ freezing at the ice base, nodes
    t_top_degC: np.ndarray      # ice-surface temperature, nodes
    t_air_degC: np.ndarray
    sw_W_m2: np.ndarray         # intervals
    f_ow: np.ndarray            # intervals (truth radius)
    f_w_W_m2: np.ndarray
    f_c_W_m2: np.ndarray
    q_in_W_m2: np.ndarray
    u_star_m_s: np.ndarray


def _surface(sc: Scenario, dep: Deployment, t_days_onset, rng):
    """Prescribed snow and ice-top positions in the string frame, and temperatures."""
    dt_days = np.diff(t_days_onset, prepend=t_days_onset[0])
    melt_on = t_days_onset > 0
    snow_rate = 0.02  # m per day once melt starts; scenario parameter
    snow = np.clip(dep.snow_m - np.cumsum(np.where(melt_on, snow_rate * dt_days, 0.0)), 0, None)
    snow_gone = snow <= 0
    fade = np.clip((100.0 - t_days_onset) / 20.0, 0.0, 1.0)  # surface melt stops at freeze-up
    top_melt = np.cumsum(np.where(melt_on & snow_gone, dep.surface_melt_m_day * fade * dt_days, 0))
    if dep.reference == "initial snow surface":
        z_st0, z_it0 = 0.0, dep.snow_m
    else:
        z_st0, z_it0 = -dep.snow_m, 0.0
    z_it = z_it0 + top_melt
    z_st = np.where(snow_gone, z_it, z_st0 + (dep.snow_m - snow))
    warm = _smoothstep((t_days_onset + 20.0) / 30.0)
    t_top = -4.0 + (4.0 - 0.1) * warm
    hours = np.arange(t_days_onset.size)
    diurnal = np.cos(2 * np.pi * hours / 24.0 + rng.uniform(0, 2 * np.pi))
    t_air = -6.0 + 6.5 * warm + (1.5 - 0.8 * warm) * diurnal + np.interp(
        hours / 24.0, np.arange(hours.size // 24 + 2), rng.normal(0, 0.8, hours.size // 24 + 2))
    return z_st, z_it, t_top, t_air


def simulate(sc: Scenario, dep: Deployment, lat_nodes, lon_nodes, speed_m_s, f_ow, sw_W_m2
             ) -> OceanIce:
    """Step the mixed layer, its heat content and the ice over the simulation period.

    Parameters
    ----------
    lat_nodes, lon_nodes : (n + 1,) positions at the hourly instants.
    speed_m_s, f_ow, sw_W_m2 : (n,) interval values (drift speed, open-water fraction at
        the truth radius, interval-mean downwelling shortwave).
    """
    rng = rng_for(sc.seed, "ocean", sc.hemisphere, dep.deployment_id)
    node_time = sc.hours
    n = node_time.size - 1
    dt = 3600.0
    td = (node_time - sc.melt_onset) / np.timedelta64(1, "D")
    p = np.arange(P_TOP_DBAR, TRUTH_Z2_M + 4.0)
    tpl = template(dep, td, p, lat_nodes)
    zero = np.zeros(n + 1)
    z0 = -gsw.z_from_p(p[0], lat_nodes)
    tf = tpl.ct_f
    h_bg = heat_content(tpl.sa, tpl.ct_bg, p, lat_nodes, z0, ct_freezing=tf)
    b_e = heat_content(tpl.sa, tpl.ct_bg + tpl.w_ml, p, lat_nodes, z0, ct_freezing=tf) - h_bg
    b_a = heat_content(tpl.sa, tpl.ct_bg + tpl.bump, p, lat_nodes, z0, ct_freezing=tf) - h_bg
    rho0 = gsw.rho(tpl.sa[:, 0], tpl.ct_bg[:, 0], p[0])
    a0bg = tpl.ct_bg[:, 0] - tf[:, 0]
    tf_surface = gsw.CT_freezing(tpl.sa_ml, 0.0, SATURATION_FRACTION)

    z_st, z_it, t_top, t_air = _surface(sc, dep, td, rng)
    h_snow = np.clip(z_it - z_st, 0, None)
    u_star = np.sqrt(DRAG_COEFFICIENT) * np.asarray(speed_m_s, float)
    f = np.asarray(f_ow, float)
    sw = np.asarray(sw_W_m2, float)
    q_in = (1.0 - ALBEDO_OPEN_WATER) * f * sw + dep.transmittance * (1.0 - f) * sw

    heat = zero.copy()
    exc = zero.copy()
    amp = zero.copy()
    zb = zero.copy()
    drf = zero.copy()
    t_fb = zero.copy()
    fw = np.zeros(n)
    fc = np.zeros(n)
    t_top_eff = t_top.copy()
    e_n = 0.0
    zb[0] = z_it[0] + dep.ice_m
    e0 = 0.03 if td[0] < 20 else 0.08
    cp = CP0_J_KG_K
    for k in range(n + 1):
        h_ice = max(zb[k] - z_it[k], 0.3)  # never melts through in the scenario
        drf[k] = draft_m(h_ice, h_snow[k], rho0[k])
        ext = cp * rho0[k] * (z0[k] - drf[k])
        amp[k] = e_n / b_a[k] if b_a[k] > 0 else 0.0
        if k == 0:
            exc[0] = e0
            heat[0] = h_bg[0] + e0 * b_e[0] + ext * (a0bg[0] + e0)
        else:
            exc[k] = (heat[k] - h_bg[k] - amp[k] * b_a[k] - ext * a0bg[k]) / (b_e[k] + ext)
        t_fb[k] = gsw.t_freezing(tpl.sa_ml[k], drf[k], SATURATION_FRACTION)
        # ice-surface temperature seen by the linear ice profile: the difference to the
        # base is bounded by ICE_GRADIENT_MAX * h (summer ice is nearly isothermal)
        d_t = min(max(t_top[k] - t_fb[k], -ICE_GRADIENT_MAX_K_M * h_ice),
                  ICE_GRADIENT_MAX_K_M * h_ice)
        t_top_eff[k] = t_fb[k] + d_t
        if k == n:
            break
        fw[k] = RHO0_KG_M3 * cp * BULK_HEAT_EXCHANGE_CH * u_star[k] * max(exc[k], 0.0)
        fc[k] = -K_ICE_W_M_K * (t_fb[k] - t_top_eff[k]) / h_ice
        heat[k + 1] = heat[k] + (q_in[k] - (1.0 - f[k]) * fw[k]) * dt
        e_n += SOLAR_NSTM_SHARE * q_in[k] * dt
        zb[k + 1] = zb[k] - (fw[k] + fc[k]) / (RHO_ICE_KG_M3 * LATENT_HEAT_FUSION_J_KG) * dt
    ct_ml = tf_surface + exc
    t_ml = gsw.t_from_CT(tpl.sa_ml, ct_ml, drf + 0.5)
    return OceanIce(node_time=node_time, heat_J_m2=heat, excess_K=exc, nstm_amp_K=amp,
                    z_bottom_m=zb, z_ice_top_m=z_it, z_snow_top_m=z_st, draft_m=drf,
                    t_ml_degC=t_ml, t_freeze_degC=t_fb, t_top_degC=t_top_eff, t_air_degC=t_air,
                    sw_W_m2=sw, f_ow=f, f_w_W_m2=fw, f_c_W_m2=fc, q_in_W_m2=q_in,
                    u_star_m_s=u_star)


def true_profiles(sc: Scenario, dep: Deployment, oi: OceanIce, node_idx, lat_deg, lon_deg,
                  p_dbar):
    """Noise-free casts at the given nodes whose heat content equals the stepped H.

    Returns
    -------
    dict
        ``sa``, ``ct`` (profile, level), ``t`` in situ ITS-90 degC, ``sp`` practical
        salinity, ``heat`` (J m-2 recomputed from the cast) and ``draft``.
    """
    node_idx = np.asarray(node_idx)
    td = (oi.node_time[node_idx] - sc.melt_onset) / np.timedelta64(1, "D")
    lat = np.asarray(lat_deg, float)
    tpl = template(dep, td, p_dbar, lat)
    exc = oi.excess_K[node_idx].copy()
    amp = oi.nstm_amp_K[node_idx][:, None]
    target = oi.heat_J_m2[node_idx]
    h_ice = oi.z_bottom_m[node_idx] - oi.z_ice_top_m[node_idx]
    h_snow = np.clip(oi.z_ice_top_m[node_idx] - oi.z_snow_top_m[node_idx], 0, None)
    p = np.asarray(p_dbar, float)
    nz = min(p.size, int(np.searchsorted(p, TRUTH_Z2_M * 1.02 + 2.0)) + 1)  # levels to z2
    sa_z, w_z, b_z, bg_z = tpl.sa[:, :nz], tpl.w_ml[:, :nz], tpl.bump[:, :nz], tpl.ct_bg[:, :nz]
    tf_z = tpl.ct_f[:, :nz]
    for _ in range(3):
        ct = bg_z + exc[:, None] * w_z + amp * b_z
        rho_w = gsw.rho(sa_z[:, 0], ct[:, 0], p[0])
        drf = draft_m(h_ice, h_snow, rho_w)
        heat = heat_content(sa_z, ct, p[:nz], lat, drf, ct_freezing=tf_z)
        slope = (heat_content(sa_z, ct + w_z, p[:nz], lat, drf, ct_freezing=tf_z) - heat)
        exc = exc + (target - heat) / slope
    ct = tpl.ct_bg + exc[:, None] * tpl.w_ml + amp * tpl.bump
    rho_w = gsw.rho(tpl.sa[:, 0], ct[:, 0], p[0])
    drf = draft_m(h_ice, h_snow, rho_w)
    heat = heat_content(sa_z, ct[:, :nz], p[:nz], lat, drf, ct_freezing=tf_z)
    t = gsw.t_from_CT(tpl.sa, ct, p)
    sp = gsw.SP_from_SA(tpl.sa, p, np.asarray(lon_deg, float)[:, None], lat[:, None])
    return {"sa": tpl.sa, "ct": ct, "t": t, "sp": sp, "heat": heat, "draft": drf}
