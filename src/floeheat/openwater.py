"""Open-water fraction around a buoy from classified radar scenes (science.md,
"Open-water fraction", radar).

The radius is a ground distance, scaled to projection units by the projection's local
scale factor at the buoy. A pixel counts when its centre lies inside the circle (on or
inside: distance <= radius), on the infinite pixel lattice of the scene's affine
transform (north-up or south-up, no rotation), so pixels beyond the scene's edge count
as part of the circle but never as valid:

- f_ow = water pixels / valid pixels (valid: water or ice),
- coverage = valid pixels / all pixels of the circle.

A scene counts for a buoy when its coverage reaches the threshold (default
``constants.COVERAGE_THRESHOLD``). In time, f_ow is linear between two consecutive
counting scenes no more than ``max_gap`` apart and constant beyond the first and last
for up to ``max_gap`` (default ``constants.MAX_SCENE_GAP_DAYS``); elsewhere missing.

Pixel geometry follows the GDAL/rasterio convention: ``x = a col + c``,
``y = e row + f`` at pixel corners, centres at ``(col + 0.5, row + 0.5)``.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import pandas as pd
import xarray as xr
from pyproj import CRS, Proj

from floeheat import constants as C

__all__ = [
    "scale_factor",
    "projected_radius",
    "circle_window",
    "scene_coverage",
    "CircleStats",
    "circle_fractions",
    "radar_time_series",
    "radar_series_arrays",
    "radar_series_members",
    "per_scene_arrays",
    "FLAG_MEANINGS",
    "MAX_SCENE_GAP",
]

#: Flag values of :func:`radar_time_series` (index = value).
FLAG_MEANINGS = ("ok", "gap_longer_than_max", "before_first_scene", "after_last_scene",
                 "no_valid_scene")
#: Default longest gap bridged between scenes and hold beyond the ends.
MAX_SCENE_GAP = pd.Timedelta(days=C.MAX_SCENE_GAP_DAYS)
#: Angular distortion [degrees] below which a projection is treated as conformal.
_CONFORMAL_TOL_DEG = 1.0e-4


def scale_factor(crs, longitude_deg, latitude_deg) -> np.ndarray:
    """Local scale factor of a projected CRS at geographic positions.

    For a conformal projection (polar stereographic) the meridional scale (equal to the
    parallel scale); otherwise the square root of the areal scale, so a ground circle
    maps to a projected circle of the same projected area.

    Parameters
    ----------
    crs : str or pyproj.CRS
        A projected CRS.
    longitude_deg, latitude_deg : array_like of float
        Positions [degrees] on the CRS's datum.

    Returns
    -------
    numpy.ndarray of float
        k [1]: projected distance / ground distance near the position.

    Examples
    --------
    >>> round(float(scale_factor("EPSG:3413", -150.0, 75.0)), 5)
    0.98666
    """
    p = Proj(CRS.from_user_input(crs))
    f = p.get_factors(np.asarray(longitude_deg, dtype=float),
                      np.asarray(latitude_deg, dtype=float))
    conformal = np.asarray(f.angular_distortion) < _CONFORMAL_TOL_DEG
    return np.where(conformal, np.asarray(f.meridional_scale),
                    np.sqrt(np.asarray(f.areal_scale)))


def projected_radius(radius_m, crs, longitude_deg, latitude_deg) -> np.ndarray:
    """Ground radius in projection units at a position: radius_m * k.

    Parameters
    ----------
    radius_m : array_like of float
        Radii on the ground [m].
    crs : str or pyproj.CRS
        A projected CRS in metres.
    longitude_deg, latitude_deg : float
        The buoy's position [degrees].

    Returns
    -------
    numpy.ndarray of float
        Radii in projection units, same shape as ``radius_m``.

    Examples
    --------
    >>> projected_radius([1000.0], "EPSG:3413", -45.0, 70.0).round(3).tolist()
    [1000.0]
    """
    k = float(scale_factor(crs, longitude_deg, latitude_deg))
    return np.asarray(radius_m, dtype=float) * k


def _steps(transform):
    t = tuple(transform)[:6]
    a, b, c, d, e, f = (float(v) for v in t)
    if b != 0.0 or d != 0.0:
        raise ValueError("rotated or sheared transforms are not supported")
    if a == 0.0 or e == 0.0:
        raise ValueError("degenerate transform")
    return a, c, e, f


def _index_range(origin, step, lo_coord, hi_coord):
    """Integer indices whose pixel centres lie in [lo_coord, hi_coord]."""
    u1 = (lo_coord - origin) / step - 0.5
    u2 = (hi_coord - origin) / step - 0.5
    return np.ceil(np.minimum(u1, u2)).astype(np.int64), np.floor(np.maximum(u1, u2)).astype(
        np.int64)


def _row_spans(transform, x, y, radius_proj):
    """Rows crossing the circle and, per row, the first and last column inside it."""
    a, c, e, f = _steps(transform)
    r = float(radius_proj)
    if not (np.isfinite(r) and r >= 0 and np.isfinite(x) and np.isfinite(y)):
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty, empty
    i0, i1 = _index_range(f, e, y - r, y + r)
    rows = np.arange(int(i0), int(i1) + 1, dtype=np.int64)
    dy = f + e * (rows + 0.5) - y
    h = np.sqrt(np.maximum(r * r - dy * dy, 0.0))
    jlo, jhi = _index_range(c, a, x - h, x + h)
    inside = r * r - dy * dy >= 0.0
    return rows, np.where(inside, jlo, 0), np.where(inside, jhi, -1)


def _clip_spans(rows, jlo, jhi, shape):
    h, w = int(shape[0]), int(shape[1])
    keep = (rows >= 0) & (rows < h)
    rows, lo, hi = rows[keep], np.maximum(jlo[keep], 0), np.minimum(jhi[keep], w - 1)
    return rows, lo, hi


def circle_window(transform, shape, x, y, radius_proj):
    """The scene window holding every in-scene pixel of a circle.

    Parameters
    ----------
    transform : affine.Affine or sequence of 6 float
        The scene's transform (pixel corners), no rotation.
    shape : tuple of int
        Scene (rows, cols).
    x, y : float
        Circle centre [projection units].
    radius_proj : float
        Radius [projection units]; pass the largest radius to read the window once.

    Returns
    -------
    tuple of slice or None
        (row slice, col slice) clipped to the scene; None when no pixel centre of the
        circle lies in the scene.

    Examples
    --------
    >>> from affine import Affine
    >>> circle_window(Affine(10, 0, 0, 0, -10, 1000), (100, 100), 55.0, 945.0, 20.0)
    (slice(3, 8, None), slice(3, 8, None))
    """
    rows, lo, hi = _clip_spans(*_row_spans(transform, x, y, radius_proj), shape)
    ok = hi >= lo
    if not ok.any():
        return None
    return (slice(int(rows[ok].min()), int(rows[ok].max()) + 1),
            slice(int(lo[ok].min()), int(hi[ok].max()) + 1))


def _counts(transform, shape, x, y, radius_proj):
    rows, jlo, jhi = _row_spans(transform, x, y, radius_proj)
    n_circle = int(np.maximum(jhi - jlo + 1, 0).sum())
    rs, lo, hi = _clip_spans(rows, jlo, jhi, shape)
    n_scene = int(np.maximum(hi - lo + 1, 0).sum())
    return n_circle, n_scene, (rs, lo, hi)


def scene_coverage(transform, shape, x, y, radii_proj) -> np.ndarray:
    """Share of a circle's pixels that lie inside the scene's footprint.

    Reads no pixel: an upper bound of the valid coverage, used to match scenes to buoys
    before reading (the exact valid coverage comes from :func:`circle_fractions`).

    Parameters
    ----------
    transform : affine.Affine or sequence of 6 float
        Scene transform (pixel corners), no rotation.
    shape : tuple of int
        Scene (rows, cols).
    x, y : float
        Circle centre [projection units].
    radii_proj : array_like of float
        Radii [projection units].

    Returns
    -------
    numpy.ndarray of float in [0, 1], shape like ``radii_proj``
        In-scene pixels / circle pixels (NaN for a circle without pixel centres).

    Examples
    --------
    >>> from affine import Affine
    >>> cov = scene_coverage(Affine(1, 0, 0, 0, -1, 0), (1000, 1000), 0.0, -500.0, [100.0])
    >>> round(float(cov[0]), 2)
    0.5
    """
    r = np.asarray(radii_proj, dtype=float)
    out = np.empty(r.size)
    for k, rk in enumerate(r.ravel()):
        n_circle, n_scene, _ = _counts(transform, shape, x, y, rk)
        out[k] = n_scene / n_circle if n_circle else np.nan
    return out.reshape(r.shape)


class CircleStats(NamedTuple):
    """Per-radius counts of :func:`circle_fractions` (arrays of shape (n_radius,))."""

    f_ow: np.ndarray  #: water / valid [1]; NaN where rejected
    coverage: np.ndarray  #: valid / circle pixels [1]
    n_water: np.ndarray  #: water pixels
    n_valid: np.ndarray  #: water or ice pixels
    n_circle: np.ndarray  #: all pixels of the circle, in and beyond the scene
    accepted: np.ndarray  #: coverage >= threshold and at least one valid pixel


def circle_fractions(window, row_off: int, col_off: int, transform, shape, x, y,
                     radii_proj, codes=None,
                     coverage_threshold: float = C.COVERAGE_THRESHOLD) -> CircleStats:
    """Open-water fraction and coverage of circles around a buoy in a mask window.

    Parameters
    ----------
    window : array_like of int, shape (h, w)
        Mask pixels read from the scene at rows ``row_off .. row_off + h`` and cols
        ``col_off .. col_off + w``; it must hold every in-scene pixel of the largest
        circle (read it with :func:`circle_window`). Codes other than water and ice
        (no data, unknown codes, NaN) are not valid.
    row_off, col_off : int
        Scene row and column of ``window[0, 0]``.
    transform : affine.Affine or sequence of 6 float
        Scene transform (pixel corners), no rotation.
    shape : tuple of int
        Scene (rows, cols).
    x, y : float
        Buoy position [projection units].
    radii_proj : array_like of float, shape (n_radius,)
        Radii [projection units] (ground radius times the scale factor).
    codes : dict, optional
        ``{"water": int, "ice": int, "nodata": int}`` (default ``constants.MASK_CODES``).
    coverage_threshold : float in [0, 1], optional
        Minimum coverage for the scene to count (default ``constants.COVERAGE_THRESHOLD``).

    Returns
    -------
    CircleStats
        Arrays of shape (n_radius,): ``f_ow``, ``coverage``, ``n_water``, ``n_valid``,
        ``n_circle``, ``accepted``.

    Raises
    ------
    ValueError
        When the window misses in-scene pixels of a circle.

    Examples
    --------
    >>> from affine import Affine
    >>> win = np.zeros((10, 10), dtype=np.uint8)
    >>> win[:, 5:] = 1                       # ice east of x = 5
    >>> s = circle_fractions(win, 0, 0, Affine(1, 0, 0, 0, -1, 10), (10, 10),
    ...                      5.0, 5.0, [3.0])
    >>> float(s.f_ow[0]), int(s.n_circle[0]), float(s.coverage[0])
    (0.5, 32, 1.0)
    """
    codes = dict(C.MASK_CODES if codes is None else codes)
    win = np.asarray(window)
    h, w = win.shape
    water = win == codes["water"]
    valid = water | (win == codes["ice"])
    pad = np.zeros((h, 1), dtype=np.int64)
    cum_w = np.concatenate([pad, np.cumsum(water, axis=1, dtype=np.int64)], axis=1)
    cum_v = np.concatenate([pad, np.cumsum(valid, axis=1, dtype=np.int64)], axis=1)
    r = np.atleast_1d(np.asarray(radii_proj, dtype=float))
    n_w, n_v, n_c = (np.zeros(r.size, dtype=np.int64) for _ in range(3))
    for k, rk in enumerate(r):
        n_circle, _, (rows, lo, hi) = _counts(transform, shape, x, y, rk)
        n_c[k] = n_circle
        ok = hi >= lo
        rows, lo, hi = rows[ok], lo[ok], hi[ok]
        if rows.size == 0:
            continue
        rw, lw, hw = rows - row_off, lo - col_off, hi - col_off
        if rw.min() < 0 or rw.max() >= h or lw.min() < 0 or hw.max() >= w:
            raise ValueError(f"the window misses pixels of the circle of radius {rk}: "
                             "read circle_window() for the largest radius")
        n_w[k] = int((cum_w[rw, hw + 1] - cum_w[rw, lw]).sum())
        n_v[k] = int((cum_v[rw, hw + 1] - cum_v[rw, lw]).sum())
    with np.errstate(invalid="ignore", divide="ignore"):
        coverage = np.where(n_c > 0, n_v / np.maximum(n_c, 1), np.nan)
        f = np.where(n_v > 0, n_w / np.maximum(n_v, 1), np.nan)
    accepted = (n_v > 0) & (coverage >= coverage_threshold)
    return CircleStats(np.where(accepted, f, np.nan), coverage, n_w, n_v, n_c, accepted)


def _ns_int(t) -> np.ndarray:
    t = np.asarray(getattr(t, "values", t), dtype="datetime64[ns]")
    return t.astype(np.int64)


def per_scene_arrays(table: pd.DataFrame, columns, radius_m) -> tuple[np.ndarray, dict]:
    """The radar stage's long per-scene table as arrays: ``(time (n_scene,), {column:
    array (n_scene, n_radius)})``, one row per (time, scene_id) of the table in that
    order, radii in the order of ``radius_m`` (NaN where a radius is missing).

    Examples
    --------
    >>> t = pd.DataFrame({"time": pd.to_datetime(["2020-06-02", "2020-06-01",
    ...                                           "2020-06-01"]),
    ...                   "scene_id": ["b", "a", "a"], "radius_m": [2e3, 2e3, 4e3],
    ...                   "f_ow": [0.2, 0.1, 0.3]})
    >>> times, wide = per_scene_arrays(t, ["f_ow"], [2e3, 4e3])
    >>> wide["f_ow"].tolist()
    [[0.1, 0.3], [0.2, nan]]
    """
    radii = [float(r) for r in radius_m]
    keyed = table.groupby(["time", "scene_id", "radius_m"], sort=True)[list(columns)].first()
    wide = {k: keyed[k].unstack("radius_m").reindex(columns=radii) for k in columns}
    index = next(iter(wide.values())).index
    times = pd.DatetimeIndex(index.get_level_values("time")).tz_localize(None).values
    return times, {k: v.to_numpy(float) for k, v in wide.items()}


def _series_one_pattern(ts_all: np.ndarray, ok: np.ndarray, values: np.ndarray,
                        td: np.ndarray, gap: int) -> tuple[np.ndarray, np.ndarray]:
    """Interpolate the rows of ``values`` (n_row, n_scene), all counting the same scenes
    ``ok``, at the times ``td``: ``(f_ow (n_row, n_time), flag (n_time,))``."""
    rows = values.shape[0]
    v = np.full((rows, td.size), np.nan)
    fl = np.zeros(td.size, dtype=np.int8)
    if not ok.any():
        fl[:] = 4
        return v, fl
    xs, inv = np.unique(ts_all[ok], return_inverse=True)  # same-time scenes averaged
    inv = inv.ravel()
    # one bincount over all rows: each row's bins sum in scene order, as row by row
    bins = (inv[None, :] + xs.size * np.arange(rows)[:, None]).ravel()
    sums = np.bincount(bins, weights=values[:, ok].ravel(), minlength=rows * xs.size)
    ys = sums.reshape(rows, xs.size) / np.bincount(inv)[None, :]
    i = np.searchsorted(xs, td, side="right") - 1
    exact = (i >= 0) & (xs[np.clip(i, 0, None)] == td)
    v[:, exact] = ys[:, i[exact]]
    mid = ~exact & (i >= 0) & (i < xs.size - 1)
    im = i[mid]
    x0, x1 = xs[im], xs[np.minimum(im + 1, xs.size - 1)]
    w = (td[mid] - x0).astype(float) / np.maximum(x1 - x0, 1).astype(float)
    vm = ys[:, im] * (1.0 - w) + ys[:, np.minimum(im + 1, xs.size - 1)] * w
    long_gap = (x1 - x0) > gap
    v[:, mid] = np.where(long_gap, np.nan, vm)
    fl[mid] = np.where(long_gap, 1, 0)
    before = i < 0
    hold_b = before & (xs[0] - td <= gap)
    v[:, hold_b] = ys[:, :1]
    fl[before & ~hold_b] = 2
    after = ~exact & (i == xs.size - 1)
    hold_a = after & (td - xs[-1] <= gap)
    v[:, hold_a] = ys[:, -1:]
    fl[after & ~hold_a] = 3
    return v, fl


def radar_series_members(scene_time, f_ow, target_time, radius_m,
                         max_gap=MAX_SCENE_GAP) -> tuple[np.ndarray, np.ndarray]:
    """:func:`radar_time_series` for many sets of per-scene values at once (ensemble
    members): ``f_ow`` (n_member, n_scene, n_radius) gives ``(f_ow, flag)``, each
    (n_member, n_time, n_radius), as plain arrays.

    Members that count the same scenes at a radius share one interpolation; each
    member's numbers are those :func:`radar_series_arrays` gives it alone.
    """
    ts_all = _ns_int(scene_time).ravel()
    fv = np.asarray(f_ow, dtype=float)
    rad = np.atleast_1d(np.asarray(radius_m, dtype=float))
    if fv.ndim != 3 or fv.shape[1:] != (ts_all.size, rad.size):
        raise ValueError(f"f_ow must have shape (n_member, n_scene, n_radius) = "
                         f"(n, {ts_all.size}, {rad.size}), got {fv.shape}")
    td = np.asarray(getattr(target_time, "values", target_time),
                    dtype="datetime64[ns]").ravel().astype(np.int64)
    gap = int(pd.Timedelta(max_gap).value)
    out = np.full((fv.shape[0], td.size, rad.size), np.nan)
    flag = np.zeros((fv.shape[0], td.size, rad.size), dtype=np.int8)
    for k in range(rad.size):
        counts = np.isfinite(fv[:, :, k])
        groups: dict[bytes, list[int]] = {}
        for m, row in enumerate(counts):
            groups.setdefault(row.tobytes(), []).append(m)
        for members in groups.values():
            rows = np.asarray(members)
            v, fl = _series_one_pattern(ts_all, counts[rows[0]], fv[rows, :, k], td, gap)
            out[rows, :, k] = v
            flag[rows, :, k] = fl[None, :]
    return out, flag


def radar_series_arrays(scene_time, f_ow, target_time, radius_m,
                        max_gap=MAX_SCENE_GAP) -> tuple[np.ndarray, np.ndarray]:
    """The numbers of :func:`radar_time_series`: ``(f_ow, flag)``, each (n_time,
    n_radius), as plain arrays."""
    fv = np.asarray(f_ow, dtype=float)
    if fv.ndim == 1:
        fv = fv[:, None]
    n_scene = np.size(getattr(scene_time, "values", scene_time))
    n_radius = np.atleast_1d(np.asarray(radius_m, dtype=float)).size
    if fv.shape != (n_scene, n_radius):
        raise ValueError(f"f_ow must have shape (n_scene, n_radius) = "
                         f"{(n_scene, n_radius)}, got {fv.shape}")
    out, flag = radar_series_members(scene_time, fv[None], target_time, radius_m, max_gap)
    return out[0], flag[0]


def radar_time_series(scene_time, f_ow, target_time, radius_m,
                      max_gap=MAX_SCENE_GAP) -> xr.DataArray:
    """Radar f_ow at any times from per-scene values, per radius.

    Scenes at the same time are averaged (over those that count). Between two
    consecutive counting scenes no more than ``max_gap`` apart (a gap of exactly
    ``max_gap`` is bridged), f_ow is linear in time; for up to ``max_gap`` before the
    first and after the last it is held constant; elsewhere NaN, with a flag saying why.

    Parameters
    ----------
    scene_time : array_like of datetime64, shape (n_scene,)
        Scene acquisition times (UTC), any order.
    f_ow : array_like of float, shape (n_scene, n_radius) or (n_scene,)
        Per-scene open-water fraction [1]; NaN where the scene does not count.
    target_time : array_like of datetime64, shape (n_time,)
        Times wanted (UTC).
    radius_m : array_like of float, shape (n_radius,)
        Ground radii [m], the ``radius`` coordinate.
    max_gap : pandas.Timedelta, optional
        Longest gap bridged and longest hold beyond the ends (default
        ``constants.MAX_SCENE_GAP_DAYS`` days).

    Returns
    -------
    xarray.DataArray
        ``f_ow(time, radius)`` [1] with coords ``time``, ``radius`` [m] and
        ``flag(time, radius)`` (int8; values index ``FLAG_MEANINGS``: 0 ok,
        1 gap longer than max, 2 before the first scene beyond the hold, 3 after the last
        scene beyond the hold, 4 no counting scene).

    Examples
    --------
    >>> st = np.array(["2020-06-01", "2020-06-05"], "datetime64[ns]")
    >>> tt = np.array(["2020-06-03", "2020-06-20"], "datetime64[ns]")
    >>> out = radar_time_series(st, [0.1, 0.3], tt, [15000.0])
    >>> out.values[:, 0].round(3).tolist(), out.flag.values[:, 0].tolist()
    ([0.2, nan], [0, 3])
    """
    td_dt = np.asarray(getattr(target_time, "values", target_time),
                       dtype="datetime64[ns]").ravel()
    rad = np.atleast_1d(np.asarray(radius_m, dtype=float))
    out, flag = radar_series_arrays(scene_time, f_ow, td_dt, rad, max_gap)
    flag_da = xr.DataArray(flag, dims=("time", "radius"),
                           attrs={"flag_values": list(range(len(FLAG_MEANINGS))),
                                  "flag_meanings": " ".join(FLAG_MEANINGS)})
    return xr.DataArray(
        out, dims=("time", "radius"), name="f_ow",
        coords={"time": td_dt, "radius": ("radius", rad, {"units": "m"}), "flag": flag_da},
        attrs={"units": "1", "long_name": "open-water fraction from radar scenes",
               "max_gap_s": pd.Timedelta(max_gap).total_seconds()})
