"""Figures a practitioner looks at: budget terms, open water, transmittance, basin maps.

Each function takes in-memory objects (xarray / pandas) and returns a matplotlib
Figure; :mod:`floeheat.steps.figures` saves them. Colours come from the Okabe & Ito
(2008) colour-blind-safe palette; every axis carries its quantity and units.
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import xarray as xr  # noqa: E402

__all__ = ["PALETTE", "budget_figure", "openwater_figure", "floe_context_figure",
           "transmittance_figure", "fixed_margins", "fit_beside_legends", "MARGINS_IN",
           "track_map_figure", "climatology_figure", "attribution_figure", "save_figure"]

#: Okabe & Ito (2008), "Color Universal Design": colour-blind-safe qualitative colours.
PALETTE = ("#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#F0E442",
           "#000000")


#: Margins of the per-deployment figures [inch]: the y label and tick labels (left), the x
#: tick labels turned by 30 degrees and the x label (bottom), the title (top). Their
#: legends sit right of the axes and widen the figure (:func:`fit_beside_legends`).
MARGINS_IN = {"left": 0.95, "right": 0.15, "bottom": 1.05, "top": 0.4}


def save_figure(fig, path, *, tight: bool = True) -> None:
    """Save a figure as PNG without time stamps or version strings (same bytes each run).

    ``tight``: crop to what is drawn (``bbox_inches="tight"``, which draws the figure a
    second time to find it); otherwise the figure keeps its own margins
    (:func:`fixed_margins`), widened to the legends right of its axes, and is drawn once.
    """
    if tight:
        fig.savefig(path, dpi=110, metadata={"Software": None}, bbox_inches="tight")
    else:
        fit_beside_legends(fig)
        fig.savefig(path, dpi=110, metadata={"Software": None})
    plt.close(fig)


def fixed_margins(fig, **subplots) -> None:
    """Set the margins :data:`MARGINS_IN` in inches, whatever the figure's size
    (``subplots``: further :meth:`~matplotlib.figure.Figure.subplots_adjust` settings)."""
    w, h = fig.get_size_inches()
    fig.subplots_adjust(left=MARGINS_IN["left"] / w, right=1.0 - MARGINS_IN["right"] / w,
                        bottom=MARGINS_IN["bottom"] / h, top=1.0 - MARGINS_IN["top"] / h,
                        **subplots)


def fit_beside_legends(fig, pad_in: float = 0.1) -> None:
    """Widen the figure so that the legends right of its axes fit, every axes keeping its
    size and place in inches (only the legends' own text is laid out, not the axes')."""
    legends = [leg for ax in fig.axes if (leg := ax.get_legend()) is not None]
    if not legends:
        return
    renderer = fig.canvas.get_renderer()
    w, h = fig.get_size_inches()
    right_in = max(leg.get_window_extent(renderer).x1 for leg in legends) / fig.dpi
    extra = right_in + pad_in - w
    if extra <= 0:
        return
    boxes = [ax.get_position() for ax in fig.axes]
    fig.set_size_inches(w + extra, h)
    scale = w / (w + extra)
    for ax, box in zip(fig.axes, boxes):
        ax.set_position([box.x0 * scale, box.y0, box.width * scale, box.height])


def _legend(ax, **kwargs):
    """A legend beside the axes, right of them: it never hides data, and its place is
    fixed (matplotlib's "best" place tests every legend position against every plotted
    point, which costs more than the rest of the figure)."""
    return ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0,
                     **kwargs)


def _times(ds: xr.Dataset) -> np.ndarray:
    return ds["time"].values


def budget_figure(ds: xr.Dataset, title: str):
    """Cumulative budget terms per source at the largest radius: sources positive,
    sinks negative, the residual bold.

    Examples
    --------
    >>> t = pd.date_range("2024-07-01", periods=4, freq="D")
    >>> ds = xr.Dataset({v: (("time", "source", "radius"), np.zeros((4, 1, 1)))
    ...                  for v in ("q_ow", "q_w", "residual")},
    ...                 coords={"time": t, "source": ["radar"], "radius": [15000.0]})
    >>> ds["q_st"] = ("time", np.zeros(4))
    >>> fig = budget_figure(ds, "B1"); len(fig.axes)
    1
    """
    sources = list(ds["source"].values)
    fig, axes = plt.subplots(1, len(sources), figsize=(5.5 * len(sources), 4), squeeze=False,
                             sharey=True)
    t = _times(ds)
    for ax, source in zip(axes[0], sources):
        sel = ds.sel(source=source).isel(radius=-1)
        radius_km = float(sel["radius"]) / 1000.0
        ax.plot(t, sel["q_ow"], color=PALETTE[1], label="solar through open water (source)")
        ax.plot(t, -ds["q_st"], color=PALETTE[0], label="heat storage (sink)")
        ax.plot(t, -sel["q_w"], color=PALETTE[2], label="ocean-to-ice heat (sink)")
        ax.plot(t, sel["residual"], color=PALETTE[7], linewidth=2.5,
                label="residual (sources - sinks)")
        ax.axhline(0.0, color="0.6", linewidth=0.8)
        ax.set_title(f"{title}: {source}, {radius_km:g} km")
        ax.set_xlabel("time (UTC)")
        ax.tick_params(axis="x", labelrotation=30)
    axes[0][0].set_ylabel("cumulative energy (MJ m$^{-2}$)")
    _legend(axes[0][-1], fontsize=8)
    fixed_margins(fig)
    return fig


def openwater_figure(ds: xr.Dataset, scene_times, title: str):
    """Open-water fraction by source and radius, with the radar scene times marked."""
    fig, ax = plt.subplots(figsize=(8, 4))
    t = _times(ds)
    k = 0
    styles = {"radar": "-", "microwave": "--"}
    for source in ds["source"].values:
        for radius in ds["radius"].values:
            series = ds["f_ow"].sel(source=source, radius=radius)
            if not np.isfinite(series).any():
                continue
            ax.plot(t, series, styles.get(str(source), ":"), color=PALETTE[k % len(PALETTE)],
                    label=f"{source}, {float(radius) / 1000:g} km")
            k += 1
    scenes = np.asarray(scene_times, dtype="datetime64[ns]")
    if scenes.size:  # one line collection, full height, for all scenes
        ax.vlines(scenes, 0.0, 1.0, transform=ax.get_xaxis_transform(), colors="0.75",
                  linewidth=0.6, zorder=0, label="radar scene")
    ax.set_ylabel("open-water fraction (1)")
    ax.set_xlabel("time (UTC)")
    ax.set_ylim(bottom=0)
    ax.set_title(f"{title}: open water")
    _legend(ax, fontsize=8)
    ax.tick_params(axis="x", labelrotation=30)
    fixed_margins(fig)
    return fig


def floe_context_figure(floes: pd.DataFrame, title: str):
    """The buoy's floe through the season: equivalent diameter (open markers where the
    floe reaches the circle's rim, a lower bound), distance to the nearest open water,
    and the number of leads crossing the circle; filled markers from masks, crosses from
    classified backscatter."""
    fig, axes = plt.subplots(3, 1, figsize=(8, 7), sharex=True)
    t = pd.to_datetime(floes["time"], utc=True).dt.tz_localize(None).to_numpy()
    radius_km = float(floes["radius_m"].iloc[0]) / 1000 if len(floes) else float("nan")
    panels = (("floe_diameter_m", 1e-3, "floe equivalent\ndiameter (km)", PALETTE[0]),
              ("distance_to_water_m", 1e-3, "distance to\nopen water (km)", PALETTE[1]),
              ("n_leads_crossing", 1.0, "leads crossing\nthe circle (count)", PALETTE[2]))
    for ax, (col, scale, label, color) in zip(axes, panels):
        v = floes[col].to_numpy(float) * scale
        for content, marker in (("mask", "o"), ("classified backscatter", "x")):
            sel = (floes["content"] == content).to_numpy()
            if col == "floe_diameter_m":
                rim = floes["floe_at_rim"].astype(str).str.lower().eq("true").to_numpy()
                ax.plot(t[sel & ~rim], v[sel & ~rim], marker, color=color, linestyle="none",
                        label=f"{content}, floe inside the circle")
                ax.plot(t[sel & rim], v[sel & rim], marker, color=color, linestyle="none",
                        mfc="none", label=f"{content}, floe at the rim (lower bound)")
            else:
                ax.plot(t[sel], v[sel], marker, color=color, linestyle="none", label=content)
        ax.set_ylabel(label)
        ax.set_ylim(bottom=0)
        handles = [h for h in ax.get_lines() if len(h.get_xdata())]
        if handles:
            _legend(ax, handles=handles, fontsize=7)
    axes[-1].set_xlabel("time (UTC)")
    axes[-1].tick_params(axis="x", labelrotation=30)
    axes[0].set_title(f"{title}: the buoy's floe within {radius_km:g} km")
    fixed_margins(fig)
    return fig


def transmittance_figure(ds: xr.Dataset, seasonal: pd.DataFrame, title: str):
    """Window transmittance per source at the largest radius, with the season value and
    its interval as a band."""
    fig, ax = plt.subplots(figsize=(8, 4))
    t = _times(ds)
    for k, source in enumerate(ds["source"].values):
        sel = ds["t_ice"].sel(source=source).isel(radius=-1)
        radius = float(ds["radius"].values[-1])
        color = PALETTE[k % len(PALETTE)]
        ax.plot(t, sel, color=color, label=f"{source}, window mean")
        row = seasonal[(seasonal["source"] == source) & np.isclose(seasonal["radius_m"], radius)]
        if len(row) and np.isfinite(row["t_ice"].iloc[0]):
            r = row.iloc[0]
            ax.axhline(r["t_ice"], color=color, linestyle="--", linewidth=1,
                       label=f"{source}, season")
            if np.isfinite(r["t_ice_lo"]) and np.isfinite(r["t_ice_hi"]):
                ax.axhspan(r["t_ice_lo"], r["t_ice_hi"], color=color, alpha=0.15,
                           label=f"{source}, season 90 % interval")
    ax.axhline(0.0, color="0.6", linewidth=0.8)
    ax.set_ylabel("through-ice transmittance (1)")
    ax.set_xlabel("time (UTC)")
    ax.set_title(f"{title}: transmittance")
    _legend(ax, fontsize=8)
    ax.tick_params(axis="x", labelrotation=30)
    fixed_margins(fig)
    return fig


def track_map_figure(tracks: dict[str, pd.DataFrame], t_season: dict[str, float],
                     crs: str, label: str):
    """Drift tracks in a polar projection, coloured by season transmittance."""
    from pyproj import Transformer

    tr = Transformer.from_crs("EPSG:4326", crs, always_xy=True)
    fig, ax = plt.subplots(figsize=(6.5, 6))
    values = [v for v in t_season.values() if np.isfinite(v)]
    norm = plt.Normalize(min(values, default=0.0), max(values, default=0.1))
    cmap = plt.get_cmap("viridis")
    for dep, track in sorted(tracks.items()):
        x, y = tr.transform(track["longitude"].to_numpy(), track["latitude"].to_numpy())
        value = t_season.get(dep, np.nan)
        color = cmap(norm(value)) if np.isfinite(value) else "0.6"
        ax.plot(np.asarray(x) / 1000, np.asarray(y) / 1000, color=color, linewidth=2)
        ax.annotate(dep, (x[-1] / 1000, y[-1] / 1000), fontsize=7)
    sm = plt.cm.ScalarMappable(norm=norm, cmap=cmap)
    fig.colorbar(sm, ax=ax, label=f"season transmittance (1), {label}")
    ax.set_xlabel(f"x (km, {crs})")
    ax.set_ylabel(f"y (km, {crs})")
    ax.set_aspect("equal")
    ax.set_title("drift tracks")
    return fig


def climatology_figure(clim: pd.DataFrame):
    """Median transmittance by month with its interquartile range, per source and radius."""
    fig, ax = plt.subplots(figsize=(7, 4))
    if clim.empty:
        ax.text(0.5, 0.5, "no climatology cells", ha="center", transform=ax.transAxes)
    keys = ["source", "radius_m"] + (["ice_type"] if "ice_type" in clim.columns else [])
    for k, (key, grp) in enumerate(clim.groupby(keys, sort=True)):
        by_month = grp.groupby("month").agg(t=("t_ice_median", "median"),
                                            lo=("t_ice_p25", "median"),
                                            hi=("t_ice_p75", "median"))
        offset = (k - 0.5 * len(clim.groupby(keys))) * 0.08
        label = ", ".join(f"{v / 1000:g} km" if n == "radius_m" else str(v)
                          for n, v in zip(keys, key))
        ax.errorbar(by_month.index + offset, by_month["t"],
                    yerr=[by_month["t"] - by_month["lo"], by_month["hi"] - by_month["t"]],
                    fmt="o", color=PALETTE[k % len(PALETTE)], capsize=3, label=label)
    ax.set_xlabel("month")
    ax.set_ylabel("through-ice transmittance (1), median and IQR")
    ax.set_xticks(range(1, 13))
    ax.set_title("climatology")
    _legend(ax, fontsize=7)
    return fig


def attribution_figure(attribution: pd.DataFrame, label: str = ""):
    """Which input dominates the spread of each deployment's season transmittance.

    One horizontal bar per deployment, split by each ensemble factor's variance share
    (its one-at-a-time variance over the sum over factors; the bar sums to 1), with the
    90 % interval written beside it.

    Parameters
    ----------
    attribution : pandas.DataFrame
        One row per deployment: ``deployment_id``, ``t_ice``, ``t_ice_lo``, ``t_ice_hi``
        and ``share_<factor>`` columns (tables/attribution.csv, one source and radius).
    label : str
        The source and radius shown, for the title.

    Examples
    --------
    >>> a = pd.DataFrame({"deployment_id": ["B1"], "t_ice": [0.03], "t_ice_lo": [0.02],
    ...                   "t_ice_hi": [0.05], "share_albedo_ow": [0.2],
    ...                   "share_shortwave_bias": [0.8]})
    >>> fig = attribution_figure(a, "radar 15 km"); len(fig.axes)
    1
    """
    shares = [c for c in attribution.columns if c.startswith("share_")
              and attribution[c].fillna(0.0).abs().sum() > 0]
    rows = attribution.sort_values("deployment_id", ascending=False).reset_index(drop=True)
    fig, ax = plt.subplots(figsize=(8.5, 1.2 + 0.45 * max(len(rows), 1)))
    if rows.empty or not shares:
        ax.text(0.5, 0.5, "no ensemble", ha="center", transform=ax.transAxes)
    left = np.zeros(len(rows))
    # one colour per factor, the same in every run (the palette and a grey)
    order = [c for c in attribution.columns if c.startswith("share_")]
    colours = PALETTE + ("#999999",)
    for col in shares:
        k = order.index(col)
        v = rows[col].fillna(0.0).to_numpy(float)
        ax.barh(rows["deployment_id"], v, left=left, color=colours[k % len(colours)],
                hatch="//" if k >= len(colours) else "", edgecolor="white",
                label=col.removeprefix("share_").replace("_", " "))
        left += v
    for i, r in rows.iterrows():
        ax.annotate(f"{r['t_ice']:.3f} [{r['t_ice_lo']:.3f}, {r['t_ice_hi']:.3f}]",
                    (1.01, i), va="center", fontsize=7, annotation_clip=False)
    ax.set_xlim(0.0, 1.0)
    ax.set_xlabel("share of the ensemble variance of the season transmittance (1)")
    ax.set_title("what dominates the uncertainty" + (f" ({label})" if label else "")
                 + "; right: T_season [5th, 95th percentile]", fontsize=9)
    if shares:
        ax.legend(fontsize=7, ncol=5, loc="upper center",
                  bbox_to_anchor=(0.5, -0.6 / (1.2 + 0.45 * max(len(rows), 1))))
    return fig


# --- where a 1-D budget holds: bulk-flux cross-check, screen, ice-type split ---------
__all__ += ["bulkflux_figure", "screen_figure", "ice_type_figure"]


def bulkflux_figure(windows: pd.DataFrame, whole: pd.DataFrame, factor: float = 2.0):
    """Measured (F_b - F_c) against bulk ocean-to-ice heat flux, per window and deployment.

    Examples
    --------
    >>> w = pd.DataFrame({"deployment_id": ["a"], "f_w_bulk_W_m2": [10.0],
    ...                   "f_w_measured_W_m2": [9.0], "disagree": [False]})
    >>> len(bulkflux_figure(w, w).axes)
    1
    """
    fig, ax = plt.subplots(figsize=(5.5, 5))
    vals = pd.concat([windows[["f_w_bulk_W_m2", "f_w_measured_W_m2"]],
                      whole[["f_w_bulk_W_m2", "f_w_measured_W_m2"]]]).to_numpy(float)
    vals = vals[np.isfinite(vals)]
    top = float(max(np.max(np.abs(vals)) * 1.1, 1.0)) if vals.size else 1.0
    line = np.array([0.0, top])
    ax.plot(line, line, color="0.3", lw=1, label="1:1")
    ax.plot(line, line * factor, color="0.6", lw=0.8, ls="--", label=f"factor {factor:g}")
    ax.plot(line, line / factor, color="0.6", lw=0.8, ls="--")
    for k, (dep, grp) in enumerate(windows.groupby("deployment_id", sort=True)):
        c = PALETTE[k % len(PALETTE)]
        ax.scatter(grp["f_w_bulk_W_m2"], grp["f_w_measured_W_m2"], color=c, s=18,
                   alpha=0.6)
        w = whole[whole["deployment_id"] == dep]
        ax.scatter(w["f_w_bulk_W_m2"], w["f_w_measured_W_m2"], color=c, s=70, marker="D",
                   edgecolor="k", label=f"{dep} (whole window)")
    ax.set_xlim(min(0.0, *(vals if vals.size else [0.0])), top)
    ax.set_ylim(min(0.0, *(vals if vals.size else [0.0])), top)
    ax.set_xlabel("bulk rho cp c_h u* (T_ml - T_f) (W m-2)")
    ax.set_ylabel("measured F_b - F_c at the ice base (W m-2)")
    ax.set_title("ocean-to-ice heat flux: measured against bulk (dots: windows)", fontsize=9)
    _legend(ax, fontsize=7)
    return fig


def screen_figure(track: pd.DataFrame, summary: pd.DataFrame, distance_limit_m: float):
    """Distance to the isobath along each track, the screening distance marked.

    Examples
    --------
    >>> t = pd.DataFrame({"deployment_id": ["a", "a"], "time": pd.to_datetime(
    ...     ["2025-07-01", "2025-07-02"]), "distance_to_isobath_m": [9e4, 3e4]})
    >>> s = pd.DataFrame({"deployment_id": ["a"], "advection_screen": ["applied"],
    ...                   "excluded_fraction": [0.5]})
    >>> len(screen_figure(t, s, 5e4).axes)
    1
    """
    fig, ax = plt.subplots(figsize=(8, 4))
    label = str(summary["advection_screen"].iloc[0]) if len(summary) else "no deployments"
    has = track["distance_to_isobath_m"].notna().any() if len(track) else False
    if not has:
        ax.text(0.5, 0.5, f"advection screen {label}", ha="center", transform=ax.transAxes)
    else:
        for k, (dep, grp) in enumerate(track.groupby("deployment_id", sort=True)):
            frac = summary.loc[summary["deployment_id"] == dep, "excluded_fraction"]
            tag = f"{dep} ({float(frac.iloc[0]):.0%} excluded)" if len(frac) else dep
            ax.plot(pd.to_datetime(grp["time"]), grp["distance_to_isobath_m"] / 1000.0,
                    color=PALETTE[k % len(PALETTE)], label=tag)
        ax.axhline(distance_limit_m / 1000.0, color="0.3", ls="--", lw=1,
                   label="screening distance")
        ax.set_ylim(bottom=0.0)
        _legend(ax, fontsize=7)
    ax.set_xlabel("time (UTC)")
    ax.set_ylabel("distance to the isobath (km)")
    ax.set_title(f"advection screen: {label}", fontsize=9)
    fig.autofmt_xdate()
    return fig


def ice_type_figure(clim: pd.DataFrame, source: str, radius_m: float):
    """Median transmittance by month for each ice type (one source and radius), with the
    interquartile range and the number of windows.

    Examples
    --------
    >>> c = pd.DataFrame({"source": ["radar"] * 2, "radius_m": [15000.0] * 2,
    ...     "ice_type": ["first-year", "multiyear"], "month": [7, 7], "n_windows": [2, 1],
    ...     "t_ice_median": [0.08, 0.03], "t_ice_p25": [0.07, 0.03],
    ...     "t_ice_p75": [0.09, 0.03]})
    >>> len(ice_type_figure(c, "radar", 15000.0).axes)
    1
    """
    fig, ax = plt.subplots(figsize=(7, 4))
    sel = clim[(clim["source"] == source) & (clim["radius_m"] == radius_m)] \
        if len(clim) else clim
    if "ice_type" not in clim.columns or sel.empty:
        ax.text(0.5, 0.5, "no ice types in the archive", ha="center", transform=ax.transAxes)
    else:
        types = sorted(sel["ice_type"].fillna("").astype(str).unique())
        for k, it in enumerate(types):
            grp = sel[sel["ice_type"].fillna("").astype(str) == it]
            by = grp.groupby("month").agg(t=("t_ice_median", "median"),
                                          lo=("t_ice_p25", "median"),
                                          hi=("t_ice_p75", "median"), n=("n_windows", "sum"))
            x = by.index.to_numpy(float) + (k - 0.5 * (len(types) - 1)) * 0.12
            ax.errorbar(x, by["t"], yerr=[by["t"] - by["lo"], by["hi"] - by["t"]], fmt="o",
                        color=PALETTE[k % len(PALETTE)], capsize=3,
                        label=f"{it or 'not given'} ({int(by['n'].sum())} windows)")
        _legend(ax, fontsize=8)
    ax.set_xticks(range(1, 13))
    ax.set_xlabel("month")
    ax.set_ylabel("through-ice transmittance (1), median and IQR")
    ax.set_title(f"climatology by ice type ({source}, {radius_m / 1000:g} km)", fontsize=9)
    return fig
