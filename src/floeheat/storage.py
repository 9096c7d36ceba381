"""Upper-ocean heat storage from under-ice CTD profiles (science.md, "Terms and signs",
"Integration depth z2").

H = cp0 * integral from the ice base to z2 of rho (Theta - Theta_f(S_A, p)) dz, with
TEOS-10 conservative temperature Theta and freezing conservative temperature Theta_f;
the heat storage change is Q_st(t) = H(t) - H(t0).

All functions take the canonical profiles Dataset of the reader layer (dims
``(profile, level)``; ``pressure`` [dbar], ``temperature`` [degC, in situ],
``salinity`` [1, practical]; coords ``time``, ``latitude``, ``longitude`` per profile)
or arrays derived from it. Depth is positive down, in metres below the sea surface.
"""

from __future__ import annotations

import gsw
import numpy as np
import xarray as xr

from floeheat import constants as C

__all__ = [
    "Z2_SENSITIVITY_OFFSET_M",
    "seawater_properties",
    "threshold_depth",
    "isopycnal_depth",
    "integration_depth",
    "isostatic_draft",
    "heat_content",
    "storage_change",
    "heat_storage",
    "surface_freezing_temperature",
]

#: Offset by which z2 is moved up and down for the sensitivity of Q_st (science.md,
#: "Integration depth z2"). Common practice, no source; equals config
#: ``storage.sensitivity_offset_m``.
Z2_SENSITIVITY_OFFSET_M = 5.0


def _profile_da(values, like: xr.DataArray, name: str, units: str, long_name: str, **attrs):
    da = xr.DataArray(values, dims=like.dims, coords=like.coords, name=name)
    da.attrs.update(units=units, long_name=long_name, **attrs)
    return da


def seawater_properties(
    profiles: xr.Dataset, saturation_fraction: float = C.SATURATION_FRACTION
) -> xr.Dataset:
    """TEOS-10 properties of every sample of the canonical profiles Dataset.

    Parameters
    ----------
    profiles : xarray.Dataset
        Canonical profiles: ``pressure`` [dbar], ``temperature`` [degC, in situ, ITS-90],
        ``salinity`` [1, practical], dims ``(profile, level)``; ``latitude`` and
        ``longitude`` [degrees] per profile.
    saturation_fraction : float, optional
        Air saturation of the water for the freezing temperature, in [0, 1]
        (default ``constants.SATURATION_FRACTION``).

    Returns
    -------
    xarray.Dataset
        Dims ``(profile, level)``: ``absolute_salinity`` [g kg-1] (gsw.SA_from_SP at the
        profile's position), ``conservative_temperature`` [degC], ``freezing_ct`` [degC]
        (gsw.CT_freezing), ``depth`` [m, positive down] (-gsw.z_from_p),
        ``potential_density`` [kg m-3] (gsw.rho at 0 dbar), ``density`` [kg m-3] (in situ),
        plus ``pressure`` [dbar]. NaN where any input is NaN.

    Examples
    --------
    >>> ds = xr.Dataset(
    ...     {"pressure": (("profile", "level"), [[0.0, 300.0]]),
    ...      "temperature": (("profile", "level"), [[-1.6, 0.5]]),
    ...      "salinity": (("profile", "level"), [[30.0, 34.8]])},
    ...     coords={"latitude": ("profile", [75.0]), "longitude": ("profile", [-150.0])})
    >>> p = seawater_properties(ds)
    >>> round(float(p.absolute_salinity[0, 0]), 6)
    30.144339
    """
    if not 0.0 <= saturation_fraction <= 1.0:
        raise ValueError(f"saturation_fraction must lie in [0, 1], got {saturation_fraction}")
    p = profiles["pressure"]
    t = np.asarray(profiles["temperature"].values, dtype=float)
    sp = np.asarray(profiles["salinity"].values, dtype=float)
    pv = np.asarray(p.values, dtype=float)
    lat, lon = xr.broadcast(profiles["latitude"], profiles["longitude"], p)[:2]
    lat = np.asarray(lat.values, dtype=float)
    lon = np.asarray(lon.values, dtype=float)
    sa = gsw.SA_from_SP(sp, pv, lon, lat)
    ct = gsw.CT_from_t(sa, t, pv)
    ctf = gsw.CT_freezing(sa, pv, saturation_fraction)
    depth = -gsw.z_from_p(pv, lat)
    out = xr.Dataset(
        {
            "absolute_salinity": _profile_da(
                sa, p, "absolute_salinity", "g kg-1", "absolute salinity (TEOS-10)",
                standard_name="sea_water_absolute_salinity"),
            "conservative_temperature": _profile_da(
                ct, p, "conservative_temperature", "degC", "conservative temperature (TEOS-10)",
                standard_name="sea_water_conservative_temperature"),
            "freezing_ct": _profile_da(
                ctf, p, "freezing_ct", "degC",
                "freezing conservative temperature (TEOS-10)",
                saturation_fraction=saturation_fraction),
            "depth": _profile_da(depth, p, "depth", "m", "depth below sea surface",
                                 positive="down", standard_name="depth"),
            "potential_density": _profile_da(
                gsw.rho(sa, ct, 0.0), p, "potential_density", "kg m-3",
                "potential density referenced to 0 dbar",
                standard_name="sea_water_potential_density"),
            "density": _profile_da(gsw.rho(sa, ct, pv), p, "density", "kg m-3",
                                   "in-situ density", standard_name="sea_water_density"),
            "pressure": p,
        }
    )
    return out


def _valid_rows(depth: np.ndarray, *others: np.ndarray):
    """Yield (index, depth, others...) of finite samples per profile, sorted by depth."""
    ok = np.isfinite(depth)
    for o in others:
        ok &= np.isfinite(o)
    for i in range(depth.shape[0]):
        m = ok[i]
        z = depth[i, m]
        order = np.argsort(z, kind="stable")
        yield (i, z[order], *(o[i, m][order] for o in others))


def _first_crossing(z: np.ndarray, v: np.ndarray, level: float) -> float:
    """Depth where v first exceeds level going down, linear between samples; NaN if never."""
    above = np.nonzero(v > level)[0]
    if above.size == 0:
        return np.nan
    k = int(above[0])
    if k == 0:
        return float(z[0])
    z0, z1, v0, v1 = z[k - 1], z[k], v[k - 1], v[k]
    return float(z0 + (level - v0) * (z1 - z0) / (v1 - v0))


def threshold_depth(
    depth_m: xr.DataArray,
    potential_density_kg_m3: xr.DataArray,
    delta_sigma_kg_m3: float = C.DENSITY_THRESHOLD_KG_M3,
) -> xr.DataArray:
    """Per-profile density-threshold depth.

    The first depth where potential density exceeds its value at the shallowest valid
    sample by ``delta_sigma_kg_m3``, found by linear interpolation between the last
    sample below the threshold and the first above it.

    Parameters
    ----------
    depth_m, potential_density_kg_m3 : xarray.DataArray
        Dims ``(profile, level)``; depth [m, positive down], potential density [kg m-3].
    delta_sigma_kg_m3 : float, optional
        Density step [kg m-3], > 0 (default ``constants.DENSITY_THRESHOLD_KG_M3``).

    Returns
    -------
    xarray.DataArray
        Dim ``profile`` [m]; NaN where the profile never exceeds the threshold.

    Examples
    --------
    >>> z = xr.DataArray([[1.0, 10.0, 20.0]], dims=("profile", "level"))
    >>> rho = xr.DataArray([[1024.0, 1024.05, 1024.25]], dims=("profile", "level"))
    >>> round(float(threshold_depth(z, rho)[0]), 6)
    12.5
    """
    if delta_sigma_kg_m3 <= 0:
        raise ValueError("delta_sigma_kg_m3 must be > 0")
    z = np.asarray(depth_m.transpose("profile", "level").values, dtype=float)
    s = np.asarray(potential_density_kg_m3.transpose("profile", "level").values, dtype=float)
    out = np.full(z.shape[0], np.nan)
    for i, zi, si in _valid_rows(z, s):
        if zi.size:
            out[i] = _first_crossing(zi, si, si[0] + delta_sigma_kg_m3)
    return xr.DataArray(
        out, dims=("profile",), coords={k: v for k, v in depth_m.coords.items()
                                        if v.dims == ("profile",)},
        name="z2_profile",
        attrs={"units": "m", "positive": "down",
               "long_name": "per-profile density-threshold depth",
               "delta_sigma_kg_m3": delta_sigma_kg_m3},
    )


def isopycnal_depth(
    depth_m: xr.DataArray, potential_density_kg_m3: xr.DataArray, sigma0_kg_m3: float
) -> xr.DataArray:
    """Per-profile depth of a potential-density anomaly surface.

    Parameters
    ----------
    depth_m, potential_density_kg_m3 : xarray.DataArray
        Dims ``(profile, level)``; depth [m, positive down], potential density [kg m-3].
    sigma0_kg_m3 : float
        Potential density anomaly (potential density - 1000) of the surface [kg m-3].

    Returns
    -------
    xarray.DataArray
        Dim ``profile`` [m]: the first depth (going down) where potential density
        exceeds 1000 + sigma0, linear between samples; the shallowest sample's depth when
        it already does; NaN when the profile never reaches it.

    Examples
    --------
    >>> z = xr.DataArray([[0.0, 10.0, 20.0]], dims=("profile", "level"))
    >>> rho = xr.DataArray([[1024.0, 1025.0, 1027.0]], dims=("profile", "level"))
    >>> float(isopycnal_depth(z, rho, 26.0)[0])
    15.0
    """
    z = np.asarray(depth_m.transpose("profile", "level").values, dtype=float)
    s = np.asarray(potential_density_kg_m3.transpose("profile", "level").values, dtype=float)
    out = np.full(z.shape[0], np.nan)
    for i, zi, si in _valid_rows(z, s):
        if zi.size:
            out[i] = _first_crossing(zi, si, 1000.0 + sigma0_kg_m3)
    return xr.DataArray(
        out, dims=("profile",), coords={k: v for k, v in depth_m.coords.items()
                                        if v.dims == ("profile",)},
        name="z2_profile",
        attrs={"units": "m", "positive": "down",
               "long_name": "per-profile depth of the isopycnal", "sigma0_kg_m3": sigma0_kg_m3},
    )


def integration_depth(
    properties: xr.Dataset,
    method: str = "threshold",
    *,
    z2_m: float | None = None,
    sigma0_kg_m3: float | None = None,
    delta_sigma_kg_m3: float = C.DENSITY_THRESHOLD_KG_M3,
    margin_m: float = C.Z2_MARGIN_M,
) -> xr.Dataset:
    """The window's integration depth z2 (one bound, held fixed) and per-profile depths.

    Pass the profiles of one analysis window.

    Parameters
    ----------
    properties : xarray.Dataset
        Output of :func:`seawater_properties` (needs ``depth``, ``potential_density``).
    method : {"threshold", "fixed", "isopycnal"}
        ``threshold`` (default): the deepest per-profile density-threshold depth over the
        window plus ``margin_m``. ``fixed``: ``z2_m``. ``isopycnal``: the deepest
        per-profile depth of ``sigma0_kg_m3`` over the window (the deepest, so that the
        bound contains the layer above the isopycnal at every profile; no margin).
    z2_m : float, optional
        Depth for ``fixed`` [m, positive down].
    sigma0_kg_m3 : float, optional
        Potential density anomaly for ``isopycnal`` [kg m-3].
    delta_sigma_kg_m3 : float, optional
        Density step for ``threshold`` [kg m-3].
    margin_m : float, optional
        Margin added below the deepest threshold depth [m] (``threshold`` only).

    Returns
    -------
    xarray.Dataset
        ``z2`` (scalar) [m] and ``z2_profile(profile)`` [m]: the per-profile
        density-threshold depths (diagnostic; the isopycnal depths for ``isopycnal``).
        ``z2`` is NaN when no profile gives a depth.

    Examples
    --------
    >>> pr = xr.Dataset({"depth": (("profile", "level"), [[1.0, 10.0, 20.0]]),
    ...                  "potential_density": (("profile", "level"),
    ...                                        [[1024.0, 1024.05, 1024.25]])})
    >>> round(float(integration_depth(pr).z2), 6)
    17.5
    >>> float(integration_depth(pr, "fixed", z2_m=30.0).z2)
    30.0
    """
    z, rho = properties["depth"], properties["potential_density"]
    if method == "isopycnal":
        if sigma0_kg_m3 is None:
            raise ValueError("method 'isopycnal' needs sigma0_kg_m3")
        per = isopycnal_depth(z, rho, sigma0_kg_m3)
    else:
        per = threshold_depth(z, rho, delta_sigma_kg_m3)
    if method == "threshold":
        z2 = float(np.nanmax(per.values)) + margin_m if np.isfinite(per.values).any() else np.nan
    elif method == "fixed":
        if z2_m is None or not np.isfinite(z2_m) or z2_m <= 0:
            raise ValueError("method 'fixed' needs a positive z2_m")
        z2 = float(z2_m)
    elif method == "isopycnal":
        z2 = float(np.nanmax(per.values)) if np.isfinite(per.values).any() else np.nan
    else:
        raise ValueError(f"method must be one of threshold, fixed, isopycnal; got {method!r}")
    return xr.Dataset(
        {
            "z2": xr.DataArray(z2, attrs={"units": "m", "positive": "down", "method": method,
                                          "long_name": "integration depth of the heat content"}),
            "z2_profile": per,
        }
    )


def isostatic_draft(
    ice_thickness_m,
    snow_thickness_m=0.0,
    rho_w_kg_m3=C.RHO_WATER_DEFAULT_KG_M3,
    rho_i_kg_m3: float = C.RHO_ICE_KG_M3,
    rho_s_kg_m3: float = C.RHO_SNOW_KG_M3,
):
    """Ice draft by isostasy: (rho_i h_i + rho_s h_s) / rho_w.

    Parameters
    ----------
    ice_thickness_m, snow_thickness_m : float or array_like
        Ice and snow thickness [m], >= 0.
    rho_w_kg_m3 : float or array_like, optional
        Seawater density [kg m-3]: the profile's surface density, or
        ``constants.RHO_WATER_DEFAULT_KG_M3`` without one.
    rho_i_kg_m3, rho_s_kg_m3 : float, optional
        Ice and snow density [kg m-3].

    Returns
    -------
    float or array_like
        Draft [m, positive down below sea level].

    Examples
    --------
    >>> round(isostatic_draft(1.5, 0.1), 6)
    1.374146
    """
    return (rho_i_kg_m3 * ice_thickness_m + rho_s_kg_m3 * snow_thickness_m) / rho_w_kg_m3


def _draft_at_profiles(draft_m, profile_time: xr.DataArray | None, n: int) -> np.ndarray:
    """Draft per profile: scalar, array (profile,), or a DataArray on ``time``."""
    on_time = isinstance(draft_m, xr.DataArray) and "time" in draft_m.dims
    if on_time and "profile" not in draft_m.dims:
        if profile_time is None:
            raise ValueError("a draft on 'time' needs profile times")
        d = draft_m.dropna("time").sortby("time")
        if d.sizes["time"] == 0:
            return np.full(n, np.nan)
        tx = d["time"].values.astype("datetime64[ns]").astype(np.int64).astype(float)
        tp = profile_time.values.astype("datetime64[ns]").astype(np.int64).astype(float)
        # linear in time, held at the first/last value beyond the string's record
        return np.interp(tp, tx, d.values.astype(float))
    return np.broadcast_to(np.asarray(draft_m, dtype=float), (n,)).copy()


def heat_content(
    properties: xr.Dataset,
    z2_m: float,
    draft_m=0.0,
    density: str = "insitu",
    rho0_kg_m3: float = C.RHO0_KG_M3,
    cp0_J_kg_K: float = C.CP0_J_KG_K,
) -> xr.Dataset:
    """Freezing-referenced heat content per profile between the ice base and z2.

    H = cp0 * integral from draft to z2 of rho (Theta - Theta_f) dz, by the trapezoid
    rule in depth over the samples between the bounds, the integrand at each bound
    interpolated linearly between the samples around it. Water above the shallowest
    valid sample is taken as mixed: it has that sample's properties up to the ice base.

    Parameters
    ----------
    properties : xarray.Dataset
        Output of :func:`seawater_properties`.
    z2_m : float
        Lower bound [m, positive down], > draft.
    draft_m : float, array_like (profile,) or xarray.DataArray on ``time``, optional
        Ice base depth below sea level [m]; a series on ``time`` (e.g. from
        :func:`isostatic_draft` at the string's times) is interpolated linearly to the
        profile times and held at its end values beyond them. Default 0.
    density : {"insitu", "constant"}
        In-situ density (gsw.rho) or the constant ``rho0_kg_m3``.
    rho0_kg_m3 : float, optional
        Density for ``density="constant"`` [kg m-3].
    cp0_J_kg_K : float, optional
        TEOS-10 cp0 [J kg-1 K-1].

    Returns
    -------
    xarray.Dataset
        Dim ``profile``: ``heat_content`` [J m-2] (NaN where the profile does not reach
        z2, has no valid sample or z2 is not below the draft), ``reaches_z2`` (bool) and
        ``draft`` [m].

    Examples
    --------
    >>> pr = xr.Dataset({
    ...     "depth": (("profile", "level"), [[5.0, 20.0]]),
    ...     "conservative_temperature": (("profile", "level"), [[-1.0, -1.0]]),
    ...     "freezing_ct": (("profile", "level"), [[-1.5, -1.5]]),
    ...     "density": (("profile", "level"), [[1025.0, 1025.0]])})
    >>> float(heat_content(pr, 10.0, 1.0, cp0_J_kg_K=4000.0).heat_content[0])
    18450000.0
    """
    if density not in ("insitu", "constant"):
        raise ValueError(f"density must be 'insitu' or 'constant', got {density!r}")
    z = np.asarray(properties["depth"].transpose("profile", "level").values, dtype=float)
    dt = np.asarray((properties["conservative_temperature"] - properties["freezing_ct"])
                    .transpose("profile", "level").values, dtype=float)
    if density == "insitu":
        rho = np.asarray(properties["density"].transpose("profile", "level").values, dtype=float)
    else:
        rho = np.full_like(z, rho0_kg_m3)
    n = z.shape[0]
    ptime = properties["time"] if "time" in properties.coords else None
    draft = _draft_at_profiles(draft_m, ptime, n)
    h = np.full(n, np.nan)
    reaches = np.zeros(n, dtype=bool)
    for i, zi, fi in _valid_rows(z, rho * dt):
        top = draft[i]
        if zi.size == 0 or not np.isfinite(top) or not np.isfinite(z2_m):
            continue
        if zi[-1] < z2_m:
            continue
        reaches[i] = True
        if z2_m <= top:  # the bound lies inside the ice: no layer to count
            continue
        inner = zi[(zi > top) & (zi < z2_m)]
        nodes = np.concatenate([[top], inner, [z2_m]])
        # np.interp holds the shallowest value above the first sample: mixed water
        f = np.interp(nodes, zi, fi)
        h[i] = cp0_J_kg_K * float(np.sum(0.5 * (f[1:] + f[:-1]) * np.diff(nodes)))
    like = properties["depth"].isel(level=0, drop=True)
    coords = {k: v for k, v in like.coords.items() if v.dims == ("profile",)}
    return xr.Dataset(
        {
            "heat_content": xr.DataArray(
                h, dims=("profile",), coords=coords,
                attrs={"units": "J m-2", "z2_m": float(z2_m), "density": density,
                       "long_name": "heat content above freezing between the ice base and z2"}),
            "reaches_z2": xr.DataArray(
                reaches, dims=("profile",), coords=coords,
                attrs={"long_name": "profile reaches the integration depth z2"}),
            "draft": xr.DataArray(draft, dims=("profile",), coords=coords,
                                  attrs={"units": "m", "positive": "down",
                                         "long_name": "ice draft at the profile",
                                         "standard_name": "sea_ice_draft"}),
        }
    )


def storage_change(heat_content_J_m2: xr.DataArray) -> xr.DataArray:
    """Heat storage change Q_st = H(t) - H(t0), t0 = the first profile with a finite H.

    Parameters
    ----------
    heat_content_J_m2 : xarray.DataArray
        Dim ``profile`` (by time) [J m-2].

    Returns
    -------
    xarray.DataArray
        Same dims [J m-2]; NaN where H is NaN.

    Examples
    --------
    >>> storage_change(xr.DataArray([np.nan, 2.0, 5.0], dims="profile")).values
    array([nan,  0.,  3.])
    """
    v = heat_content_J_m2.values
    ok = np.isfinite(v)
    ref = v[ok][0] if ok.any() else np.nan
    out = heat_content_J_m2 - ref
    out.attrs = {"units": "J m-2", "long_name": "heat storage change since the first profile"}
    return out


def _surface_density(properties: xr.Dataset) -> np.ndarray:
    """In-situ density at each profile's shallowest valid sample [kg m-3]; the default
    ``constants.RHO_WATER_DEFAULT_KG_M3`` where a profile has none."""
    z = np.asarray(properties["depth"].transpose("profile", "level").values, dtype=float)
    r = np.asarray(properties["density"].transpose("profile", "level").values, dtype=float)
    out = np.full(z.shape[0], C.RHO_WATER_DEFAULT_KG_M3)
    for i, _zi, ri in _valid_rows(z, r):
        if ri.size:
            out[i] = ri[0]
    return out


def heat_storage(
    profiles: xr.Dataset,
    draft_m=0.0,
    method: str = "threshold",
    *,
    ice_thickness_m=None,
    snow_thickness_m=0.0,
    z2_m: float | None = None,
    sigma0_kg_m3: float | None = None,
    delta_sigma_kg_m3: float = C.DENSITY_THRESHOLD_KG_M3,
    margin_m: float = C.Z2_MARGIN_M,
    offset_m: float = Z2_SENSITIVITY_OFFSET_M,
    density: str = "insitu",
    saturation_fraction: float = C.SATURATION_FRACTION,
) -> xr.Dataset:
    """Heat content, its change and its sensitivity to z2 for one window's profiles.

    Parameters
    ----------
    profiles : xarray.Dataset
        Canonical profiles of the analysis window.
    draft_m : float, array_like or xarray.DataArray on ``time``
        Ice base depth [m] (see :func:`heat_content`); ignored when
        ``ice_thickness_m`` is given.
    ice_thickness_m, snow_thickness_m : float, array_like or xarray.DataArray on ``time``
        Ice and snow thickness from the string [m]; when given, the draft at each profile
        is :func:`isostatic_draft` with rho_w = the profile's in-situ density at its
        shallowest valid sample (``constants.RHO_WATER_DEFAULT_KG_M3`` without one).
    method, z2_m, sigma0_kg_m3, delta_sigma_kg_m3, margin_m
        The bound z2 (see :func:`integration_depth`).
    offset_m : float, optional
        The sensitivity offset [m], > 0: ``*_z2_lo`` uses z2 - offset (the bound moved
        up), ``*_z2_hi`` uses z2 + offset (moved down).
    density : {"insitu", "constant"}
    saturation_fraction : float in [0, 1]

    Returns
    -------
    xarray.Dataset
        Dim ``profile`` with coord ``time``: ``heat_content``, ``heat_content_z2_lo``,
        ``heat_content_z2_hi``, ``q_st``, ``q_st_z2_lo``, ``q_st_z2_hi`` [J m-2],
        ``reaches_z2`` (bool), ``draft`` [m], ``z2_profile`` [m] (diagnostic); scalar
        ``z2`` [m]. Profiles that do not reach a bound give NaN there.

    Examples
    --------
    >>> ds = xr.Dataset(
    ...     {"pressure": (("profile", "level"), [[2.0, 30.0, 60.0]] * 2),
    ...      "temperature": (("profile", "level"), [[-1.5, -1.6, -1.6], [-1.4, -1.6, -1.6]]),
    ...      "salinity": (("profile", "level"), [[28.0, 31.0, 32.0]] * 2)},
    ...     coords={"latitude": ("profile", [80.0, 80.0]),
    ...             "longitude": ("profile", [0.0, 0.0]),
    ...             "time": ("profile", np.array(["2020-06-01", "2020-06-02"],
    ...                                           dtype="datetime64[ns]"))})
    >>> out = heat_storage(ds, method="fixed", z2_m=40.0)
    >>> bool(out.q_st[1] > 0)
    True
    """
    if offset_m <= 0:
        raise ValueError("offset_m must be > 0")
    props = seawater_properties(profiles, saturation_fraction)
    zz = integration_depth(props, method, z2_m=z2_m, sigma0_kg_m3=sigma0_kg_m3,
                           delta_sigma_kg_m3=delta_sigma_kg_m3, margin_m=margin_m)
    z2 = float(zz.z2)
    if ice_thickness_m is not None:
        n = props.sizes["profile"]
        t = props["time"] if "time" in props.coords else None
        draft_m = isostatic_draft(_draft_at_profiles(ice_thickness_m, t, n),
                                  _draft_at_profiles(snow_thickness_m, t, n),
                                  _surface_density(props))
    out = heat_content(props, z2, draft_m, density)
    for tag, z in (("_z2_lo", z2 - offset_m), ("_z2_hi", z2 + offset_m)):
        hc = heat_content(props, z, draft_m, density).heat_content
        out["heat_content" + tag] = hc
    for tag in ("", "_z2_lo", "_z2_hi"):
        q = storage_change(out["heat_content" + tag])
        q.attrs["long_name"] = f"heat storage change{' (z2 moved ' + tag[-2:] + ')' if tag else ''}"
        out["q_st" + tag] = q
    out["z2_profile"] = zz.z2_profile
    out["z2"] = zz.z2
    out.attrs.update(z2_method=method, sensitivity_offset_m=offset_m, density=density,
                     saturation_fraction=saturation_fraction)
    return out


def surface_freezing_temperature(profiles: xr.Dataset,
                                 saturation_fraction: float = C.SATURATION_FRACTION
                                 ) -> xr.DataArray:
    """In-situ freezing temperature of each profile's shallowest valid sample.

    The ice base sits at the freezing point of the water touching it; this gives that
    temperature from the profiler, for the thermistor-string interface pick.

    Parameters
    ----------
    profiles : xarray.Dataset
        Canonical profiles (``pressure`` [dbar], ``temperature`` [degC], ``salinity``
        [1], per-profile ``time``, ``latitude``, ``longitude``).
    saturation_fraction : float in [0, 1]
        Air saturation of the water (gsw.t_freezing).

    Returns
    -------
    xarray.DataArray
        ``t_freezing(time)`` [degC, ITS-90], NaN for profiles without a valid sample.

    Examples
    --------
    >>> ds = xr.Dataset({"pressure": (("profile", "level"), [[2.0, 10.0]]),
    ...                  "temperature": (("profile", "level"), [[-1.6, -1.6]]),
    ...                  "salinity": (("profile", "level"), [[30.0, 31.0]])},
    ...                 coords={"time": ("profile", np.array(["2024-07-01"], "datetime64[ns]")),
    ...                         "latitude": ("profile", [85.0]),
    ...                         "longitude": ("profile", [10.0])})
    >>> round(float(surface_freezing_temperature(ds)[0]), 3)
    -1.639
    """
    p = np.asarray(profiles["pressure"].values, dtype=float)
    sp = np.asarray(profiles["salinity"].values, dtype=float)
    ok = np.isfinite(p) & np.isfinite(sp)
    first = np.where(ok.any(axis=1), np.argmax(ok, axis=1), 0)
    rows = np.arange(p.shape[0])
    p0 = np.where(ok.any(axis=1), p[rows, first], np.nan)
    sp0 = np.where(ok.any(axis=1), sp[rows, first], np.nan)
    lat = np.asarray(profiles["latitude"].values, dtype=float)
    lon = np.asarray(profiles["longitude"].values, dtype=float)
    sa = gsw.SA_from_SP(sp0, p0, lon, lat)
    tf = gsw.t_freezing(sa, p0, saturation_fraction)
    return xr.DataArray(np.asarray(tf, dtype=float), dims=("time",),
                        coords={"time": profiles["time"].values},
                        attrs={"units": "degC", "long_name": "in-situ freezing temperature "
                               "of the shallowest sample",
                               "standard_name": "freezing_temperature_of_sea_water"})
