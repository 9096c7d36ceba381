"""The floe context of a buoy in a classified radar scene.

Per scene and buoy, inside the circle of pixel centres within a radius of the buoy (the
rule of :mod:`floeheat.openwater`, radius in projection units, i.e. ground radius times
the local scale factor):

- **the buoy's floe**: the connected component of ice pixels that holds the buoy's
  pixel (the pixel whose area contains the buoy), found among the ice pixels of the
  circle only (clipped to the circle: ice connected only through pixels outside the
  circle does not count), with 4-connectivity (pixels sharing an edge). Its area
  [m2] is the pixel count times the ground pixel area, and its equivalent diameter
  ``sqrt(4 A / pi)`` [m] is the diameter of the disc of the same area. Whether it
  reaches the circle's rim is flagged: then it is truncated by the circle and its area
  is a lower bound.
- **distance to open water**: the Euclidean distance from the centre of the buoy's
  pixel to the centre of the nearest water pixel of the circle
  (:func:`scipy.ndimage.distance_transform_edt` with the pixel sizes as sampling),
  in ground metres; 0 when the buoy's pixel is water, NaN when the circle has no
  water. No-data pixels are not water; the distance to the nearest no-data pixel (or
  pixel beyond the scene's edge) of the circle is reported beside it, so that a
  caller can see when an unobserved pixel is closer than the water found.
- **leads crossing the circle**: open-water components of the circle (8-connectivity,
  pixels sharing an edge or a corner; the dual of the 4-connected ice, so that a
  diagonal one-pixel lead both separates floes and is one lead) that meet the circle's
  rim in at least two separate arcs, i.e. that enter and leave the circle. The rim is
  the set of circle pixels with an edge or corner neighbour outside the circle (a
  4-connected ring that no 8-connected lead can slip through), ordered by angle
  around the buoy; an arc is a maximal run of consecutive rim pixels of one component.
  Components that meet the rim in one arc (a lead that ends inside the circle) are
  counted separately (``n_leads_touching`` counts every component meeting the rim).

Distances and areas are on the ground: projection distances divided by the local scale
factor ``k`` (areas by ``k**2``); ``k = 1`` treats projection units as ground metres.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import xarray as xr
from scipy import ndimage
from skimage import measure

from floeheat.constants import MASK_CODES
from floeheat.openwater import _steps, circle_window

__all__ = ["FloeContext", "circle_pixels", "buoy_pixel", "floe_context",
           "scene_floe_context", "rim_arcs", "distance_from_pixel"]


class FloeContext(NamedTuple):
    """Floe context of one buoy in one scene (see the module docstring)."""

    buoy_class: int  #: mask code of the buoy's pixel (water, ice or no data)
    floe_area_m2: float  #: area of the buoy's floe within the circle [m2]; 0 on water
    floe_diameter_m: float  #: equivalent diameter sqrt(4 A / pi) [m]
    floe_at_rim: bool  #: the floe reaches the circle's rim (truncated, area a lower bound)
    distance_to_water_m: float  #: buoy pixel centre to nearest water pixel centre [m]
    distance_to_nodata_m: float  #: ... to the nearest no-data pixel of the circle [m]
    n_leads_crossing: int  #: water components meeting the rim in >= 2 arcs
    n_leads_touching: int  #: water components meeting the rim at all
    n_circle: int  #: pixels of the circle, in and beyond the scene


def circle_pixels(window_shape, row_off: int, col_off: int, transform, x: float, y: float,
                  radius_proj: float) -> np.ndarray:
    """Which pixels of a window have their centre inside a circle.

    Parameters
    ----------
    window_shape : tuple of int
        (h, w) of the window.
    row_off, col_off : int
        Scene row and column of the window's first pixel (may be negative).
    transform : affine.Affine or sequence of 6 float
        Scene transform (pixel corners), no rotation.
    x, y : float
        Circle centre [projection units].
    radius_proj : float
        Radius [projection units].

    Returns
    -------
    numpy.ndarray of bool, shape (h, w)

    Examples
    --------
    >>> from affine import Affine
    >>> int(circle_pixels((10, 10), 0, 0, Affine(1, 0, 0, 0, -1, 10), 5.0, 5.0, 3.0).sum())
    32
    """
    a, c, e, f = _steps(transform)
    h, w = int(window_shape[0]), int(window_shape[1])
    yc = f + e * (np.arange(h) + row_off + 0.5) - y
    xc = c + a * (np.arange(w) + col_off + 0.5) - x
    return np.add.outer(yc * yc, xc * xc) <= float(radius_proj) ** 2


def buoy_pixel(transform, x: float, y: float) -> tuple[int, int]:
    """Scene (row, col) of the pixel whose area contains a position.

    Parameters
    ----------
    transform : affine.Affine or sequence of 6 float
        Scene transform (pixel corners), no rotation.
    x, y : float
        Position [projection units].

    Returns
    -------
    tuple of int
        (row, col); may lie outside the scene.

    Examples
    --------
    >>> from affine import Affine
    >>> buoy_pixel(Affine(10, 0, 0, 0, -10, 100), 25.0, 91.0)
    (0, 2)
    """
    a, c, e, f = _steps(transform)
    return int(np.floor((y - f) / e)), int(np.floor((x - c) / a))


def rim_arcs(labels, rim, centre_rc, min_gap_px: int = 2) -> dict:
    """Number of separate rim arcs met by each labelled component.

    The rim pixels are ordered by angle around the centre (a closed ring). Two rim
    pixels of one component belong to separate arcs when at least ``min_gap_px``
    consecutive rim pixels between them belong to something else; a shorter gap is a
    staircase artefact of the discrete rim, not a separation.

    Parameters
    ----------
    labels : numpy.ndarray of int, shape (h, w)
        Component labels (0 background).
    rim : numpy.ndarray of bool, shape (h, w)
        Rim pixels of the circle.
    centre_rc : tuple of float
        Circle centre in (fractional) window pixel coordinates (row, col), to order
        the rim by angle.
    min_gap_px : int
        Shortest gap [rim pixels] that separates two arcs.

    Returns
    -------
    dict of int to int
        Label -> number of arcs (only labels that meet the rim).

    Examples
    --------
    >>> lab = np.zeros((5, 5), int); lab[2, :] = 1          # a lead across the window
    >>> rim = np.zeros((5, 5), bool); rim[0, :] = rim[-1, :] = rim[:, 0] = rim[:, -1] = True
    >>> rim_arcs(lab, rim, (2.0, 2.0))
    {1: 2}
    """
    rr, cc = np.nonzero(rim)
    order = np.argsort(np.arctan2(rr - centre_rc[0], cc - centre_rc[1]), kind="stable")
    lab = labels[rr[order], cc[order]]
    n = lab.size
    pos = np.nonzero(lab)[0]
    if pos.size == 0:
        return {}
    lv = lab[pos]
    srt = np.lexsort((pos, lv))
    lv, pos = lv[srt], pos[srt]
    first = np.r_[True, lv[1:] != lv[:-1]]
    last = np.r_[lv[1:] != lv[:-1], True]
    gap = np.empty(pos.size, dtype=np.int64)          # rim pixels before the next one
    gap[:-1] = pos[1:] - pos[:-1] - 1
    start_of = np.maximum.accumulate(np.where(first, np.arange(pos.size), 0))
    gap[last] = pos[start_of[last]] + n - pos[last] - 1   # cyclic: back to the first
    separated = gap >= min_gap_px
    counts = np.bincount(np.cumsum(first) - 1, weights=separated)
    labs = lv[first]
    return {int(k): max(1, int(c)) for k, c in zip(labs, counts)}


def distance_from_pixel(target, row: int, col: int, sampling=(1.0, 1.0)) -> float:
    """Distance from the centre of pixel (row, col) to the nearest pixel centre of
    ``target`` (bool array), pixels ``sampling`` = (dy, dx) apart: the value the
    Euclidean distance transform of ``~target`` holds at that pixel, without computing
    it at every other pixel. NaN when ``target`` is empty.

    Examples
    --------
    >>> m = np.zeros((5, 5), bool); m[4, 1] = True
    >>> distance_from_pixel(m, 0, 4, (10.0, 10.0))
    50.0
    """
    rows, cols = np.nonzero(np.asarray(target, bool))
    if rows.size == 0:
        return float("nan")
    d2 = ((rows - row) * float(sampling[0])) ** 2 + ((cols - col) * float(sampling[1])) ** 2
    return float(np.sqrt(d2.min()))


def floe_context(window, row_off: int, col_off: int, transform, shape, x: float, y: float,
                 radius_proj: float, scale_factor: float = 1.0, codes=None) -> FloeContext:
    """Floe, distance to open water and crossing leads around a buoy in a mask window.

    Parameters
    ----------
    window : array_like of uint8, shape (h, w)
        Mask pixels at scene rows ``row_off ..`` and cols ``col_off ..``, holding every
        in-scene pixel of the circle (read with :func:`floeheat.openwater.circle_window`).
    row_off, col_off : int
        Scene row and column of ``window[0, 0]``.
    transform : affine.Affine or sequence of 6 float
        Scene transform (pixel corners), no rotation.
    shape : tuple of int
        Scene (rows, cols).
    x, y : float
        Buoy position [projection units].
    radius_proj : float
        Radius [projection units] (ground radius times ``scale_factor``).
    scale_factor : float
        Local scale factor k of the projection at the buoy [1]: ground metres =
        projection units / k.
    codes : dict, optional
        Mask codes (default ``constants.MASK_CODES``).

    Returns
    -------
    FloeContext

    Examples
    --------
    >>> from affine import Affine
    >>> win = np.ones((21, 21), np.uint8)
    >>> win[:, 14] = 0                                  # a lead 4 pixels east of the buoy
    >>> fc = floe_context(win, 0, 0, Affine(10, 0, 0, 0, -10, 210), (21, 21),
    ...                   105.0, 105.0, 100.0)
    >>> fc.distance_to_water_m, fc.n_leads_crossing
    (40.0, 1)
    """
    codes = dict(MASK_CODES if codes is None else codes)
    a, _, e, _ = _steps(transform)
    k = float(scale_factor)
    dy_m, dx_m = abs(e) / k, abs(a) / k
    win = np.asarray(window)
    h0, w0 = int(shape[0]), int(shape[1])
    # pad the window to the whole circle: pixels beyond the scene are no data
    r_px = float(radius_proj) / min(abs(a), abs(e))
    br, bc = buoy_pixel(transform, x, y)
    m = int(np.ceil(r_px)) + 2
    r0, c0 = min(row_off, br - m), min(col_off, bc - m)
    r1 = max(row_off + win.shape[0], br + m + 1)
    c1 = max(col_off + win.shape[1], bc + m + 1)
    grid = np.full((r1 - r0, c1 - c0), codes["nodata"], dtype=win.dtype if win.size else
                   np.uint8)
    grid[row_off - r0:row_off - r0 + win.shape[0], col_off - c0:col_off - c0 + win.shape[1]] = win
    rows = np.arange(r0, r1)[:, None]
    cols = np.arange(c0, c1)[None, :]
    outside_scene = (rows < 0) | (rows >= h0) | (cols < 0) | (cols >= w0)
    grid = np.where(outside_scene, codes["nodata"], grid)
    inside = circle_pixels(grid.shape, r0, c0, transform, x, y, radius_proj)
    n_circle = int(inside.sum())
    water = inside & (grid == codes["water"])
    ice = inside & (grid == codes["ice"])
    nodata = inside & ~water & ~ice
    bi, bj = br - r0, bc - c0
    on_grid = 0 <= bi < grid.shape[0] and 0 <= bj < grid.shape[1]
    in_circle = on_grid and bool(inside[bi, bj])
    cls = int(grid[bi, bj]) if in_circle else int(codes["nodata"])
    if cls not in (codes["water"], codes["ice"]):
        cls = int(codes["nodata"])
    # rim: circle pixels with an edge or corner neighbour outside the circle (a
    # 4-connected ring, which no 8-connected lead can cross without meeting it)
    rim = inside & ~ndimage.binary_erosion(inside, structure=np.ones((3, 3), bool),
                                           border_value=0)
    # the buoy's floe
    area = diam = np.nan
    at_rim = False
    if cls == codes["water"]:
        area = diam = 0.0
    elif cls == codes["ice"]:
        lab = measure.label(ice, connectivity=1)
        floe = lab == lab[bi, bj]
        area = float(floe.sum()) * dx_m * dy_m
        diam = float(np.sqrt(4.0 * area / np.pi))
        at_rim = bool((floe & rim).any())
    # distances from the buoy's pixel centre
    dist_w = dist_n = np.nan
    if in_circle:
        sampling = (dy_m, dx_m)
        if water.any():
            dist_w = distance_from_pixel(water, bi, bj, sampling)
        if nodata.any():
            dist_n = distance_from_pixel(nodata, bi, bj, sampling)
    # leads
    wl = measure.label(water, connectivity=2)
    a_y = (y - (tuple(transform)[5] + e * (r0 + 0.0))) / e - 0.5
    a_x = (x - (tuple(transform)[2] + a * (c0 + 0.0))) / a - 0.5
    arcs = rim_arcs(wl, rim, (a_y, a_x))
    n_cross = sum(1 for v in arcs.values() if v >= 2)
    return FloeContext(cls, area, diam, at_rim, dist_w, dist_n, n_cross, len(arcs), n_circle)


def scene_floe_context(mask, transform, x, y, radius_proj, scale_factor=1.0,
                       buoy=None, codes=None) -> xr.Dataset:
    """Floe context of several buoys in one classified scene.

    Parameters
    ----------
    mask : array_like of uint8, shape (rows, cols)
        The whole scene's mask (numpy, or dask: only each circle's window is computed).
    transform : affine.Affine or sequence of 6 float
        Scene transform (pixel corners), no rotation.
    x, y : array_like of float, shape (n,)
        Buoy positions [projection units].
    radius_proj : array_like of float, shape (n,) or scalar
        Radius per buoy [projection units].
    scale_factor : array_like of float, shape (n,) or scalar
        Local scale factor per buoy [1].
    buoy : array_like of str, shape (n,), optional
        Buoy identifiers, the ``buoy`` coordinate.
    codes : dict, optional
        Mask codes.

    Returns
    -------
    xarray.Dataset
        One variable per :class:`FloeContext` field along dimension ``buoy``; NaN (or
        no-data class, zero counts) for buoys whose circle misses the scene.

    Examples
    --------
    >>> from affine import Affine
    >>> m = np.ones((40, 40), np.uint8); m[:, 20] = 0
    >>> ds = scene_floe_context(m, Affine(10, 0, 0, 0, -10, 400), [105.0], [205.0], 120.0)
    >>> float(ds.distance_to_water_m[0]), int(ds.n_leads_crossing[0])
    (100.0, 1)
    """
    xs, ys = np.atleast_1d(np.asarray(x, float)), np.atleast_1d(np.asarray(y, float))
    n = xs.size
    rs = np.broadcast_to(np.asarray(radius_proj, float), (n,))
    ks = np.broadcast_to(np.asarray(scale_factor, float), (n,))
    shape = tuple(np.shape(mask))
    nod = int(dict(MASK_CODES if codes is None else codes)["nodata"])
    out = []
    for i in range(n):
        win = circle_window(transform, shape, xs[i], ys[i], rs[i])
        if win is None:
            out.append(FloeContext(nod, np.nan, np.nan, False, np.nan, np.nan, 0, 0, 0))
            continue
        data = np.asarray(mask[win[0], win[1]])
        out.append(floe_context(data, win[0].start, win[1].start, transform, shape, xs[i],
                                ys[i], rs[i], ks[i], codes))
    units = {"floe_area_m2": "m2", "floe_diameter_m": "m", "distance_to_water_m": "m",
             "distance_to_nodata_m": "m", "buoy_class": "1", "n_leads_crossing": "1",
             "n_leads_touching": "1", "n_circle": "1", "floe_at_rim": "1"}
    coords = {"buoy": np.asarray(buoy) if buoy is not None else np.arange(n)}
    return xr.Dataset({f: ("buoy", np.array([getattr(o, f) for o in out]),
                           {"units": units[f]}) for f in FloeContext._fields}, coords=coords)
