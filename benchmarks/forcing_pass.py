"""Target 2: one pass over gridded forcing, whatever the number of tracks.

Writes an hourly shortwave grid and a daily concentration grid for one season as the
forcing stores the workflow builds (``floeheat.steps.forcing.write_store``: chunks for
one pass along time, the whole grid per chunk), opens them lazily as the budget stage
does, and times sampling 1 and 50 drifting tracks in one call each
(``floeheat.shortwave.sample_at_tracks`` and ``floeheat.microwave.fraction_at_buoys``,
which take every track at once, as each budget job does for its part's deployments).
For contrast it also times one call per track (as one job per deployment would), and it
counts the store chunks each call loads (a dask callback on the stores' block tasks)
against the chunks of the stores.
"""

from __future__ import annotations

import time

import numpy as np
import xarray as xr
from dask.callbacks import Callback

from benchmarks._common import Result, fresh, say

CRS = "EPSG:3413"
#: (shortwave, concentration) seconds of the latest calls of _sample.
_PARTS: list = []


def _spacing(scale: str) -> tuple[float, float]:
    return (0.25, 1.0) if scale == "full" else (0.5, 2.0)


def _stores(scratch, scale: str):
    from floeheat.steps.forcing import write_store

    dlat, dlon = _spacing(scale)
    days = 153 if scale == "full" else 40
    start = np.datetime64("2020-05-01T00:00", "ns")
    hours = days * 24
    t_end = start + np.arange(1, hours + 1) * np.timedelta64(1, "h")
    lat = np.arange(60.0, 90.0 + 1e-9, dlat)
    lon = np.arange(0.0, 360.0, dlon)
    rng = np.random.default_rng(7)
    hour = np.arange(hours) % 24
    diurnal = np.clip(np.sin((hour[:, None, None] - 6) / 24 * 2 * np.pi), 0, None)
    base = rng.uniform(200, 400, (1, lat.size, lon.size)).astype(np.float32)
    sw = (diurnal * base).astype(np.float32)
    sw_ds = xr.Dataset(
        {"sw_down": (("time", "latitude", "longitude"), sw, {"units": "W m-2"}),
         "time_bnds": (("time", "nv"), np.stack([t_end - np.timedelta64(1, "h"), t_end], 1))},
        coords={"time": t_end, "latitude": lat, "longitude": lon})
    n = 432 if scale == "full" else 216
    cell = 25_000.0 * (432 / n)
    x = (np.arange(n) - n / 2 + 0.5) * cell
    d0 = start + np.arange(days) * np.timedelta64(1, "D")
    conc = rng.uniform(0.6, 1.0, (days, n, n)).astype(np.float32)
    from pyproj import CRS as _CRS

    ci_ds = xr.Dataset(
        {"sea_ice_area_fraction": (("time", "y", "x"), conc, {"units": "1"}),
         "time_bnds": (("time", "nv"), np.stack([d0, d0 + np.timedelta64(1, "D")], 1))},
        coords={"time": d0 + np.timedelta64(12, "h"), "x": x, "y": x[::-1].copy()},
        attrs={"crs_wkt": _CRS.from_string(CRS).to_wkt()})
    ci_ds["sea_ice_area_fraction"].attrs["crs_wkt"] = ci_ds.attrs["crs_wkt"]
    paths = {"shortwave": scratch / "shortwave.zarr", "concentration": scratch / "conc.zarr"}
    say(f"target 2: writing stores ({sw.nbytes / 1e6:.0f} MB shortwave, "
        f"{conc.nbytes / 1e6:.0f} MB concentration)")
    write_store(sw_ds, paths["shortwave"], threads=1)
    write_store(ci_ds, paths["concentration"], threads=1)
    size = (f"shortwave hourly {days} d on {lat.size} x {lon.size} ({dlat:g} x {dlon:g} deg), "
            f"concentration daily {days} d on {n} x {n} cells of {cell / 1e3:g} km")
    return paths, t_end, d0, size


def _tracks(n: int, times, seed: int = 11):
    """Drifting tracks spread over the basin: a random walk from random starts."""
    rng = np.random.default_rng(seed)
    lat0 = rng.uniform(74.0, 87.0, n)
    lon0 = rng.uniform(0.0, 360.0, n)
    steps = times.size
    dlat = np.cumsum(rng.normal(0, 0.01, (n, steps)), axis=1)
    dlon = np.cumsum(rng.normal(0, 0.04, (n, steps)), axis=1)
    lat = np.clip(lat0[:, None] + dlat, 70.0, 89.0)
    lon = (lon0[:, None] + dlon + 180.0) % 360.0 - 180.0
    return lat, lon


def _sample(paths, t_sw, t_ci, lat_h, lon_h, lat_d, lon_d):
    """Shortwave and concentration for every track given, in one call each."""
    from floeheat.microwave import fraction_at_buoys
    from floeheat.shortwave import sample_at_tracks

    sw = xr.open_zarr(paths["shortwave"], consolidated=True)
    ci = xr.open_zarr(paths["concentration"], consolidated=True)
    la = xr.DataArray(lat_h, dims=("track", "time"), coords={"time": t_sw})
    lo = xr.DataArray(lon_h, dims=("track", "time"), coords={"time": t_sw})
    t0 = time.perf_counter()
    a = sample_at_tracks(sw, la, lo)["sw_down"].values
    t1 = time.perf_counter()
    b = fraction_at_buoys(ci, lat_d, lon_d, radii_m=[15000.0]).values
    _PARTS.append((t1 - t0, time.perf_counter() - t1))
    return a, b


def _store_chunks(path) -> int:
    """Chunks of a store's data variable (the most one pass can read)."""
    ds = xr.open_zarr(path, consolidated=True)
    var = next(v for v in ds.data_vars.values() if v.ndim == 3)
    return int(np.prod(var.data.numblocks))


class _ChunkCounter(Callback):
    """Counts the store blocks dask loads: tasks keyed ``(open_dataset-<var>-<token>,
    i, j, k)``, by variable, each distinct block once."""

    def __init__(self):
        super().__init__()
        self.blocks: dict[str, set] = {}

    def _pretask(self, key, dsk, state):
        if isinstance(key, tuple) and str(key[0]).startswith("open_dataset-"):
            var = str(key[0]).split("-")[1]
            self.blocks.setdefault(var, set()).add(key)

    def count(self, var: str) -> int:
        return len(self.blocks.get(var, ()))


def _chunks_loaded(sample) -> tuple[int, int]:
    """(shortwave, concentration) store chunks one call of ``sample`` loads."""
    with _ChunkCounter() as counter:
        sample()
    return counter.count("sw_down"), counter.count("sea_ice_area_fraction")


def _split(parts):
    one, many = np.median(parts["one"], axis=0), np.median(parts["all"], axis=0)
    return many[0], one[0], many[0] / one[0], many[1], one[1], many[1] / one[1]


def run(scratch, scale: str) -> Result:
    fresh(scratch)
    paths, t_sw, t_ci, size = _stores(scratch, scale)
    n_many = 50
    lat_h, lon_h = _tracks(n_many, t_sw)
    day_idx = np.arange(t_ci.size) * 24 + 12
    lat_d, lon_d = lat_h[:, day_idx], lon_h[:, day_idx]

    def one_track():
        return _sample(paths, t_sw, t_ci, lat_h[:1], lon_h[:1], lat_d[:1], lon_d[:1])

    def all_tracks():
        return _sample(paths, t_sw, t_ci, lat_h, lon_h, lat_d, lon_d)

    def track_by_track():
        return [_sample(paths, t_sw, t_ci, lat_h[i:i + 1], lon_h[i:i + 1], lat_d[i:i + 1],
                        lon_d[i:i + 1]) for i in range(n_many)]

    one_track()  # warm imports and the page cache
    times = {"one": [], "all": []}
    parts = {"one": [], "all": []}
    repeat = 5 if scale == "full" else 3
    for _ in range(repeat):
        for key, f in (("one", one_track), ("all", all_tracks)):
            t0 = time.perf_counter()
            out = f()
            times[key].append(time.perf_counter() - t0)
            parts[key].append(_PARTS[-1])
    t_one, t_all = np.median(times["one"]), np.median(times["all"])
    loaded = {"one": _chunks_loaded(one_track), "all": _chunks_loaded(all_tracks)}
    t0 = time.perf_counter()
    separate = track_by_track()
    t_sep = time.perf_counter() - t0
    # one call for all tracks must give each track's own values
    same = all(np.allclose(out[0][i], separate[i][0][0], equal_nan=True) and
               np.allclose(out[1][i], separate[i][1][0], equal_nan=True)
               for i in range(n_many))
    notes = [f"1 track {t_one:.2f} s, {n_many} tracks in one pass {t_all:.2f} s "
             f"(medians of {repeat})",
             "of which shortwave {:.2f} / {:.2f} s = {:.1f}x, concentration {:.2f} / {:.2f} s "
             "= {:.1f}x".format(*_split(parts)),
             f"{n_many} tracks one call each (as one job per deployment would) {t_sep:.2f} s = "
             f"{t_sep / t_one:.1f}x one track",
             f"one-pass values equal the per-track values: {same}",
             "store chunks loaded per call (of the store's chunks) shortwave / "
             "concentration: 1 track {} / {}, {} tracks {} / {} (of {} / {})".format(
                 loaded["one"][0], loaded["one"][1], n_many, loaded["all"][0],
                 loaded["all"][1], _store_chunks(paths["shortwave"]),
                 _store_chunks(paths["concentration"]))]
    return Result(2, "One pass over gridded forcing (50 tracks / 1 track)", t_all / t_one,
                  2.0, f"{size}; {n_many} tracks spread over the basin", notes)

