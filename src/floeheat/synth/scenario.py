"""The invented scenario: where and when the floe camps drift, and their parameters.

All names are invented. The north scenario lies in a deep basin of the central Arctic
Ocean far from any shelf (camp "Graupel", summer 2025); the south scenario in a deep
basin of the Southern Ocean (camp "Sastrugi", 2025-26 austral summer). Synthesizer-only
scenario parameters live here; physical constants come from :mod:`floeheat.constants`.
"""

from __future__ import annotations

import zlib
from dataclasses import dataclass, field

import numpy as np

from floeheat.constants import (
    CRS_WORKING_NORTH,
    CRS_WORKING_SOUTH,
    SEASON_NORTH,
    SEASON_SOUTH,
)

from .sizes import SizeSpec

__all__ = ["Deployment", "Scenario", "make_scenario", "rng_for",
           "DRAG_COEFFICIENT", "SOLAR_NSTM_SHARE", "TRUTH_Z2_M", "Z_CONSTANT_M"]

#: Ice-ocean drag coefficient in u* = sqrt(Cd) |u_ice| (synthesizer choice, a typical
#: under-ice value; common practice, no source).
DRAG_COEFFICIENT = 5.5e-3
#: Share of the solar entering the ocean deposited below the mixed layer (the seasonal
#: near-surface temperature maximum). Scenario parameter.
SOLAR_NSTM_SHARE = 0.03
#: Depth bounding the truth heat content H, metres. Q_st does not depend on it for any
#: bound below Z_CONSTANT_M (the water below is constant in time).
TRUTH_Z2_M = 40.0
#: Below this depth temperature and salinity never change in the scenario, metres.
Z_CONSTANT_M = 21.0

_ARRAY_NAMES = ["skua", "fulmar", "tern", "eider", "petrel", "guillemot", "murre", "gannet",
                "shag", "plover", "dunlin", "knot", "sanderling", "phalarope", "jaeger"]


def rng_for(seed: int, *keys) -> np.random.Generator:
    """A generator for one component, independent of the order components are built in.

    Examples
    --------
    >>> float(rng_for(1, "drift").random()) == float(rng_for(1, "drift").random())
    True
    """
    words = [int(seed) & 0xFFFFFFFF] + [zlib.crc32(str(k).encode()) for k in keys]
    return np.random.default_rng(words)


@dataclass
class Deployment:
    """One co-located CTD profiler and thermistor string (scenario parameters)."""

    deployment_id: str
    array_id: str
    index: int
    ice_type: str
    transmittance: float
    offset_m: tuple[float, float]
    record_start: np.datetime64
    record_end: np.datetime64
    string_start: np.datetime64
    string_end: np.datetime64
    window_start: np.datetime64 | None
    window_end: np.datetime64 | None
    ice_m: float
    snow_m: float
    reference: str
    profile_layout: str
    icemass_layout: str
    salinity_from: str = "salinity"
    sounder: bool = False
    heated: bool = False
    shortwave_csv: bool = False
    h_ml_winter_m: float = 15.0
    h_ml_summer_m: float = 10.0
    sa_ml_g_kg: float = 30.0
    freshening_g_kg: float = 1.0
    surface_melt_m_day: float = 0.006


@dataclass
class Scenario:
    """Everything the forward model needs that is not computed."""

    hemisphere: str
    seed: int
    size: SizeSpec
    name: str
    crs: str
    centre_lonlat: tuple[float, float]
    season_start: np.datetime64
    season_end: np.datetime64
    sim_start: np.datetime64
    sim_end: np.datetime64
    melt_onset: np.datetime64
    array_ids: list[str]
    array_origin_xy: np.ndarray
    deployments: list[Deployment] = field(default_factory=list)

    @property
    def hours(self) -> np.ndarray:
        """Hourly instants from sim_start to sim_end inclusive (interval boundaries)."""
        n = int((self.sim_end - self.sim_start) / np.timedelta64(1, "h"))
        return self.sim_start + np.arange(n + 1) * np.timedelta64(1, "h")

    @property
    def sign(self) -> float:
        """+1 north, -1 south (direction of inertial rotation, latitude sign)."""
        return 1.0 if self.hemisphere == "north" else -1.0


def _season(hemisphere: str) -> tuple[np.datetime64, np.datetime64]:
    if hemisphere == "north":
        (m0, d0), (m1, d1) = SEASON_NORTH
        return (np.datetime64(f"2025-{m0:02d}-{d0:02d}T00:00", "ns"),
                np.datetime64(f"2025-{m1:02d}-{d1:02d}T00:00", "ns"))
    (m0, d0), (m1, d1) = SEASON_SOUTH
    return (np.datetime64(f"2025-{m0:02d}-{d0:02d}T00:00", "ns"),
            np.datetime64(f"2026-{m1:02d}-{d1:02d}T00:00", "ns"))


def make_scenario(seed: int, size: SizeSpec, hemisphere: str) -> Scenario:
    """Draw the scenario for a seed, a size and a hemisphere.

    Examples
    --------
    >>> from floeheat.synth.sizes import SIZES
    >>> sc = make_scenario(1, SIZES["tiny"], "north")
    >>> [d.deployment_id for d in sc.deployments]
    ['skua-1', 'skua-2', 'fulmar-1']
    """
    if hemisphere not in ("north", "south"):
        raise ValueError(f"hemisphere must be 'north' or 'south', not {hemisphere!r}")
    import pyproj

    rng = rng_for(seed, "scenario", hemisphere)
    north = hemisphere == "north"
    season_start, season_end = _season(hemisphere)
    day = np.timedelta64(1, "D")
    # melt onset: early June (north) / early December (south)
    melt_onset = season_start + np.timedelta64(int(35 + rng.integers(0, 5)), "D")
    if size.record_days is None:
        sim_start = season_start - 4 * day
        sim_end = season_end
    else:
        sim_start = season_start + np.timedelta64(int(size.record_offset_days * 24), "h")
        sim_end = sim_start + np.timedelta64(int(size.record_days * 24), "h")
    centre = (-140.0 + rng.uniform(-5, 5), 81.0 + rng.uniform(-0.5, 0.5)) if north else \
        (-32.0 + rng.uniform(-4, 4), -67.5 + rng.uniform(-0.5, 0.5))
    crs = CRS_WORKING_NORTH if north else CRS_WORKING_SOUTH
    to_xy = pyproj.Transformer.from_crs("EPSG:4326", crs, always_xy=True)
    cx, cy = to_xy.transform(*centre)

    n_arr = size.n_arrays
    # arrays on a rough grid around the centre, spacing array_spacing_m
    ncol = int(np.ceil(np.sqrt(n_arr)))
    origins = []
    for a in range(n_arr):
        r, c = divmod(a, ncol)
        jitter = rng.uniform(-0.15, 0.15, 2) * size.array_spacing_m
        origins.append((cx + (c - (ncol - 1) / 2) * size.array_spacing_m + jitter[0],
                        cy + (r - (ncol - 1) / 2) * size.array_spacing_m + jitter[1]))
    names = [_ARRAY_NAMES[a % len(_ARRAY_NAMES)] + ("" if a < len(_ARRAY_NAMES)
                                                    else str(a // len(_ARRAY_NAMES)))
             for a in range(n_arr)]
    sc = Scenario(hemisphere=hemisphere, seed=seed, size=size,
                  name="floe camp Graupel" if north else "floe camp Sastrugi", crs=crs,
                  centre_lonlat=centre, season_start=season_start, season_end=season_end,
                  sim_start=sim_start, sim_end=sim_end, melt_onset=melt_onset,
                  array_ids=names, array_origin_xy=np.array(origins))

    layouts = ["orthogonal", "ragged", "csv", "incomplete"]
    index = 0
    for a in range(n_arr):
        n_dep = size.deployments_per_array[a % len(size.deployments_per_array)]
        for j in range(n_dep):
            multiyear = bool(index % 3 == 1 or rng.random() < 0.2)
            ice_m = rng.uniform(2.6, 3.2) if multiyear else rng.uniform(2.0, 2.4)
            trans = rng.uniform(0.02, 0.05) if multiyear else rng.uniform(0.06, 0.10)
            ang = rng.uniform(0, 2 * np.pi)
            dist = 0.0 if j == 0 else rng.uniform(2_000, 5_000)
            if size.record_days is None:
                rs = sim_start + np.timedelta64(int(rng.integers(0, 14 * 24)), "h")
                re = sim_end - (np.timedelta64(int(rng.integers(0, 8 * 24)), "h")
                                if rng.random() < 0.7 else
                                np.timedelta64(int(rng.integers(20 * 24, 40 * 24)), "h"))
                ss = rs - np.timedelta64(int(rng.integers(0, 30)), "h")
                se = re + np.timedelta64(int(rng.integers(0, 30)), "h")
                ss, se = max(ss, sim_start), min(se, sim_end)
                if index % 3 == 1:  # an explicit window for some deployments
                    ws = max(rs, ss, season_start)
                    ws = ws.astype("datetime64[D]").astype("datetime64[ns]") + 2 * day
                    we = min(re, se).astype("datetime64[D]").astype("datetime64[ns]") - day
                else:
                    ws = we = None
            else:
                rs = ss = sim_start
                re = se = sim_end
                margin = np.timedelta64(int(size.window_margin_days * 24), "h")
                ws, we = rs + margin, re - margin
            dep = Deployment(
                deployment_id=f"{names[a]}-{j + 1}", array_id=names[a], index=index,
                ice_type="multiyear" if multiyear else "first-year",
                transmittance=float(round(trans, 4)),
                offset_m=(dist * np.cos(ang), dist * np.sin(ang)),
                record_start=rs, record_end=re, string_start=ss, string_end=se,
                window_start=ws, window_end=we, ice_m=float(ice_m),
                snow_m=float(rng.uniform(0.15, 0.35)),
                reference="initial ice surface" if index % 4 == 2 else "initial snow surface",
                profile_layout=layouts[index % len(layouts)],
                icemass_layout="csv" if index % 3 == 1 else "netcdf",
                h_ml_winter_m=float(rng.uniform(13.5, 15.5)),
                h_ml_summer_m=float(rng.uniform(8.5, 10.5)),
                sa_ml_g_kg=float(rng.uniform(29.6, 30.4)),
                freshening_g_kg=float(rng.uniform(0.7, 1.2)),
                surface_melt_m_day=float(rng.uniform(0.003, 0.006)),
            )
            sc.deployments.append(dep)
            index += 1
    # instrument variants, fixed by position in the list
    deps = sc.deployments
    deps[min(1, len(deps) - 1)].salinity_from = "conductivity"
    deps[0].sounder = True
    deps[-1].heated = True
    deps[-1].shortwave_csv = True
    return sc
