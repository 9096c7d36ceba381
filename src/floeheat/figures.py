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

__all__ = ["PALETTE", "budget_figure", "openwater_figure", "transmittance_figure",
           "track_map_figure", "climatology_figure", "save_figure"]

#: Okabe & Ito (2008), "Color Universal Design": colour-blind-safe qualitative colours.
PALETTE = ("#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#F0E442",
           "#000000")


def save_figure(fig, path) -> None:
    """Save a figure as PNG without time stamps or version strings (same bytes each run)."""
    fig.savefig(path, dpi=110, metadata={"Software": None}, bbox_inches="tight")
    plt.close(fig)


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
    axes[0][-1].legend(loc="best", fontsize=8)
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
    for i, st in enumerate(np.asarray(scene_times, dtype="datetime64[ns]")):
        ax.axvline(st, color="0.75", linewidth=0.6, zorder=0,
                   label="radar scene" if i == 0 else None)
    ax.set_ylabel("open-water fraction (1)")
    ax.set_xlabel("time (UTC)")
    ax.set_ylim(bottom=0)
    ax.set_title(f"{title}: open water")
    ax.legend(fontsize=8, ncol=2)
    ax.tick_params(axis="x", labelrotation=30)
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
    ax.legend(fontsize=8)
    ax.tick_params(axis="x", labelrotation=30)
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
    ax.legend(fontsize=7)
    return fig
