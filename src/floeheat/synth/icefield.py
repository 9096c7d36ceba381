"""The open-water field: floes and leads that open and close through the summer.

The field lives in a frame that moves with the regional ice drift. It is the
combination of

- a periodic tile of uniform ranks ``u`` in [0, 1): the rank of the distance to the
  nearest floe boundary of two Voronoi floe tessellations (big floes of 1.5 km or more
  and small ones of 0.5 km or more, at least 25 and 8 tile cells), plus smooth noise so
  that leads vary in width; the lowest ranks are the gaps between floes;
- a smooth target fraction ``q(t, X, Y)``: a seasonal curve (near zero before melt
  onset, rising to about 0.15 by August), a weak large-scale modulation (+-25 %) and local
  opening (positive) and closing (negative) events lasting a few days.

A point is open water when ``u < q``. Over a circle of many floes the water fraction is
close to the mean of ``q``; the truth takes it from the rendered pixels themselves,
with the circle rule of the analysis (pixel centres within the ground radius scaled by
the projection's local scale factor), so the budget is driven by what the masks show.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from floeheat.constants import COVERAGE_THRESHOLD, MASK_CODES

from .drift import Tracks
from .scenario import Scenario, rng_for

__all__ = ["IceField", "make_icefield", "ScenePlan", "plan_scenes", "render_mask",
           "circle_fractions", "backscatter_from_mask", "scale_factor"]


@dataclass
class IceField:
    """The floe-and-lead pattern and its target fraction."""

    tile_u: np.ndarray        # (n, n) float32 ranks
    tile_res_m: float
    t0: np.datetime64
    melt_onset_days: float
    s_min: float
    s_max: float
    ramp_days: float
    mod: tuple[float, float, float, float]          # L1, L2, phi1, phi2
    events: np.ndarray        # (k, 6): X, Y, sigma_m, t_days, tau_days, amplitude
    shift: Tracks

    def seasonal(self, t_days):
        """Seasonal open-water target (fraction) at days since ``t0``."""
        x = np.clip((np.asarray(t_days, float) - self.melt_onset_days) / self.ramp_days, 0, 1)
        return self.s_min + (self.s_max - self.s_min) * (3 * x**2 - 2 * x**3)

    def target(self, t_days: float, X, Y):
        """Target open-water fraction q at pattern-frame coordinates (metres)."""
        L1, L2, p1, p2 = self.mod
        q = self.seasonal(t_days) * (1.0 + 0.25 * np.sin(2 * np.pi * X / L1 + p1)
                                     * np.sin(2 * np.pi * Y / L2 + p2))
        for ex, ey, sig, te, tau, amp in self.events:
            w = np.exp(-0.5 * ((t_days - te) / tau) ** 2)
            if w < 1e-4:
                continue
            q = q + amp * w * np.exp(-0.5 * ((X - ex) ** 2 + (Y - ey) ** 2) / sig**2)
        return np.clip(q, 0.001, 0.6)

    def water_grid(self, t: np.datetime64, x_m, y_m) -> np.ndarray:
        """Open water (True) on the grid of column x ``x_m`` by row y ``y_m`` at time t.

        The target is separable in x and y, so the grid is built from outer products;
        masks and circle fractions both use this function, so they agree exactly.

        Parameters
        ----------
        x_m : (ncol,) projected x of the pixel centres, metres.
        y_m : (nrow,) projected y of the pixel centres, metres.
        """
        dx, dy = self.shift.pattern_shift_at(t)
        X = np.asarray(x_m, float) - dx
        Y = np.asarray(y_m, float) - dy
        t_days = (np.datetime64(t, "ns") - self.t0) / np.timedelta64(1, "D")
        L1, L2, p1, p2 = self.mod
        s_t = self.seasonal(t_days)
        q = np.multiply.outer((0.25 * s_t * np.sin(2 * np.pi * Y / L2 + p2)).astype(np.float32),
                              np.sin(2 * np.pi * X / L1 + p1).astype(np.float32))
        q += np.float32(s_t)
        x_lo, x_hi, y_lo, y_hi = X.min(), X.max(), Y.min(), Y.max()
        for ex, ey, sig, te, tau, amp in self.events:
            w = np.exp(-0.5 * ((t_days - te) / tau) ** 2)
            if w < 1e-4 or not (x_lo - 5 * sig < ex < x_hi + 5 * sig
                                and y_lo - 5 * sig < ey < y_hi + 5 * sig):
                continue
            q += np.multiply.outer(
                (amp * w * np.exp(-0.5 * ((Y - ey) / sig) ** 2)).astype(np.float32),
                np.exp(-0.5 * ((X - ex) / sig) ** 2).astype(np.float32))
        np.clip(q, 0.001, 0.6, out=q)
        n = self.tile_u.shape[0]
        i = np.floor(Y / self.tile_res_m).astype(np.int64) % n
        j = np.floor(X / self.tile_res_m).astype(np.int64) % n
        return self.tile_u[np.ix_(i, j)] < q


def _voronoi_boundary_distance(rng, n: int, res_m: float, floe_m: float) -> np.ndarray:
    from scipy import ndimage

    n_seeds = max(4, int((n * res_m / floe_m) ** 2))
    labels = np.zeros((n, n), np.int32)
    idx = rng.integers(0, n, size=(n_seeds, 2))
    labels[idx[:, 0], idx[:, 1]] = np.arange(1, n_seeds + 1)
    m = max(8, min(n // 4, int(3 * floe_m / res_m)))
    padded = np.pad(labels, m, mode="wrap")
    _, (ii, jj) = ndimage.distance_transform_edt(padded == 0, return_indices=True)
    lab = padded[ii, jj]
    boundary = np.zeros_like(lab, dtype=bool)
    boundary[:, 1:] |= lab[:, 1:] != lab[:, :-1]
    boundary[1:, :] |= lab[1:, :] != lab[:-1, :]
    dist = ndimage.distance_transform_edt(~boundary)
    return dist[m:m + n, m:m + n] * res_m


def make_tile(rng: np.random.Generator, n: int, res_m: float) -> np.ndarray:
    """Periodic tile of uniform ranks; low ranks lie in the gaps between floes.

    Examples
    --------
    >>> u = make_tile(np.random.default_rng(0), 64, 50.0)
    >>> bool(0.0 < u.min() < 0.01 and 0.99 < u.max() < 1.0)
    True
    """
    from scipy import ndimage

    d_big = _voronoi_boundary_distance(rng, n, res_m, max(1500.0, 25 * res_m))
    d_small = _voronoi_boundary_distance(rng, n, res_m, max(500.0, 8 * res_m))
    # smooth noise breaks the ties of the pixel distances: leads of varying width
    smooth = ndimage.gaussian_filter(rng.standard_normal((n, n)), 10.0, mode="wrap")
    smooth *= 1.0 * res_m / smooth.std()
    d = np.minimum(d_big, 2.5 * d_small) + smooth
    order = np.argsort(d, axis=None, kind="stable")
    u = np.empty(n * n, np.float32)
    u[order] = (np.arange(n * n, dtype=np.float64) + 0.5) / (n * n)
    return u.reshape(n, n)


def make_icefield(sc: Scenario, tracks: Tracks) -> IceField:
    """Draw the open-water field of the scenario."""
    rng = rng_for(sc.seed, "icefield", sc.hemisphere)
    tile = make_tile(rng, sc.size.tile_n, sc.size.tile_res_m)
    total_days = (sc.sim_end - sc.sim_start) / np.timedelta64(1, "D")
    onset = (sc.melt_onset - sc.sim_start) / np.timedelta64(1, "D")
    events = []
    n_ev = max(3, int(len(sc.array_ids) * total_days / 12))
    for _ in range(n_ev):
        a = rng.integers(0, len(sc.array_ids))
        ox, oy = sc.array_origin_xy[a] + rng.uniform(-30_000, 30_000, 2)
        te = rng.uniform(0, total_days)
        amp = rng.uniform(0.02, 0.06) * (1 if rng.random() < 0.6 else -1)
        amp *= max(0.3, min(1.0, (te - onset + 20) / 40))
        events.append((ox, oy, rng.uniform(15_000, 40_000), te, rng.uniform(1.0, 3.0), amp))
    return IceField(tile_u=tile, tile_res_m=sc.size.tile_res_m, t0=sc.sim_start,
                    melt_onset_days=float(onset), s_min=0.006,
                    s_max=float(rng.uniform(0.12, 0.16)), ramp_days=60.0,
                    mod=(rng.uniform(80e3, 160e3), rng.uniform(80e3, 160e3),
                         rng.uniform(0, 2 * np.pi), rng.uniform(0, 2 * np.pi)),
                    events=np.array(events, float).reshape(-1, 6), shift=tracks)


@dataclass
class ScenePlan:
    """One radar acquisition: its grid, time, gaps, and how it is written."""

    scene_id: str
    time: np.datetime64
    x0_m: float               # left edge
    y0_m: float               # top edge
    res_m: float
    npx: int
    strip: tuple | None = None       # (axis, start, stop) of a no-data strip
    edge: tuple | None = None        # (slope, offset) of a diagonal swath edge
    fmt: str = "tif"
    backscatter: str | None = None   # None, "tif", "nc" or "split"
    windy: bool = False
    served: dict = field(default_factory=dict)

    def centres(self):
        """Pixel-centre coordinates (x of columns, y of rows), metres."""
        j = np.arange(self.npx)
        return self.x0_m + (j + 0.5) * self.res_m, self.y0_m - (j + 0.5) * self.res_m

    def nodata(self, rows, cols) -> np.ndarray:
        """True where the (integer) pixel indices fall in a no-data part."""
        rows = np.asarray(rows)
        cols = np.asarray(cols)
        out = (rows < 0) | (rows >= self.npx) | (cols < 0) | (cols >= self.npx)
        if self.strip is not None:
            axis, a, b = self.strip
            v = rows if axis == 0 else cols
            out |= (v >= a) & (v < b)
        if self.edge is not None:
            slope, off = self.edge
            out |= cols > off + slope * rows
        return out


def plan_scenes(sc: Scenario, tracks: Tracks) -> list[ScenePlan]:
    """Choose acquisition times, footprints, gaps and formats for every array."""
    rng = rng_for(sc.seed, "scenes", sc.hemisphere)
    size = sc.size
    ext = size.scene_px * size.scene_res_m
    total_h = (sc.sim_end - sc.sim_start) / np.timedelta64(1, "h")
    plans: list[tuple] = []
    first = {d.array_id: i for i, d in reversed(list(enumerate(sc.deployments)))}
    for a, name in enumerate(sc.array_ids):
        t_h = rng.uniform(0.0, 8.0)
        while t_h < total_h:
            plans.append((t_h, a, name))
            t_h += size.scene_every_days * 24 * rng.uniform(0.6, 1.4)
        plans.append((total_h - rng.uniform(0.5, 6.0), a, name))
    plans.sort()
    scenes = []
    n_bs = size.backscatter_count
    bs_at = set(np.linspace(0, len(plans) - 1, n_bs + 2)[1:-1].round().astype(int).tolist()
                ) if n_bs else set()
    bs_kinds = ["split", "nc"] + ["tif"] * max(0, n_bs)
    k_bs = 0
    for k, (t_h, a, name) in enumerate(plans):
        t = sc.sim_start + np.timedelta64(int(round(t_h * 3600)), "s")
        i0 = first[name]
        cx, cy = tracks.position_at(i0, t)
        # share with the nearest other array when both fit in the footprint
        if len(sc.array_ids) > 1 and rng.random() < 0.4:
            others = [(np.hypot(*(np.array(tracks.position_at(first[b], t)) - (cx, cy))), b)
                      for b in sc.array_ids if b != name]
            dist, b = min(others)
            if dist < ext - 2 * 21_000:
                bx, by = tracks.position_at(first[b], t)
                cx, cy = (cx + bx) / 2, (cy + by) / 2
        if rng.random() < 0.15:
            off = rng.uniform(0.25, 0.5) * ext - 12_000.0
            ang = rng.uniform(0, 2 * np.pi)
            cx, cy = cx + off * np.cos(ang), cy + off * np.sin(ang)
        else:
            cx, cy = np.array([cx, cy]) + rng.uniform(-1, 1, 2) * 0.06 * ext
        res = size.scene_res_m
        x0 = np.floor((cx - ext / 2) / res) * res
        y0 = np.ceil((cy + ext / 2) / res) * res
        p = ScenePlan(scene_id=f"{sc.array_ids[a]}-{k:04d}", time=t, x0_m=float(x0),
                      y0_m=float(y0), res_m=res, npx=size.scene_px,
                      fmt="nc" if k % 4 == 3 else "tif", windy=bool(rng.random() < 0.5))
        if rng.random() < 0.3:
            w = int(size.scene_px * rng.uniform(0.04, 0.1))
            s0 = int(rng.integers(0, size.scene_px - w))
            p.strip = (int(rng.integers(0, 2)), s0, s0 + w)
        if rng.random() < 0.2:
            p.edge = (float(rng.uniform(-0.3, 0.3)), float(size.scene_px * rng.uniform(0.75, 0.95)))
        if k in bs_at:
            p.backscatter = bs_kinds[k_bs] if n_bs >= 2 else "tif"
            k_bs += 1
        scenes.append(p)
    return scenes


def render_mask(field_: IceField, plan: ScenePlan, with_nodata: bool = True) -> np.ndarray:
    """The uint8 ice/water mask of a scene (0 water, 1 ice, 255 no data)."""
    xc, yc = plan.centres()
    water = field_.water_grid(plan.time, xc, yc)
    out = np.where(water, np.uint8(MASK_CODES["water"]), np.uint8(MASK_CODES["ice"]))
    if with_nodata:
        rows = np.arange(plan.npx)[:, None]
        cols = np.arange(plan.npx)[None, :]
        out[plan.nodata(rows, cols)] = MASK_CODES["nodata"]
    return out


def scale_factor(crs: str, lon_deg: float, lat_deg: float) -> float:
    """Local (point) scale factor of a projection, from pyproj ``Proj.get_factors``.

    Examples
    --------
    >>> round(scale_factor("EPSG:3413", -45.0, 70.0), 6)
    1.0
    """
    f = _proj(crs).get_factors(lon_deg, lat_deg)
    return float(np.sqrt(f.meridional_scale * f.parallel_scale))


@lru_cache(maxsize=4)
def _proj(crs: str):
    import pyproj

    return pyproj.Proj(pyproj.CRS(crs))


def circle_fractions(field_: IceField, plan: ScenePlan, x_m: float, y_m: float,
                     k_scale: float, radii_m) -> dict:
    """Open-water fraction and coverage in circles around a buoy on a scene's grid.

    Returns a dict with arrays over ``radii_m``: ``f_true`` (every pixel of the circle,
    from the noise-free field, including pixels beyond the scene's edge or under its
    gaps), ``f_mask`` (water / valid pixels of the written mask) and ``coverage``
    (valid / all pixels of the circle).
    """
    radii = np.asarray(radii_m, float) * k_scale
    rmax = radii.max()
    res = plan.res_m
    j0 = int(np.floor((x_m - rmax - plan.x0_m) / res)) - 1
    j1 = int(np.ceil((x_m + rmax - plan.x0_m) / res)) + 1
    i0 = int(np.floor((plan.y0_m - (y_m + rmax)) / res)) - 1
    i1 = int(np.ceil((plan.y0_m - (y_m - rmax)) / res)) + 1
    r1 = np.arange(i0, i1)
    c1 = np.arange(j0, j1)
    xc = plan.x0_m + (c1 + 0.5) * res
    yc = plan.y0_m - (r1 + 0.5) * res
    d2 = np.add.outer((yc - y_m) ** 2, (xc - x_m) ** 2)
    inside = d2 <= rmax**2
    water = field_.water_grid(plan.time, xc, yc)[inside]
    valid = ~plan.nodata(r1[:, None], c1[None, :])[inside]
    d2 = d2[inside]
    out = {"f_true": [], "f_mask": [], "coverage": []}
    for r in radii:
        m = d2 <= r**2
        n_all = int(m.sum())
        n_valid = int((m & valid).sum())
        out["f_true"].append(water[m].mean() if n_all else np.nan)
        out["f_mask"].append(water[m & valid].mean() if n_valid else np.nan)
        out["coverage"].append(n_valid / n_all if n_all else 0.0)
    return {k: np.array(v, float) for k, v in out.items()}


def serves(cov: np.ndarray) -> bool:
    """Whether a scene counts for a buoy (coverage threshold of the analysis)."""
    return bool(np.asarray(cov)[-1] >= COVERAGE_THRESHOLD)


def backscatter_from_mask(rng: np.random.Generator, field_: IceField, plan: ScenePlan,
                          mask: np.ndarray) -> dict[str, np.ndarray]:
    """Calibrated two-band backscatter (dB) with speckle, incidence and noise floor.

    Ice is moderately bright in HH and HV; calm water is dark in both; in a windy scene
    open water is bright in HH but stays near the noise floor in HV. Speckle follows a
    multi-look gamma law (4 looks). NaN marks no data.
    """
    npx = plan.npx
    col = np.arange(npx)
    inc = 19.0 + 27.0 * col / max(npx - 1, 1)                       # degrees, near to far
    scallop = np.cos(2 * np.pi * col / max(npx / 5.0, 1.0))
    nesz_hh = -24.0 - 1.5 * scallop - 0.08 * (inc - 30)
    nesz_hv = -28.0 - 1.5 * scallop - 0.08 * (inc - 30)
    water = mask == MASK_CODES["water"]
    xc, yc = plan.centres()
    X, Y = np.meshgrid(xc, yc)
    texture = field_.tile_u[(np.floor(Y / field_.tile_res_m).astype(np.int64) * 7)
                            % field_.tile_u.shape[0],
                            (np.floor(X / field_.tile_res_m).astype(np.int64) * 7)
                            % field_.tile_u.shape[0]]
    ice_hh = -16.0 + 3.0 * (texture - 0.5) - 0.15 * (inc - 30)
    ice_hv = -24.0 + 2.0 * (texture - 0.5) - 0.10 * (inc - 30)
    if plan.windy:
        w_hh = -9.0 - 0.35 * (inc - 30)
    else:
        w_hh = -23.0 - 0.6 * (inc - 30)
    w_hv = np.full(npx, -31.0)
    hh_db = np.where(water, w_hh, ice_hh)
    hv_db = np.where(water, w_hv, ice_hv)
    looks = 4.0
    out = {}
    for name, sig_db, nesz in (("HH", hh_db, nesz_hh), ("HV", hv_db, nesz_hv)):
        lin = 10 ** (sig_db / 10) * rng.gamma(looks, 1 / looks, mask.shape)
        lin = lin + 10 ** (nesz / 10) * (rng.gamma(looks, 1 / looks, mask.shape) - 1.0)
        db = 10 * np.log10(np.clip(lin, 1e-6, None))
        db = np.round(db, 2).astype(np.float32)
        db[mask == MASK_CODES["nodata"]] = np.nan
        out[name] = db
    shape = mask.shape
    out["incidence_angle"] = np.broadcast_to(inc.astype(np.float32), shape).copy()
    out["noise_equivalent_sigma0_HH"] = np.broadcast_to(nesz_hh.astype(np.float32), shape).copy()
    out["noise_equivalent_sigma0_HV"] = np.broadcast_to(nesz_hv.astype(np.float32), shape).copy()
    nod = mask == MASK_CODES["nodata"]
    for k in ("incidence_angle", "noise_equivalent_sigma0_HH", "noise_equivalent_sigma0_HV"):
        out[k][nod] = np.nan
    return out
