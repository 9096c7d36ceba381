"""Stage ``classify``: backscatter acquisitions -> one classified mask store each.

The archive's backscatter rows (content ``backscatter``) form acquisitions: rows sharing
an ``acquisition_id`` (single-band files of one acquisition), else one row each. They
are sorted by ``(time, acquisition)`` and cut into batches of ``scenes_per_job``
(:func:`batches`), one job each, so that start-up is paid once per batch. A batch
writes ``classified/<batch>/<acquisition>.zarr`` per acquisition (Zarr format 3,
consolidated): variable ``mask`` (y, x) uint8 in the package coding (0 water, 1 ice,
255 no data) with the scene's grid in its attributes (``crs_wkt``, ``transform``) and
the settings that made it. Bands are read chunk by chunk and classified with
:func:`floeheat.classify.classify_scene` (dask, overlap), so memory stays bounded.

:func:`open_classified` gives a store the interface of a mask scene (``crs``,
``transform``, ``shape``, ``read_window``), so the radar source reads classified
backscatter like a mask. Where the archive holds a mask of the same acquisition (same
time and grid), the radar source uses the mask and :func:`run_agreement` tabulates how
the two agree.
"""

from __future__ import annotations

import json
import logging
from pathlib import Path

import numpy as np
import pandas as pd

from floeheat import __version__
from floeheat.classify import ClassifySettings, classify_scene, water_iou_f1
from floeheat.constants import MASK_CODES
from floeheat.errors import ArchiveError
from floeheat.io.scenes import open_scene
from floeheat.steps.status import atomic_path

__all__ = ["acquisitions", "batches", "run_classify", "open_classified", "ClassifiedScene",
           "mask_twins", "run_agreement", "AGREEMENT_COLUMNS"]

log = logging.getLogger(__name__)

#: Columns of tables/classification_agreement.csv.
AGREEMENT_COLUMNS = ("acquisition", "mask_scene_id", "time", "n_valid", "agreement",
                     "water_iou", "water_f1", "f_ow_mask", "f_ow_classified")


def acquisitions(scenes: pd.DataFrame) -> pd.DataFrame:
    """Backscatter rows of a scene table with their acquisition key, sorted.

    Parameters
    ----------
    scenes : pandas.DataFrame
        index/scenes.csv (``scene_id, path, time, content, band, acquisition_id``).

    Returns
    -------
    pandas.DataFrame
        The backscatter rows plus column ``acquisition`` (``acquisition_id``, else
        ``scene_id``), sorted by time, acquisition and scene_id.

    Examples
    --------
    >>> t = pd.DataFrame({"scene_id": ["a", "b-hh", "b-hv"], "path": ["", "", ""],
    ...                   "time": ["2025-06-02", "2025-06-01", "2025-06-01"],
    ...                   "content": ["backscatter"] * 3, "band": ["HH HV", "HH", "HV"],
    ...                   "acquisition_id": ["", "b", "b"]})
    >>> acquisitions(t)["acquisition"].tolist()
    ['b', 'b', 'a']
    """
    bs = scenes[scenes["content"] == "backscatter"].copy()
    acq = bs["acquisition_id"].fillna("").astype(str)
    bs["acquisition"] = np.where(acq != "", acq, bs["scene_id"].astype(str))
    return bs.sort_values(["time", "acquisition", "scene_id"], kind="stable")


def batches(scenes: pd.DataFrame, scenes_per_job: int) -> dict[str, list[str]]:
    """Acquisitions per classification job: ``batch-<k>`` -> acquisition keys.

    Examples
    --------
    >>> t = pd.DataFrame({"scene_id": list("abc"), "path": "", "time": ["1", "2", "3"],
    ...                   "content": "backscatter", "band": "HH", "acquisition_id": ""})
    >>> batches(t, 2)
    {'batch-0000': ['a', 'b'], 'batch-0001': ['c']}
    """
    keys = list(dict.fromkeys(acquisitions(scenes)["acquisition"]))
    n = max(1, int(scenes_per_job))
    return {f"batch-{k // n:04d}": keys[k:k + n] for k in range(0, len(keys), n)}


class _Reader:
    """Array-like view of one band of an open scene, for :func:`dask.array.from_array`."""

    def __init__(self, scene, band, scale):
        self.scene, self.band, self.scale = scene, band, scale
        self.shape, self.dtype, self.ndim = tuple(scene.shape), np.dtype("f4"), 2

    def __getitem__(self, key):
        kw = {"scale": self.scale} if self.scale else {}
        return np.asarray(self.scene.read_window(key[0], key[1], band=self.band, **kw),
                          dtype="f4")


def _classify_acquisition(archive: Path, rows: pd.DataFrame, settings: ClassifySettings):
    import dask.array as da

    handles = [open_scene(archive / r.path, "backscatter", bands=r.band or None)
               for r in rows.itertuples()]
    try:
        bands, noise, inc, ref = {}, {}, None, handles[0]
        for sc in handles:
            if (tuple(sc.shape) != tuple(ref.shape) or sc.transform != ref.transform
                    or sc.crs != ref.crs):
                raise ArchiveError.at(str(sc.path), "grid", "the files of one acquisition lie on "
                                   "different grids", "give each file its own acquisition_id")
            ch = settings.chunk_px

            def lazy(band, scale, sc=sc, ch=ch):
                return da.from_array(_Reader(sc, band, scale), chunks=ch, lock=True,
                                     meta=np.empty((0, 0), "f4"))
            for pol in sc.polarisations:
                bands[pol] = lazy(pol, "dB")
            for pol, b in sc.noise.items():
                noise[pol] = lazy(b, "dB")
            if sc.incidence_angle and inc is None:
                inc = lazy(sc.incidence_angle, None)
        mask = classify_scene(bands, inc, noise or None, settings=settings, units="dB")
        # map_overlap may merge chunks smaller than the overlap: store on a regular grid
        return mask.rechunk(settings.chunk_px), ref, handles
    except Exception:
        for h in handles:
            h.close()
        raise


def run_classify(archive: str, rows: list[dict], out_dir: str, settings: dict) -> list[str]:
    """Classify the backscatter acquisitions of one batch into ``out_dir/<key>.zarr``.

    ``rows``: the batch's rows of index/scenes.csv (so that a batch depends on its own
    scenes only). A broken acquisition is logged and left out (the radar source then
    lacks it, as it would a broken mask), so that one file does not stop the batch.
    """
    import dask
    import xarray as xr

    st = ClassifySettings(**settings)
    table = acquisitions(pd.DataFrame(rows, columns=["scene_id", "path", "time", "content",
                                                     "band", "acquisition_id"]).fillna(""))
    written = []
    with atomic_path(Path(out_dir)) as tmp:
        tmp.mkdir(parents=True)
        for key in dict.fromkeys(table["acquisition"]):
            rows = table[table["acquisition"] == key]
            try:
                # one thread: the bands of a file share one reader handle
                with dask.config.set(scheduler="synchronous"):
                    mask, ref, handles = _classify_acquisition(Path(archive), rows, st)
            except ArchiveError as exc:
                log.error("acquisition %s left out: %s", key, exc)
                continue
            try:
                t = ref.transform
                ds = xr.Dataset({"mask": (("y", "x"), mask, {
                    "long_name": "open water / sea ice classified from backscatter",
                    "flag_values": [MASK_CODES["water"], MASK_CODES["ice"],
                                    MASK_CODES["nodata"]],
                    "flag_meanings": "open_water sea_ice no_data", "units": "1"})},
                    attrs={"acquisition": key, "scene_ids": " ".join(rows["scene_id"]),
                           "time": str(rows["time"].iloc[0]), "content": "classified backscatter",
                           "crs_wkt": ref.crs.to_wkt(),
                           "transform": [t.a, t.b, t.c, t.d, t.e, t.f],
                           "classify_settings": json.dumps(settings, sort_keys=True),
                           "floeheat_version": __version__})
                ds["mask"].encoding["chunks"] = (st.chunk_px, st.chunk_px)
                with dask.config.set(scheduler="synchronous"):
                    ds.to_zarr(tmp / f"{key}.zarr", zarr_format=3, consolidated=True,
                               mode="w")
            finally:
                for h in handles:
                    h.close()
            written.append(f"{key}.zarr")
            log.info("classified %s (%d x %d px)", key, *ref.shape)
    return written


class ClassifiedScene:
    """A classified store read like a mask scene (see :func:`open_classified`)."""

    def __init__(self, path):
        import xarray as xr
        from affine import Affine
        from pyproj import CRS

        self.path = Path(path)
        self._ds = xr.open_zarr(self.path, consolidated=True)
        self.crs = CRS.from_wkt(self._ds.attrs["crs_wkt"])
        self.transform = Affine(*self._ds.attrs["transform"])
        self.shape = tuple(self._ds["mask"].shape)

    def read_window(self, rows: slice, cols: slice, band=None) -> np.ndarray:
        """Mask pixels of a window (0 water, 1 ice, 255 no data)."""
        return np.asarray(self._ds["mask"][rows, cols].values, dtype=np.uint8)

    def close(self):
        self._ds.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def open_classified(path) -> ClassifiedScene:
    """Open a classified store with the interface of a mask scene."""
    return ClassifiedScene(path)


def mask_twins(scenes: pd.DataFrame) -> dict[str, str]:
    """Backscatter acquisitions that a mask scene of the same time also covers.

    Returns acquisition key -> mask scene_id (the first by id when several share the
    time); the grids are compared where the pixels are read (:func:`run_agreement`).
    """
    masks = scenes[scenes["content"] == "mask"].sort_values("scene_id")
    by_time = dict(zip(masks["time"][::-1], masks["scene_id"][::-1]))
    acq = acquisitions(scenes).drop_duplicates("acquisition")
    return {a: by_time[t] for a, t in zip(acq["acquisition"], acq["time"]) if t in by_time}


def run_agreement(archive: str, scenes_csv: str, stores: dict[str, str], out_csv: str,
                  mask_codes: dict) -> pd.DataFrame:
    """Agreement of classified backscatter with the archive's mask of the same acquisition.

    ``stores``: acquisition key -> classified store. Pixels that are no data in either
    are left out; ``agreement`` is the share of the others on which both agree.
    """
    scenes = pd.read_csv(scenes_csv, dtype=str, keep_default_na=False)
    paths = dict(zip(scenes["scene_id"], scenes["path"]))
    times = dict(zip(scenes["scene_id"], scenes["time"]))
    twins = mask_twins(scenes)
    rows = []
    for key in sorted(twins):
        if key not in stores or not Path(stores[key]).exists():
            continue
        with open_classified(stores[key]) as cs, \
                open_scene(Path(archive) / paths[twins[key]], "mask",
                           mask_codes=mask_codes) as ms:
            if tuple(ms.shape) != cs.shape or ms.transform != cs.transform:
                log.warning("%s and mask %s share a time but not a grid", key, twins[key])
                continue
            full = (slice(None), slice(None))
            c, m = cs.read_window(*full), ms.read_window(*full)
        ok = (c != MASK_CODES["nodata"]) & (m != MASK_CODES["nodata"])
        iou, f1 = water_iou_f1(c, m)
        w, n = MASK_CODES["water"], int(ok.sum())
        share = (lambda v: float(v.mean())) if n else (lambda v: np.nan)
        rows.append((key, twins[key], times[twins[key]], n, share(c[ok] == m[ok]), iou, f1,
                     share(m[ok] == w), share(c[ok] == w)))
    table = pd.DataFrame(rows, columns=list(AGREEMENT_COLUMNS))
    with atomic_path(Path(out_csv)) as tmp:
        table.to_csv(tmp, index=False, float_format="%.6f", lineterminator="\n")
    log.info("agreement of %d classified acquisitions with their masks", len(table))
    return table
