"""Basin-wide climatology: regions, months, and array-resampling bootstrap intervals.

The input is a table of window records, one row per deployment x source x radius x
budget window (see :data:`WINDOW_COLUMNS`), built from the per-deployment budgets.
Regions come from GeoJSON polygons (longitude/latitude, RFC 7946) or, by default,
from an equal-area grid (EASE-Grid 2.0, 200 km cells; science.md).
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from floeheat import constants

__all__ = [
    "WINDOW_COLUMNS",
    "CLIMATOLOGY_COLUMNS",
    "grid_region_names",
    "polygon_region_names",
    "read_regions_geojson",
    "climatology_table",
    "bootstrap_median_by_array",
    "replicate_medians",
]

#: Columns of the window-record table that :func:`climatology_table` reads.
WINDOW_COLUMNS = (
    "deployment_id", "array_id", "ice_type", "source", "radius_m", "window_start",
    "window_end", "latitude", "longitude", "f_ow_mean", "t_ice", "sw_down_MJ",
    "q_ow_MJ", "q_tr_MJ", "q_st_MJ", "q_w_MJ",
)

#: Columns of climatology.csv (outputs.md), in order; ``ice_type`` is added after
#: ``radius_m`` when the archive gives ice types.
CLIMATOLOGY_COLUMNS = (
    "region", "month", "source", "radius_m", "n_deployments", "n_windows", "f_ow_mean",
    "t_ice_median", "t_ice_p25", "t_ice_p75", "t_ice_ci_lo", "t_ice_ci_hi", "share_ow",
    "share_tr", "share_stored", "share_to_ice",
)


def grid_region_names(latitude, longitude, hemisphere: str = "north",
                      cell_m: float = constants.CLIMATOLOGY_CELL_M) -> np.ndarray:
    """Name the equal-area grid cell that holds each point.

    Parameters
    ----------
    latitude, longitude : array_like
        Positions [degrees_north, degrees_east].
    hemisphere : {"north", "south"}
        Selects EPSG:6931 or EPSG:6932 (EASE-Grid 2.0, Lambert azimuthal equal-area).
    cell_m : float
        Cell size [m].

    Returns
    -------
    numpy.ndarray of str
        ``"ease-n200km_x{i}_y{j}"`` where ``i, j`` index the cell whose lower-left
        corner is ``(i * cell_m, j * cell_m)`` in the grid's projected coordinates.

    Examples
    --------
    >>> grid_region_names([90.0], [0.0]).tolist()
    ['ease-n200km_x0_y0']
    >>> grid_region_names([89.0], [0.0]).tolist()  # about 111 km south of the pole
    ['ease-n200km_x0_y-1']
    """
    from pyproj import Transformer

    if hemisphere not in ("north", "south"):
        raise ValueError(f"hemisphere must be 'north' or 'south', not {hemisphere!r}")
    crs = constants.CRS_CLIMATOLOGY_NORTH if hemisphere == "north" else \
        constants.CRS_CLIMATOLOGY_SOUTH
    tr = Transformer.from_crs("EPSG:4326", crs, always_xy=True)
    x, y = tr.transform(np.asarray(longitude, float), np.asarray(latitude, float))
    ix = np.floor(np.asarray(x) / cell_m).astype(int)
    iy = np.floor(np.asarray(y) / cell_m).astype(int)
    tag = f"ease-{hemisphere[0]}{cell_m / 1000:g}km"
    return np.array([f"{tag}_x{i}_y{j}" for i, j in zip(ix.ravel(), iy.ravel())])


def read_regions_geojson(text: str) -> list[tuple[str, object]]:
    """Parse a GeoJSON FeatureCollection of polygons into (name, geometry) pairs.

    Each feature's name comes from its ``name`` property (else ``region``, else
    ``id``). Coordinates are longitude/latitude (RFC 7946).

    Examples
    --------
    >>> gj = ('{"type": "FeatureCollection", "features": [{"type": "Feature", '
    ...       '"properties": {"name": "inner"}, "geometry": {"type": "Polygon", '
    ...       '"coordinates": [[[0, 80], [10, 80], [10, 85], [0, 85], [0, 80]]]}}]}')
    >>> [name for name, _ in read_regions_geojson(gj)]
    ['inner']
    """
    from shapely.geometry import shape

    doc = json.loads(text)
    features = doc.get("features") if isinstance(doc, Mapping) else None
    if not isinstance(features, list) or not features:
        raise ValueError("the regions file must be a GeoJSON FeatureCollection with features")
    regions = []
    for i, feat in enumerate(features):
        props = feat.get("properties") or {}
        name = props.get("name") or props.get("region") or feat.get("id")
        if not name:
            raise ValueError(f"feature {i} has no 'name' property; give every region a name")
        geom = shape(feat["geometry"])
        if geom.geom_type not in ("Polygon", "MultiPolygon"):
            raise ValueError(f"feature {name!r} is a {geom.geom_type}, not a polygon")
        regions.append((str(name), geom))
    return regions


def polygon_region_names(latitude, longitude,
                         regions: Sequence[tuple[str, object]]) -> np.ndarray:
    """Name the first polygon that contains each point ("" outside every polygon).

    Examples
    --------
    >>> from shapely.geometry import box
    >>> polygon_region_names([82.0, 70.0], [5.0, 5.0], [("inner", box(0, 80, 10, 85))]).tolist()
    ['inner', '']
    """
    from shapely import contains_xy

    lat = np.asarray(latitude, float)
    lon = np.asarray(longitude, float)
    names = np.full(lat.shape, "", dtype=object)
    for name, geom in regions:
        free = names == ""
        if not free.any():
            break
        inside = contains_xy(geom, lon, lat) & free
        # GeoJSON longitudes may run 0..360 or -180..180: try the other convention too.
        inside |= contains_xy(geom, np.where(lon < 0, lon + 360.0, lon - 360.0), lat) & free
        names[inside] = name
    return names.astype(str)


def replicate_medians(values: np.ndarray, rows: list, picks: np.ndarray,
                      member: np.ndarray | None = None) -> np.ndarray:
    """Median of each bootstrap replicate: the records of the groups it drew.

    ``values`` (n_record,), or (n_record, n_member) with ``member`` (n_boot,) the column
    of each replicate; ``rows`` the records of each group; ``picks`` (n_boot, n_pick)
    the groups each replicate drew. All replicates are sorted at once in one padded
    array; the numbers are those of ``np.median`` of each replicate alone.
    """
    sizes = np.array([r.size for r in rows])
    starts = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    records = np.concatenate(rows)  # the records, group after group
    n_boot = picks.shape[0]
    drawn = picks.ravel()
    seg = sizes[drawn]  # one segment of records per drawn group
    n = seg.reshape(picks.shape).sum(axis=1)
    within = np.arange(seg.sum()) - np.repeat(np.cumsum(seg) - seg, seg)
    rec = records[np.repeat(starts[drawn], seg) + within]
    rep = np.repeat(np.arange(n_boot), n)
    col = np.arange(n.sum()) - np.repeat(np.cumsum(n) - n, n)
    padded = np.full((n_boot, int(n.max())), np.inf)
    padded[rep, col] = values[rec] if member is None else values[rec, member[rep]]
    padded.sort(axis=1)
    b = np.arange(picks.shape[0])
    lo, hi = padded[b, (n - 1) // 2], padded[b, n // 2]
    # np.median: the middle value, or the mean of the two middle values
    return np.where(n % 2 == 1, lo, (lo + hi) / 2.0)


def bootstrap_median_by_array(values, groups, n_boot: int, rng: np.random.Generator,
                              weights_member=None) -> tuple[float, float]:
    """90 % bootstrap interval of the median, resampling whole groups (arrays).

    Deployments on one floe cluster are not independent, so the resampling unit is
    the array: each replicate draws arrays with replacement and takes the median of
    all their values.

    Parameters
    ----------
    values : array_like
        One value per window record.
    groups : array_like
        The array ID of each record.
    n_boot : int
        Number of bootstrap replicates.
    rng : numpy.random.Generator
        Seeded generator (the caller seeds it from the config).

    Returns
    -------
    (float, float)
        The 5th and 95th percentiles of the replicate medians (NaN with no values).

    Examples
    --------
    >>> lo, hi = bootstrap_median_by_array([1.0, 2.0, 3.0, 4.0], ["a", "a", "b", "b"],
    ...                                    200, np.random.default_rng(0))
    >>> 1.0 <= lo <= hi <= 4.0
    True
    """
    values = np.asarray(values, float)
    groups = np.asarray(groups)
    ok = np.isfinite(values)
    values, groups = values[ok], groups[ok]
    if values.size == 0:
        return float("nan"), float("nan")
    labels, inverse = np.unique(groups, return_inverse=True)
    rows = [np.flatnonzero(inverse == k) for k in range(labels.size)]
    picks = rng.integers(0, labels.size, size=(n_boot, labels.size))
    medians = replicate_medians(values, rows, picks)
    lo, hi = np.percentile(medians, [5.0, 95.0])
    return float(lo), float(hi)


def _ratio(num: float, den: float) -> float:
    return float(num / den) if np.isfinite(den) and den != 0 else float("nan")


def climatology_table(windows: pd.DataFrame, region_names, *, n_boot: int = 1000,
                      seed: int = 0, split_ice_type: bool = False,
                      member_values=None) -> pd.DataFrame:
    """Aggregate window records into the climatology table of outputs.md.

    Parameters
    ----------
    windows : pandas.DataFrame
        Window records with :data:`WINDOW_COLUMNS`. Windows without a finite
        ``t_ice`` still count for open-water and shares when their energies are finite.
    region_names : array_like of str
        The region of each record (from :func:`grid_region_names` or
        :func:`polygon_region_names`); records outside every region ("") are dropped.
    n_boot : int
        Bootstrap replicates for ``t_ice_ci_lo``/``t_ice_ci_hi``.
    seed : int
        Seed of the bootstrap; each cell draws from its own stream derived from the
        seed and the cell's position in the sorted output, so results do not depend
        on scheduling.
    split_ice_type : bool
        Add ``ice_type`` to the grouping (when the archive gives ice types).
    member_values : numpy.ndarray (n_records, n_member), optional
        Each record's ensemble members of ``t_ice`` (row order of ``windows``); the
        interval then combines the array bootstrap with the ensemble
        (:func:`floeheat.ensemble.bootstrap_median_with_members`).

    Returns
    -------
    pandas.DataFrame
        One row per region x month x source x radius (x ice_type); month is the
        calendar month (1-12) of each window's mid-time. Shares: ``share_ow`` and
        ``share_tr`` are fractions of the incident solar (sums of q_ow and q_tr over
        the sum of F_sw dt); ``share_stored`` and ``share_to_ice`` are fractions of
        the solar that entered the ocean (q_ow + q_tr).

    Examples
    --------
    >>> w = pd.DataFrame({"deployment_id": ["a", "b"], "array_id": ["A", "B"],
    ...     "ice_type": ["", ""], "source": ["radar"] * 2, "radius_m": [15000.0] * 2,
    ...     "window_start": pd.to_datetime(["2024-07-01", "2024-07-01"]),
    ...     "window_end": pd.to_datetime(["2024-07-16", "2024-07-16"]),
    ...     "latitude": [85.0, 85.0], "longitude": [0.0, 0.0], "f_ow_mean": [0.1, 0.2],
    ...     "t_ice": [0.04, 0.06], "sw_down_MJ": [300.0, 300.0], "q_ow_MJ": [28.0, 56.0],
    ...     "q_tr_MJ": [10.8, 14.4], "q_st_MJ": [20.0, 30.0], "q_w_MJ": [18.8, 40.4]})
    >>> t = climatology_table(w, ["r1", "r1"], n_boot=50)
    >>> t[["region", "month", "n_deployments", "t_ice_median"]].values.tolist()
    [['r1', 7, 2, 0.05]]
    """
    df = windows.copy()
    df["_row"] = np.arange(len(df))  # position in member_values
    df["region"] = np.asarray(region_names, dtype=str)
    df = df[df["region"] != ""]
    mid = df["window_start"] + (df["window_end"] - df["window_start"]) / 2
    df["month"] = pd.DatetimeIndex(mid).month
    keys = ["region", "month", "source", "radius_m"]
    if split_ice_type:
        df["ice_type"] = df["ice_type"].fillna("").astype(str)
        keys.append("ice_type")
    columns = list(CLIMATOLOGY_COLUMNS)
    if split_ice_type:
        columns.insert(4, "ice_type")
    if df.empty:
        return pd.DataFrame(columns=columns)
    root = np.random.SeedSequence(seed)
    groups = sorted(df.groupby(keys, sort=True), key=lambda kv: kv[0])
    streams = root.spawn(len(groups))
    rows = []
    for (key, cell), stream in zip(groups, streams):
        t = cell["t_ice"].to_numpy(float)
        finite = np.isfinite(t)
        if member_values is None:
            lo, hi = bootstrap_median_by_array(t, cell["array_id"].astype(str).to_numpy(),
                                               n_boot, np.random.default_rng(stream))
        else:  # the ensemble's members too (floeheat.ensemble)
            from floeheat.ensemble import bootstrap_median_with_members

            lo, hi = bootstrap_median_with_members(
                t, member_values[cell["_row"].to_numpy()],
                cell["array_id"].astype(str).to_numpy(), n_boot,
                np.random.default_rng(stream))
        energy = cell[["sw_down_MJ", "q_ow_MJ", "q_tr_MJ", "q_st_MJ", "q_w_MJ"]]
        energy = energy[np.isfinite(energy.to_numpy(float)).all(axis=1)].sum()
        entered = energy["q_ow_MJ"] + energy["q_tr_MJ"]
        row = dict(zip(keys, key))
        row.update(
            n_deployments=int(cell["deployment_id"].nunique()),
            n_windows=int(len(cell)),
            f_ow_mean=float(np.nanmean(cell["f_ow_mean"])) if cell["f_ow_mean"].notna().any()
            else float("nan"),
            t_ice_median=float(np.median(t[finite])) if finite.any() else float("nan"),
            t_ice_p25=float(np.percentile(t[finite], 25)) if finite.any() else float("nan"),
            t_ice_p75=float(np.percentile(t[finite], 75)) if finite.any() else float("nan"),
            t_ice_ci_lo=lo,
            t_ice_ci_hi=hi,
            share_ow=_ratio(energy["q_ow_MJ"], energy["sw_down_MJ"]),
            share_tr=_ratio(energy["q_tr_MJ"], energy["sw_down_MJ"]),
            share_stored=_ratio(energy["q_st_MJ"], entered),
            share_to_ice=_ratio(energy["q_w_MJ"], entered),
        )
        rows.append(row)
    return pd.DataFrame(rows, columns=columns)
