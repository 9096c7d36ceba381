"""Monte Carlo ensemble of a deployment's budget: intervals and their attribution.

The deterministic budget (:func:`floeheat.budget.assemble_budget`) stays the central
value. The ensemble perturbs what a practitioner would vary, jointly, without rerunning
the in-situ chain: every factor acts on the budget's own series in vectorised form.

========================  ==================================================================
factor                    how it acts on the budget
========================  ==================================================================
``albedo_ow``             q_ow scales with (1 - alpha_ow)
``rho_i``                 q_b scales with rho_i (melt energy rho_i L)
``latent_heat``           q_b scales with L
``k_ice``                 q_c scales with k_i (constant form), or with k0 + beta S / T at the
                          fit band's temperature (salinity form: k0 and bulk salinity drawn)
``storage_bound``         Q_st is interpolated between the central z2 and the stored
                          sensitivity series (z2 moved up / down by the offset)
``ice_bottom_pick``       an error of the bottom pick at each end of the window: Q_b shifts
                          by e (eps_0 - eps_1), spread evenly over the window's time
``shortwave_bias``        a multiplicative bias b of F_sw, in numerator and denominator
``coverage_threshold``    radar: scenes are refiltered by their coverage
``f_ow_sampling``         radar: each scene's f_ow carries a sampling error (binomial over
                          independent patches of a correlation length), between scenes
========================  ==================================================================

Draws are seeded. Factors that are constants of nature or of a shared choice (all but
``ice_bottom_pick`` and ``f_ow_sampling``) are drawn from the run's seed alone, so member
``m`` holds the same albedo, densities and bias in every deployment: systematic errors
then stay systematic when members are combined across deployments (climatology). The
per-deployment factors are drawn from the seed and the deployment ID.

Attribution: each factor is also varied alone (the others at their central values, the
same draws); its variance share is its one-at-a-time variance of T_season over the sum
of all factors' one-at-a-time variances.
"""

from __future__ import annotations

import zlib
from collections.abc import Callable, Mapping

import numpy as np
import xarray as xr

from floeheat import constants as C
from floeheat.climatology import replicate_medians

__all__ = [
    "FACTORS",
    "GLOBAL_FACTORS",
    "draw_factors",
    "scene_noise",
    "sampling_sd",
    "radar_member_fractions",
    "conduction_ratio",
    "budget_members",
    "interval",
    "member_variance",
    "variance_shares",
    "shares_of_variances",
    "bootstrap_median_with_members",
]

#: Ensemble factors, in a fixed order (each draws from its own seeded stream).
FACTORS = ("albedo_ow", "rho_i", "latent_heat", "k_ice", "storage_bound",
           "ice_bottom_pick", "shortwave_bias", "coverage_threshold", "f_ow_sampling")
#: Factors shared by all deployments of a run (drawn from the run's seed alone).
GLOBAL_FACTORS = ("albedo_ow", "rho_i", "latent_heat", "k_ice", "storage_bound",
                  "shortwave_bias", "coverage_threshold")

_MJ = 1.0e-6
_NS = 1.0e-9


def _stream(seed: int, factor: str, deployment_id: str | None) -> np.random.Generator:
    key = [int(seed), FACTORS.index(factor)]
    if deployment_id is not None:
        key.append(zlib.crc32(str(deployment_id).encode()))
    return np.random.default_rng(np.random.SeedSequence(key))


def _draw(spec: Mapping, rng: np.random.Generator, members: int) -> np.ndarray:
    """Standardised draws: normal -> N(0, spread); uniform -> U(-spread, spread)."""
    dist = spec.get("dist", "none")
    spread = float(spec.get("spread", 0.0))
    if dist == "normal":
        return rng.normal(0.0, 1.0, members) * spread
    if dist == "uniform":
        return rng.uniform(-1.0, 1.0, members) * spread
    if dist == "none":
        return np.zeros(members)
    raise ValueError(f"distribution must be 'normal', 'uniform' or 'none', got {dist!r}")


def draw_factors(spec: Mapping[str, Mapping], central: Mapping[str, float], members: int,
                 seed: int, deployment_id: str) -> xr.Dataset:
    """Draw every ensemble factor for one deployment.

    Parameters
    ----------
    spec : mapping
        Per factor name (:data:`FACTORS`): ``{"dist": "normal" | "uniform" | "none",
        "spread": float}``; spread is the standard deviation (normal) or half-width
        (uniform) in the factor's units: ``albedo_ow`` [1], ``rho_i`` [kg m-3],
        ``latent_heat`` [fraction of L], ``k_ice`` [W m-1 K-1] (with
        ``salinity_spread`` [g kg-1] for the salinity form), ``storage_bound``
        [fraction of the sensitivity offset, clipped to [-1, 1]], ``ice_bottom_pick``
        [sensor spacings, each end], ``shortwave_bias`` [fraction of F_sw],
        ``coverage_threshold`` [1]; ``f_ow_sampling`` has ``correlation_length_m``.
        A factor missing from ``spec`` or with ``dist: none`` is not varied.
    central : mapping
        Central values: ``albedo_ow``, ``rho_i_kg_m3``, ``latent_heat_J_kg``,
        ``k_ice_W_m_K``, ``bulk_salinity``, ``coverage_threshold``,
        ``sensor_spacing_m``.
    members : int
        Ensemble size (> 0).
    seed : int
        The run's ensemble seed.
    deployment_id : str
        Seeds the per-deployment factors.

    Returns
    -------
    xarray.Dataset
        On ``member``: ``albedo_ow`` [1], ``rho_i_kg_m3``, ``latent_heat_J_kg``,
        ``k_ice_W_m_K``, ``bulk_salinity`` [g kg-1], ``storage_bound`` [-1..1],
        ``pick_start_m``, ``pick_end_m`` [m, positive down], ``shortwave_bias`` [1,
        multiplier], ``coverage_threshold`` [1]. Attr ``varied``: the factors drawn.

    Examples
    --------
    >>> d = draw_factors({"albedo_ow": {"dist": "normal", "spread": 0.007}},
    ...                  {"albedo_ow": 0.066}, 500, 1, "B1")
    >>> round(float(d.albedo_ow.mean()), 2), d.attrs["varied"]
    (0.07, 'albedo_ow')
    """
    if members < 1:
        raise ValueError(f"members must be at least 1, got {members}")
    varied = [f for f in FACTORS if spec.get(f, {}).get("dist", "none") != "none"]

    def z(factor):
        rng = _stream(seed, factor, None if factor in GLOBAL_FACTORS else deployment_id)
        return _draw(spec.get(factor, {}), rng, members)

    k_spec = spec.get("k_ice", {})
    rng_k = _stream(seed, "k_ice", None)
    dk = _draw(k_spec, rng_k, members)
    dsal = _draw({"dist": k_spec.get("dist", "none"),
                  "spread": k_spec.get("salinity_spread", 0.0)}, rng_k, members)
    spacing = float(central.get("sensor_spacing_m", C.ICE_SENSOR_SPACING_DEFAULT_M))
    pick = spec.get("ice_bottom_pick", {})
    rng_pick = _stream(seed, "ice_bottom_pick", deployment_id)
    p0, p1 = (_draw(pick, rng_pick, members) * spacing for _ in range(2))
    out = xr.Dataset(
        {
            "albedo_ow": ("member", np.clip(central.get("albedo_ow", C.ALBEDO_OPEN_WATER)
                                            + z("albedo_ow"), 0.0, 1.0)),
            "rho_i_kg_m3": ("member", central.get("rho_i_kg_m3", C.RHO_ICE_KG_M3)
                            + z("rho_i")),
            "latent_heat_J_kg": ("member", central.get("latent_heat_J_kg",
                                                       C.LATENT_HEAT_FUSION_J_KG)
                                 * (1.0 + z("latent_heat"))),
            "k_ice_W_m_K": ("member", np.maximum(central.get("k_ice_W_m_K", C.K_ICE_W_M_K)
                                                 + dk, 1e-3)),
            "bulk_salinity": ("member", np.maximum(central.get("bulk_salinity", 0.0) + dsal,
                                                   0.0)),
            "storage_bound": ("member", np.clip(z("storage_bound"), -1.0, 1.0)),
            "pick_start_m": ("member", p0),
            "pick_end_m": ("member", p1),
            "shortwave_bias": ("member", np.maximum(1.0 + z("shortwave_bias"), 0.0)),
            "coverage_threshold": ("member", np.clip(
                central.get("coverage_threshold", C.COVERAGE_THRESHOLD)
                + z("coverage_threshold"), 0.0, 1.0)),
        },
        coords={"member": np.arange(members)},
    )
    out.attrs["varied"] = " ".join(varied)
    return out


def scene_noise(members: int, n_scenes: int, seed: int, deployment_id: str) -> np.ndarray:
    """Standard-normal sampling noise per member and scene (shared across radii).

    Examples
    --------
    >>> scene_noise(3, 2, 1, "B1").shape
    (3, 2)
    """
    return _stream(seed, "f_ow_sampling", deployment_id).standard_normal((members, n_scenes))


def sampling_sd(f_ow, coverage, radius_m, correlation_length_m: float):
    """Sampling error (standard deviation) of a scene's f_ow within a circle.

    The circle's valid area pi r^2 c holds n = pi r^2 c / L^2 independent patches of the
    correlation length L; the standard error of a fraction over n independent binary
    patches is sqrt(p (1 - p) / n), with p shrunk towards 1/2 by half a patch
    (p = (f n + 1/2) / (n + 1)) so that a circle without water keeps an error.

    Parameters
    ----------
    f_ow, coverage : array_like
        Scene open-water fraction and valid coverage [1].
    radius_m : array_like
        Circle radius [m] (broadcast against ``f_ow``).
    correlation_length_m : float
        Size of an independent patch [m].

    Returns
    -------
    numpy.ndarray
        [1]; NaN where the coverage is zero or f_ow is NaN.

    Examples
    --------
    >>> round(float(sampling_sd(0.5, 1.0, 1000.0, 1000.0 * np.sqrt(np.pi) / 10.0)), 4)
    0.05
    """
    f = np.asarray(f_ow, float)
    c = np.asarray(coverage, float)
    r = np.asarray(radius_m, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        n = np.pi * r**2 * c / correlation_length_m**2
        p = (f * n + 0.5) / (n + 1.0)
        return np.where(n > 0, np.sqrt(p * (1.0 - p) / n), np.nan)


def radar_member_fractions(scene_time, n_water, n_valid, coverage, radius_m, target_time,
                           thresholds, noise=None, correlation_length_m: float =
                           C.F_OW_CORRELATION_LENGTH_M, max_gap=None) -> np.ndarray:
    """Radar f_ow(member, time, radius) with the scenes refiltered and perturbed.

    Each member keeps the scenes whose coverage reaches its threshold (and that hold a
    valid pixel), adds ``noise * sampling_sd`` to each scene's f_ow (clipped to [0, 1])
    and interpolates in time by :func:`floeheat.openwater.radar_time_series`.

    Parameters
    ----------
    scene_time : array_like of datetime64 (n_scene,)
    n_water, n_valid, coverage : array_like (n_scene, n_radius)
        Water and valid pixel counts and coverage [1] of each scene and radius.
    radius_m : array_like (n_radius,)
    target_time : array_like of datetime64 (n_time,)
    thresholds : array_like (n_member,)
        Coverage threshold of each member [1].
    noise : array_like (n_member, n_scene), optional
        Standard-normal draws (:func:`scene_noise`); None: no sampling error.
    correlation_length_m : float
    max_gap : pandas.Timedelta, optional
        As in :func:`~floeheat.openwater.radar_time_series`.

    Returns
    -------
    numpy.ndarray (n_member, n_time, n_radius)

    Examples
    --------
    >>> st = np.array(["2020-06-01", "2020-06-03"], "datetime64[ns]")
    >>> tt = np.array(["2020-06-02"], "datetime64[ns]")
    >>> out = radar_member_fractions(st, [[10], [30]], [[100], [100]], [[1.0], [0.4]],
    ...                              [2000.0], tt, [0.5, 0.3])
    >>> out[:, 0, 0].round(3).tolist()
    [0.1, 0.2]
    """
    from floeheat.openwater import MAX_SCENE_GAP, radar_series_members

    nw = np.asarray(n_water, float)
    nv = np.asarray(n_valid, float)
    cov = np.asarray(coverage, float)
    rad = np.asarray(radius_m, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        f = np.where(nv > 0, nw / nv, np.nan)
    thr = np.asarray(thresholds, float)
    keep = (nv > 0)[None] & (cov[None] >= thr[:, None, None])  # (member, scene, radius)
    if noise is None:
        values = np.where(keep, f[None], np.nan)
    else:
        sd = sampling_sd(f, cov, rad[None, :], correlation_length_m)
        fm = np.clip(f[None] + np.asarray(noise, float)[:, :, None] * sd[None], 0.0, 1.0)
        values = np.where(keep, fm, np.nan)
    gap = MAX_SCENE_GAP if max_gap is None else max_gap
    # members counting the same scenes share one interpolation
    return radar_series_members(scene_time, values, target_time, rad, gap)[0]


def conduction_ratio(k_member_W_m_K, k_central_W_m_K: float, conductivity: str = "constant",
                     salinity_member=None, salinity_central: float = 0.0,
                     t_band_degC=None, beta_W_m_ppt: float = C.K_ICE_BETA_W_M_PPT):
    """Ratio of a member's conductivity to the central one, the factor on F_c.

    Parameters
    ----------
    k_member_W_m_K : array_like (n_member,)
        k_i, or k0 of the salinity form [W m-1 K-1].
    k_central_W_m_K : float
    conductivity : {"constant", "salinity"}
    salinity_member : array_like (n_member,), optional
        Bulk salinity [g kg-1] (salinity form).
    salinity_central : float
    t_band_degC : array_like (n_time,), optional
        Fit-band temperature at the budget's interval midpoints [degC]. Without it the
        salinity form varies k0 alone (the ratio of k0).
    beta_W_m_ppt : float

    Returns
    -------
    numpy.ndarray
        (n_member,) or (n_member, n_time) [1].

    Examples
    --------
    >>> conduction_ratio([2.03, 2.233], 2.03).round(3).tolist()
    [1.0, 1.1]
    >>> float(conduction_ratio([2.03], 2.03, "salinity", [5.0], 5.0, [-5.0])[0, 0])
    1.0
    """
    k = np.asarray(k_member_W_m_K, float)
    if conductivity == "constant" or t_band_degC is None:
        return k / k_central_W_m_K
    if conductivity != "salinity":
        raise ValueError(f"conductivity must be 'constant' or 'salinity', got {conductivity!r}")
    t = np.asarray(t_band_degC, float)[None, :]
    s = np.asarray(salinity_member, float)[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        num = k[:, None] + beta_W_m_ppt * s / t
        den = k_central_W_m_K + beta_W_m_ppt * salinity_central / t
        r = np.where(t < 0, num / den, 1.0)
    return np.where(np.isfinite(r), r, 1.0)


def _window_starts(budget: xr.Dataset) -> np.ndarray:
    """Index of each window's first interval on the budget's interval axis."""
    return np.searchsorted(budget["time"].values[:-1], budget["window_start"].values,
                           side="left")


class _Static:
    """The central budget's series, as plain arrays for the member kernel, with the
    window and season sums of every term that does not depend on a member."""

    def __init__(self, budget: xr.Dataset, melt_energy_J_m3: float):
        te = budget["time"].values.astype("datetime64[ns]").astype(np.int64) * _NS
        self.dt = np.diff(te)
        self.total = float(te[-1] - te[0])
        sw = np.asarray(budget["sw_down"].values[1:], float)
        self.swdt = sw * self.dt * _MJ  # (n,) MJ m-2 for a shortwave bias of 1
        nan = np.full(te.size, np.nan)
        q_st = np.asarray(budget["q_st"].values, float) if "q_st" in budget else nan
        lo = np.asarray(budget["q_st_z2_lo"].values, float) \
            if "q_st_z2_lo" in budget else q_st
        hi = np.asarray(budget["q_st_z2_hi"].values, float) \
            if "q_st_z2_hi" in budget else q_st
        self.d_b = np.diff(budget["q_b"].values) if "q_b" in budget else nan[1:]
        self.d_c = np.diff(budget["q_c"].values) if "q_c" in budget else nan[1:]
        self.weight = str(budget.attrs.get("weight_by_ice_fraction", "True")) == "True"
        self.albedo = float(budget.attrs.get("albedo_ow", C.ALBEDO_OPEN_WATER))
        self.energy_MJ_m3 = float(melt_energy_J_m3) * _MJ
        self.first = _window_starts(budget)
        # storage is linear in the bound: Q_st = q + up (lo - q) + down (hi - q)
        to_lo, to_hi = lo - q_st, hi - q_st
        self.q_end = np.array([q_st[-1], to_lo[-1], to_hi[-1]])
        d_q = np.stack([np.diff(q_st), np.diff(to_lo), np.diff(to_hi)], axis=1)  # (n, 3)
        self.q_window = np.add.reduceat(d_q, self.first, axis=0)  # (window, 3)
        self.fm = np.asarray(budget["f_ow"].values[1:], float)  # (n, source, radius)
        # The f_ow-weighted sums as one matrix product: column k of ``self._window`` picks
        # the intervals of window k as np.add.reduceat does (a window without an interval
        # takes its first index alone), the last column the whole season.
        n, k = self.dt.size, self.first.size
        window = np.zeros((n, k + 1))
        ends = np.append(self.first[1:], n)
        for j, (a, b) in enumerate(zip(self.first, ends)):
            window[a:b if b > a else a + 1, j] = 1.0
        window[:, k] = 1.0
        self._window = window
        series = np.stack([self.swdt, self.d_b, self.dt, self.d_c])  # (4, n): a_i(t)
        missing = np.isnan(series)
        clean = np.where(missing, 0.0, series)
        self._static = clean @ window  # (4, k + 1): sum of a_i over each window, the season
        self._static_nan = (missing.astype(float) @ window) > 0
        # (n, 4 (k + 1)): a_i(t) on the columns of window, series after series
        self._weighted = (clean[:, :, None] * window[None]).transpose(1, 0, 2).reshape(n, -1)
        self.central = self.sums(self.fm, axis=0)

    def sums(self, fm: np.ndarray, axis: int) -> dict:
        """Window and season sums of the f_ow-weighted terms of f_ow with the budget's
        intervals on ``axis``: per term, (the window sums, that axis replaced by the
        window; the season sums, that axis summed). A sum holding a NaN is NaN.

        Every term is a_i(t) or f(t) a_i(t) or (1 - f(t)) a_i(t) for a series a_i of the
        central budget, so each is a sum of a_i (precomputed) and one of f a_i: all of
        them one matrix product of f with the series laid on the windows.
        """
        x = np.moveaxis(np.asarray(fm, float), axis, -1)  # (..., n)
        k1 = self._window.shape[1]
        missing = np.isnan(x)
        f_nan = (missing.astype(float) @ self._window) > 0 if missing.any() else \
            np.zeros(x.shape[:-1] + (k1,), dtype=bool)
        prod = (np.where(missing, 0.0, x) @ self._weighted).reshape(x.shape[:-1] + (4, k1))
        static, static_nan = self._static, self._static_nan

        def out(value, nan):
            return np.where(nan, np.nan, value)

        terms = {"ow": out(prod[..., 0, :], f_nan | static_nan[0]),
                 "den": out(static[0] - prod[..., 0, :], f_nan | static_nan[0])}
        for i, key in ((1, "b"), (2, "dt"), (3, "c")):
            if self.weight:  # (1 - f) a_i
                terms[key] = out(static[i] - prod[..., i, :], f_nan | static_nan[i])
            else:  # a_i alone, on the shape of f
                terms[key] = np.broadcast_to(out(static[i], static_nan[i]), prod[..., i, :].shape)
        return {key: (np.moveaxis(v[..., :-1], -1, axis), v[..., -1]) for key, v in terms.items()}


def _kernel(st: _Static, per_source: Mapping[int, dict], albedo, bias, e_ratio, k_ratio,
            pick_shift_m, bound, weighted_c=None):
    """Season and window values for a block of members (leading axis).

    Every term is the product of a member's factors and a sum over the window (or the
    season) of a series that does not depend on the member, so the members never
    touch the hourly series. ``per_source`` holds the member sums of the sources whose
    f_ow the members perturb (index on the source axis -> :meth:`_Static.sums` of
    (member, n_time, radius)); ``weighted_c`` the sums of the weighted conduction with
    a time-varying conductivity ratio.
    """
    size = albedo.size

    def full(key, which):
        base = np.broadcast_to(st.central[key][which], (size,) + st.central[key][which].shape)
        if not per_source:
            return base
        out = base.copy()
        for i, sums in per_source.items():
            out[..., i, :] = sums[key][which]
        return out

    def m(x, nd):
        return np.asarray(x, float).reshape((size,) + (1,) * nd)

    oma, b, e = 1.0 - np.asarray(albedo, float), np.asarray(bias, float), e_ratio
    pick = st.energy_MJ_m3 * np.asarray(pick_shift_m, float) / st.total
    up, down = np.maximum(-bound, 0.0), np.maximum(bound, 0.0)
    coef = np.stack([np.ones(size), up, down], axis=1)  # (M, 3) on (q, lo - q, hi - q)
    out = []
    for which, nd in ((0, 3), (1, 2)):  # windows, then the season
        ow, den = full("ow", which), full("den", which)
        w_b, w_dt = full("b", which), full("dt", which)
        if weighted_c is not None:
            w_c = weighted_c[which]
        else:
            w_c = m(np.asarray(k_ratio, float).reshape(size), nd) * full("c", which)
        d_w = m(e, nd) * (w_b + m(pick, nd) * w_dt) - w_c
        if which == 0:
            d_st = (coef @ st.q_window.T)[:, :, None, None]  # (M, window, 1, 1)
        else:
            d_st = (coef @ st.q_end)[:, None, None]
        resid = m(oma * b, nd) * ow - d_st - d_w
        with np.errstate(all="ignore"):
            out.append((resid, -resid / (m(b, nd) * den)))
    (_, w_t), (resid, t_season) = out
    return t_season, resid, w_t


def budget_members(
    budget: xr.Dataset,
    draws: xr.Dataset,
    *,
    f_ow_members: Callable[[slice], Mapping[str, np.ndarray]] | None = None,
    melt_energy_J_m3: float = C.RHO_ICE_KG_M3 * C.LATENT_HEAT_FUSION_J_KG,
    central: Mapping[str, float] | None = None,
    k_ratio=None,
    chunk_members: int = C.ENSEMBLE_CHUNK_MEMBERS,
    only: str | None = None,
    threads: int = 1,
) -> xr.Dataset:
    """Season and window transmittance of every member, from the central budget.

    Parameters
    ----------
    budget : xarray.Dataset
        From :func:`floeheat.budget.assemble_budget` (MJ m-2 terms).
    draws : xarray.Dataset
        From :func:`draw_factors`.
    f_ow_members : callable, optional
        ``f(members: slice, only: str | None) -> {source: array (n_member, n_time,
        n_radius)}`` giving the perturbed f_ow of a block of members on the budget's
        intervals (radii in the budget's order; ``only`` as below); sources not
        returned keep their central f_ow.
    melt_energy_J_m3 : float
        Mean melt energy per volume over the window [J m-3] (scales the pick error).
    central : mapping, optional
        ``rho_i_kg_m3`` and ``latent_heat_J_kg`` of the central run (default the
        constants).
    k_ratio : array_like (n_member,) or (n_member, n_time), optional
        Conductivity ratio (:func:`conduction_ratio`); default 1.
    chunk_members : int
        Members per dask block (from config, never from the thread count).
    only : str, optional
        Vary this factor alone (the others at their central values): attribution.
    threads : int
        Dask worker threads.

    Returns
    -------
    xarray.Dataset
        ``t_season(member, source, radius)`` [1], ``residual_season`` [MJ m-2],
        ``window_t_ice(member, window, source, radius)`` [1]. NaN where the central
        season is incomplete.

    Examples
    --------
    >>> import pandas as pd
    >>> from floeheat.budget import assemble_budget
    >>> b = pd.date_range("2020-06-01", periods=49, freq="h").values
    >>> sw = xr.Dataset({"sw_down": ("time", np.full(48, 200.0)),
    ...                  "time_bnds": (("time", "nv"), np.stack([b[:-1], b[1:]], 1))})
    >>> f = xr.DataArray(np.full((2, 1, 1), 0.1), dims=("time", "source", "radius"),
    ...                  coords={"time": b[[0, -1]], "source": ["radar"], "radius": [2e3]})
    >>> ds = assemble_budget(sw, b[0], b[-1], f_ow=f)
    >>> d = draw_factors({"shortwave_bias": {"dist": "normal", "spread": 0.1}}, {}, 4, 1, "x")
    >>> budget_members(ds, d).t_season.shape
    (4, 1, 1)
    """
    import dask

    central = dict(central or {})
    rho_c = float(central.get("rho_i_kg_m3", C.RHO_ICE_KG_M3))
    lat_c = float(central.get("latent_heat_J_kg", C.LATENT_HEAT_FUSION_J_KG))
    st = _Static(budget, melt_energy_J_m3)
    sources = [str(s) for s in budget["source"].values]
    n_members = draws.sizes["member"]

    def on(factor):
        return only is None or only == factor

    def block(sl: slice):
        d = draws.isel(member=sl)
        size = d.sizes["member"]
        one = np.ones(size)
        albedo = d["albedo_ow"].values if on("albedo_ow") else np.full(size, st.albedo)
        bias = d["shortwave_bias"].values if on("shortwave_bias") else one
        e_ratio = ((d["rho_i_kg_m3"].values / rho_c if on("rho_i") else one)
                   * (d["latent_heat_J_kg"].values / lat_c if on("latent_heat") else one))
        kr = one if (k_ratio is None or not on("k_ice")) else np.asarray(k_ratio)[sl]
        pick = (d["pick_start_m"].values - d["pick_end_m"].values) \
            if on("ice_bottom_pick") else np.zeros(size)
        bound = d["storage_bound"].values if on("storage_bound") else np.zeros(size)
        per = {}
        if f_ow_members is not None and (on("coverage_threshold") or on("f_ow_sampling")):
            per = {sources.index(s): np.asarray(arr, float)
                   for s, arr in f_ow_members(sl, only).items()}
        per_source = {i: st.sums(arr, axis=1) for i, arr in per.items()}
        weighted_c = None
        if np.ndim(kr) == 2:  # a conductivity ratio that varies in time (salinity form)
            fm = np.repeat(st.fm[None], size, axis=0)
            for i, arr in per.items():
                fm[:, :, i, :] = arr
            w = (1.0 - fm) if st.weight else np.ones_like(fm)
            wc = w * (np.asarray(kr, float) * st.d_c[None, :])[:, :, None, None]
            weighted_c = (np.add.reduceat(wc, st.first, axis=1), np.sum(wc, axis=1))
        return _kernel(st, per_source, albedo, bias, e_ratio, kr, pick, bound, weighted_c)

    starts = range(0, n_members, max(1, int(chunk_members)))
    blocks = [slice(a, min(a + int(chunk_members), n_members)) for a in starts]
    # one thread: run the blocks in this thread (the same blocks, the same numbers)
    scheduler = "threads" if int(threads) > 1 else "synchronous"
    with dask.config.set(scheduler=scheduler, num_workers=max(1, int(threads))):
        parts = dask.compute(*[dask.delayed(block)(sl) for sl in blocks])
    t_season, resid, w_t = (np.concatenate([p[k] for p in parts], axis=0) for k in range(3))
    complete = np.isfinite(np.asarray(budget["t_season"].values, float))
    t_season = np.where(complete[None], t_season, np.nan)
    resid = np.where(complete[None], resid, np.nan)
    coords = {"member": draws["member"].values, "source": budget["source"].values,
              "radius": budget["radius"].values}
    out = xr.Dataset(coords=coords)
    out["t_season"] = (("member", "source", "radius"), t_season,
                       {"units": "1", "long_name": "season transmittance of each member"})
    out["residual_season"] = (("member", "source", "radius"), resid,
                              {"units": "MJ m-2", "long_name": "season residual of each member"})
    out["window_t_ice"] = (("member", "window", "source", "radius"), w_t,
                           {"units": "1", "long_name": "window transmittance of each member"})
    return out


def interval(values, level: float = 0.90, axis: int = 0):
    """Equal-tailed interval of an ensemble: the (1 - level)/2 and (1 + level)/2
    quantiles over the finite members (linear interpolation between order statistics).

    Examples
    --------
    >>> lo, hi = interval(np.arange(101.0))
    >>> float(lo), float(hi)
    (5.0, 95.0)
    """
    v = np.asarray(values, float)
    q = [round(50.0 * (1.0 - level), 10), round(50.0 * (1.0 + level), 10)]
    with np.errstate(all="ignore"):
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            lo, hi = np.nanpercentile(v, q, axis=axis)
    return lo, hi


def member_variance(values, axis: int = 0) -> np.ndarray:
    """Variance over the finite members (``numpy.nanvar``), exactly 0 where they are all
    equal: the mean of equal values is not always that value in floating point, which
    would give a factor that cannot move a value a variance of rounding noise.

    Examples
    --------
    >>> v = np.full(200, 0.01263917235)
    >>> bool(np.nanvar(v) > 0), float(member_variance(v))
    (True, 0.0)
    """
    import warnings

    v = np.asarray(values, float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        var = np.nanvar(v, axis=axis)
        equal = np.nanmax(v, axis=axis) == np.nanmin(v, axis=axis)
    return np.where(equal, 0.0, var)


def variance_shares(one_at_a_time: Mapping[str, np.ndarray], axis: int = 0) -> dict:
    """Variance share of each factor: its one-at-a-time variance over their sum.

    Parameters
    ----------
    one_at_a_time : mapping
        Factor -> member values with that factor varied alone (member on ``axis``).

    Returns
    -------
    dict
        Factor -> share [1] (NaN where no factor varies the value); the shares of a
        value sum to 1.

    Examples
    --------
    >>> s = variance_shares({"a": np.array([0.0, 2.0]), "b": np.array([0.0, 1.0])})
    >>> {k: round(float(v), 2) for k, v in s.items()}
    {'a': 0.8, 'b': 0.2}
    """
    return shares_of_variances({k: member_variance(v, axis=axis)
                                for k, v in one_at_a_time.items()})


def shares_of_variances(variances: Mapping[str, np.ndarray]) -> dict:
    """Each factor's one-at-a-time variance over their sum (NaN where all are 0), for
    callers that keep the variances too (:func:`variance_shares`).

    Examples
    --------
    >>> s = shares_of_variances({"a": np.array(3.0), "b": np.array(1.0)})
    >>> {k: float(v) for k, v in s.items()}
    {'a': 0.75, 'b': 0.25}
    """
    total = sum(variances.values())
    with np.errstate(all="ignore"):
        return {k: np.where(total > 0, v / total, np.nan) for k, v in variances.items()}


def bootstrap_median_with_members(values, member_values, groups, n_boot: int,
                                  rng: np.random.Generator, level: float = 0.90
                                  ) -> tuple[float, float]:
    """Interval of the median from a bootstrap over whole groups combined with the
    ensemble.

    Each replicate draws the groups (arrays) with replacement, as
    :func:`floeheat.climatology.bootstrap_median_by_array` does, and one ensemble member
    for all of them (members share the run-wide draws, so systematic errors stay
    systematic); the replicate's value is the median of that member's values of the
    drawn records. A record without a value for the member keeps its central value.

    Parameters
    ----------
    values : array_like (n,)
        Central value of each record; records with NaN are left out.
    member_values : array_like (n, n_member)
        Each record's member values.
    groups : array_like (n,)
        Resampling unit of each record (array ID).
    n_boot : int
    rng : numpy.random.Generator
        Seeded by the caller.
    level : float

    Returns
    -------
    (float, float)
        The (1 - level)/2 and (1 + level)/2 quantiles of the replicate medians.

    Examples
    --------
    >>> v = np.array([1.0, 2.0, 3.0, 4.0])
    >>> mv = v[:, None] + np.array([[-0.5, 0.0, 0.5]])
    >>> lo, hi = bootstrap_median_with_members(v, mv, ["a", "a", "b", "b"], 300,
    ...                                        np.random.default_rng(0))
    >>> 0.5 <= lo <= hi <= 4.5
    True
    """
    v = np.asarray(values, float)
    mv = np.asarray(member_values, float).reshape(v.size, -1)
    g = np.asarray(groups)
    ok = np.isfinite(v)
    v, mv, g = v[ok], mv[ok], g[ok]
    if v.size == 0:
        return float("nan"), float("nan")
    filled = np.where(np.isfinite(mv), mv, v[:, None])
    labels, inverse = np.unique(g, return_inverse=True)
    rows = [np.flatnonzero(inverse == k) for k in range(labels.size)]
    picks = rng.integers(0, labels.size, size=(n_boot, labels.size))
    member = rng.integers(0, filled.shape[1], size=n_boot)
    medians = replicate_medians(filled, rows, picks, member)
    lo, hi = np.percentile(medians, [round(50.0 * (1.0 - level), 10),
                                     round(50.0 * (1.0 + level), 10)])
    return float(lo), float(hi)
