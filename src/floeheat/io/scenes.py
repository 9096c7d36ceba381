"""Radar scenes (GeoTIFF or CF NetCDF): a handle that reads windows, never whole files.

A window costs about the bytes of the tiles or chunks it touches plus the file's
header: GeoTIFF is read through GDAL with an unbuffered opener
(:func:`floeheat.io._raster.exact_opener`), NetCDF-4 through h5py
(:func:`floeheat.io.cf.open_netcdf_windowed`), classic NetCDF through the NetCDF library.

Masks are returned in the package's canonical coding (``constants.MASK_CODES``:
0 water, 1 ice, 255 no data) whatever the file's coding (``mask_codes``); codes
that belong to no class read as no data. Backscatter is float32 sigma0 with NaN for
no data, in the file's scale by default (``.units`` says 'dB' or '1' per band) or
converted with ``scale='linear'`` / ``scale='dB'``.
"""

from __future__ import annotations

import re
import warnings
from pathlib import Path

import affine
import numpy as np
import pyproj

from floeheat.constants import MASK_CODES
from floeheat.errors import ArchiveError
from floeheat.io.archive import parse_iso_time
from floeheat.io.cf import canonical, crs_of, open_netcdf_windowed

__all__ = ["Scene", "open_scene", "INCIDENCE_ANGLE", "NOISE_PREFIX"]

#: Name (band description or variable) of the incidence angle [degrees].
INCIDENCE_ANGLE = "incidence_angle"
#: Prefix of noise-floor bands: ``noise_equivalent_sigma0`` or ``..._<pol>``.
NOISE_PREFIX = "noise_equivalent_sigma0"
_CONTENTS = ("mask", "backscatter")
#: What GDAL (rasterio), HDF5 (h5py) and the NetCDF library raise for unreadable data.
_READ_ERRORS = (OSError, RuntimeError)


def open_scene(path, content: str, bands=None, mask_codes=None) -> Scene:
    """Open a radar scene for windowed reading.

    Parameters
    ----------
    path : str or Path
        GeoTIFF (``.tif``/``.tiff``) or CF NetCDF.
    content : {'mask', 'backscatter'}
    bands : str or sequence of str, optional
        The polarisations in band order (the ``band`` column of scenes.csv), used to
        name GeoTIFF bands without descriptions and checked against named ones.
    mask_codes : dict, optional
        The file's codes per class, ``{'water': 0, 'ice': 1, 'nodata': 255}`` by
        default; a class may list several codes.

    Returns
    -------
    Scene
    """
    return Scene(path, content, bands=bands, mask_codes=mask_codes)


class Scene:
    """An open radar scene (use as a context manager).

    Attributes
    ----------
    path : Path
    content : {'mask', 'backscatter'}
    crs : pyproj.CRS
    transform : affine.Affine
        Maps (col, row) of pixel corners to (x, y) in the CRS.
    shape : tuple of int
        (rows, cols).
    bands : tuple of str
        Every band that can be read: polarisations (or 'mask'), then
        'incidence_angle' and 'noise_equivalent_sigma0_<pol>' when present.
    polarisations : tuple of str
        The sigma0 bands (empty for masks).
    incidence_angle : str or None
        The incidence-angle band [degrees] when present.
    noise : dict
        Polarisation -> its noise-floor band.
    units : dict
        Band -> 'dB', '1' or 'degree'.
    time : numpy.datetime64
        ``time_coverage_start`` from the file, NaT when absent.
    """

    def __init__(self, path, content, bands=None, mask_codes=None):
        if content not in _CONTENTS:
            raise ValueError(f"content must be one of {_CONTENTS}, not {content!r}")
        self.path = Path(path)
        self.content = content
        self.mask_codes = dict(MASK_CODES if mask_codes is None else mask_codes)
        if isinstance(bands, str):
            bands = bands.split()
        self._given = tuple(bands) if bands else ()
        self._src = self._ds = None
        if not self.path.is_file():
            raise ArchiveError.at(str(self.path), "", "the scene file does not exist",
                                  "check the path in scenes.csv")
        if self.path.suffix.lower() in (".tif", ".tiff"):
            names, units, attrs = self._open_tiff()
        else:
            names, units, attrs = self._open_netcdf()
        self._classify(names, units)
        try:
            self.time = parse_iso_time(attrs.get("time_coverage_start", ""))
        except ValueError:
            self.time = np.datetime64("NaT", "ns")

    # ------------------------------------------------------------ opening

    def _open_tiff(self):
        import rasterio

        from floeheat.io._raster import exact_opener

        try:
            # GDAL then reads exactly the header, directory and tiles it needs
            self._src = rasterio.open(self.path, opener=exact_opener)
        except rasterio.errors.RasterioIOError as exc:
            raise ArchiveError.at(str(self.path), "",
                                  f"cannot be read as GeoTIFF ({_library_message(exc)})",
                                  "copy the file again from its source") from exc
        src = self._src
        if src.crs is None:
            self.close()
            raise ArchiveError.at(str(self.path), "", "the scene has no CRS",
                                  "write the GeoTIFF with its CRS (e.g. EPSG:3413)")
        self.crs = pyproj.CRS.from_wkt(src.crs.to_wkt())
        self.transform = affine.Affine(*tuple(src.transform)[:6])
        self.shape = (src.height, src.width)
        tags = src.tags()
        described = [d or "" for d in src.descriptions]
        if not any(described):
            if self.content == "mask":
                described = ["mask"] + [f"band{i}" for i in range(2, src.count + 1)]
            else:
                described = list(self._given) + [f"band{i}" for i in
                                                 range(len(self._given) + 1, src.count + 1)]
        names = {}
        units = {}
        for i, name in enumerate(described[:src.count], start=1):
            name = name or f"band{i}"
            names[name] = i
            units[name] = src.units[i - 1] or src.tags(i).get("units") or tags.get("units", "")
        return names, units, tags

    def _open_netcdf(self):
        ds = open_netcdf_windowed(self.path, mask_and_scale=self.content != "mask")
        self._ds = ds
        xname, yname = self._axis("projection_x_coordinate", "x"), self._axis(
            "projection_y_coordinate", "y")
        x = canonical(ds, xname, "m", file=self.path).values
        y = canonical(ds, yname, "m", file=self.path).values
        self._xdim, self._ydim = ds[xname].dims[0], ds[yname].dims[0]
        grids = {str(n): v for n, v in ds.data_vars.items()
                 if set(v.dims) == {self._xdim, self._ydim}
                 and v.attrs.get("standard_name") not in ("latitude", "longitude")}
        if not grids:
            self.close()
            raise ArchiveError.at(str(self.path), "", "no variable on the y/x grid",
                                  "store the scene on (y, x)")
        crs = crs_of(ds, next(iter(grids)), file=self.path, required=False)
        if crs is None:
            self.close()
            raise ArchiveError.at(str(self.path), "", "the scene has no CRS",
                                  "add a CF grid_mapping variable with crs_wkt")
        self.crs = crs
        self.shape = (y.size, x.size)
        self.transform = _transform(x, y, self.path, xname, yname)
        if self.content == "mask":
            flagged = [n for n, v in grids.items() if "flag_values" in v.attrs]
            chosen = flagged or list(grids)
            if len(chosen) > 1:
                self.close()
                raise ArchiveError.at(str(self.path), f"variables {', '.join(chosen)}",
                                      "several variables could be the mask",
                                      "keep one mask variable (with flag_values) per file")
            self._vars = {"mask": chosen[0]}
        else:
            self._vars = {}
            for name, var in grids.items():
                pol = str(var.attrs.get("polarisation", var.attrs.get("polarization", name)))
                role = str(var.attrs.get("role", ""))
                # the role says what a band is; a noise floor names its polarisation too
                if role == "noise_equivalent_sigma0" or name.startswith(NOISE_PREFIX):
                    label = name if name.startswith(NOISE_PREFIX) else f"{NOISE_PREFIX}_{pol}"
                elif (var.attrs.get("standard_name") == "angle_of_incidence"
                      or role == INCIDENCE_ANGLE):
                    label = INCIDENCE_ANGLE
                else:
                    label = pol
                self._vars[label] = name
        units = {label: str(ds[name].attrs.get("units", "")) for label, name in
                 self._vars.items()}
        return {label: label for label in self._vars}, units, dict(ds.attrs)

    def _axis(self, standard_name, fallback):
        ds = self._ds
        for name, var in ds.variables.items():
            if var.ndim == 1 and var.attrs.get("standard_name") == standard_name:
                return str(name)
        if fallback in ds.variables and ds[fallback].ndim == 1:
            return fallback
        self.close()
        raise ArchiveError.at(str(self.path), f"standard_name {standard_name!r}",
                              f"no 1-D {fallback} coordinate",
                              f"add the {fallback} coordinate in metres with its standard_name")

    def _classify(self, names, units):
        """Sort band names into polarisations, incidence angle and noise floors."""
        self._index = names  # band name -> GeoTIFF index or NetCDF label
        if self.content == "mask":
            chosen = "mask" if "mask" in names else next(iter(names))
            # the mask band is always read as "mask", whatever the file calls it
            self.bands = ("mask",)
            self._index = {"mask": names[chosen]}
            self.polarisations, self.incidence_angle, self.noise = (), None, {}
            self.units = {"mask": "1"}
            return
        pols = [n for n in names if n != INCIDENCE_ANGLE and not n.startswith(NOISE_PREFIX)
                and not n.startswith("band")]
        missing = [b for b in self._given if b not in pols]
        if missing:
            self.close()
            raise ArchiveError.at(str(self.path), "bands",
                                  f"the scene table lists {' '.join(self._given)!r} but the "
                                  f"file's bands are {' '.join(pols) or 'unnamed'!r}",
                                  "correct the band column or the band descriptions")
        self.polarisations = tuple(pols)
        self.incidence_angle = INCIDENCE_ANGLE if INCIDENCE_ANGLE in names else None
        self.noise = {}
        for n in names:
            if n.startswith(NOISE_PREFIX):
                pol = n[len(NOISE_PREFIX):].lstrip("_")
                if not pol and len(pols) == 1:
                    pol = pols[0]
                self.noise[pol] = n
        self.bands = (self.polarisations + ((self.incidence_angle,) if self.incidence_angle
                                            else ()) + tuple(self.noise.values()))
        if not self.polarisations:
            self.close()
            raise ArchiveError.at(str(self.path), "bands", "no polarisation band found",
                                  "describe the bands (e.g. 'HH') or fill the band column")
        self.units = {}
        for n in self.bands:
            if n == self.incidence_angle:
                self.units[n] = "degree"
            else:
                self.units[n] = "dB" if units.get(n, "").strip().lower() == "db" else "1"

    # ------------------------------------------------------------ reading

    def read_window(self, rows: slice, cols: slice, band: str | None = None,
                    scale: str = "stored") -> np.ndarray:
        """Read one window of one band; only that window is read from disk.

        Parameters
        ----------
        rows, cols : slice
            Row and column ranges (step 1), as for a numpy array of ``shape``.
        band : str, optional
            A name in ``bands``; the first band by default.
        scale : {'stored', 'linear', 'dB'}
            For sigma0 and noise bands: keep the file's scale or convert.

        Returns
        -------
        numpy.ndarray
            2-D; uint8 canonical codes for masks, float32 (NaN no data) otherwise.
        """
        band = self.bands[0] if band is None else band
        if band not in self.bands:
            raise KeyError(f"{self.path}: no band {band!r}; bands are {self.bands}")
        (r0, r1, rs), (c0, c1, cs) = rows.indices(self.shape[0]), cols.indices(self.shape[1])
        if rs != 1 or cs != 1:
            raise ValueError("read_window takes slices with step 1")
        r1, c1 = max(r1, r0), max(c1, c0)
        try:
            if self._src is not None:
                data, nodata = self._read_tiff(band, r0, r1, c0, c1)
            else:
                data, nodata = self._read_netcdf(band, r0, r1, c0, c1)
        except _READ_ERRORS as exc:
            raise ArchiveError.at(
                str(self.path), self._place(band),
                f"rows {r0}:{r1}, columns {c0}:{c1} cannot be read, the file may be "
                f"truncated or corrupt ({_library_message(exc)})",
                "copy the file again from its source, or remove it from the archive"
            ) from exc
        if self.content == "mask":
            return self._canonical_mask(data)
        data = data.astype("float32")
        if nodata is not None and not np.isnan(nodata):
            data[data == nodata] = np.nan
        return self._rescale(data, band, scale)

    def _read_tiff(self, band, r0, r1, c0, c1):
        from rasterio.windows import Window

        idx = self._index[band]
        if r1 == r0 or c1 == c0:
            return np.empty((r1 - r0, c1 - c0), self._src.dtypes[idx - 1]), None
        data = self._src.read(idx, window=Window(c0, r0, c1 - c0, r1 - r0))
        return data, self._src.nodatavals[idx - 1]

    def _read_netcdf(self, band, r0, r1, c0, c1):
        var = self._ds[self._vars[band]]
        window = var.isel({self._ydim: slice(r0, r1), self._xdim: slice(c0, c1)})
        data = np.asarray(window.transpose(self._ydim, self._xdim).values)
        return data, None

    def _place(self, band) -> str:
        """Where a band is in the file, for messages."""
        if self._src is not None:
            return f"band {self._index[band]} ({band})"
        return f"variable {self._vars[band]}"

    def _canonical_mask(self, data):
        out = np.full(data.shape, MASK_CODES["nodata"], dtype="uint8")
        for cls in ("water", "ice"):
            out[np.isin(data, np.atleast_1d(self.mask_codes[cls]))] = MASK_CODES[cls]
        return out

    def _rescale(self, data, band, scale):
        if scale not in ("stored", "linear", "dB"):
            raise ValueError(f"scale must be 'stored', 'linear' or 'dB', not {scale!r}")
        stored = self.units[band]
        if scale == "stored" or stored == "degree" or stored == scale or (
                scale == "linear" and stored == "1"):
            return data
        if scale == "linear":
            return np.power(np.float32(10), data / np.float32(10))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            return np.where(data > 0, 10 * np.log10(data), np.nan).astype("float32")

    # ------------------------------------------------------------ lifetime

    def close(self):
        """Close the file."""
        for handle in (self._src, self._ds):
            if handle is not None:
                handle.close()
        self._src = self._ds = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def __repr__(self):
        return (f"Scene({str(self.path)!r}, content={self.content!r}, shape={self.shape}, "
                f"bands={self.bands})")


def _library_message(exc: BaseException) -> str:
    """A reading library's message with its chained cause, and without the name rasterio
    gives the opener's virtual file system (the file is named in the error already).

    Examples
    --------
    >>> _library_message(OSError("'/vsiriopener_0a1b//data/s.tif' not recognized"))
    "'/data/s.tif' not recognized"
    """
    text = str(exc)
    if exc.__cause__ is not None:
        text = f"{text}: {exc.__cause__}"
    return re.sub(r"/vsiriopener_[0-9a-f]+/", "", text)


def _transform(x, y, path, xname, yname) -> affine.Affine:
    """Affine transform of pixel corners from 1-D, regular pixel-centre axes.

    Examples
    --------
    >>> _transform(np.array([50.0, 150.0]), np.array([950.0, 850.0]), "a.nc", "x", "y")
    Affine(100.0, 0.0, 0.0,
           0.0, -100.0, 1000.0)
    """
    steps = []
    for values, name in ((x, xname), (y, yname)):
        if values.size < 2:
            raise ArchiveError.at(str(path), f"variable {name}",
                                  "fewer than two pixels: the pixel size is unknown",
                                  "store at least two pixels per axis")
        d = np.diff(values)
        step = (values[-1] - values[0]) / (values.size - 1)
        if step == 0 or not np.allclose(d, step, rtol=1e-6, atol=0):
            raise ArchiveError.at(str(path), f"variable {name}",
                                  "the axis is not regularly spaced",
                                  "store the scene on a regular grid")
        steps.append(float(step))
    dx, dy = steps
    return affine.Affine(dx, 0.0, float(x[0]) - dx / 2, 0.0, dy, float(y[0]) - dy / 2)
