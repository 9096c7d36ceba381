"""NetCDF-4 (HDF5) files read through h5py: a window costs about the bytes of its chunks.

The NetCDF library identifies a file's format before opening it by reading the file's
first 4 MiB in one call (its magic-number check reads in blocks of that size), far more
than a window of a chunked scene needs. h5py reads only the superblock, the object
headers and attributes, and then the chunks a selection touches.

:func:`open_dataset` presents the root group of a NetCDF-4 file as the NetCDF library
does (dimension names from the dimension scales, the library's bookkeeping attributes
hidden, text attributes as ``str``, one-element attributes as scalars) and lets xarray
decode it as for its ``netcdf4`` engine, so both give the same Dataset. A file that
uses what this reader does not present the same way (no dimension scales, compound,
enum or variable-length types, fixed-length strings longer than one character) gives
None, and the caller opens it through the NetCDF library instead.

h5py is one of the package's dependencies; where it cannot be imported all the same,
:func:`open_dataset` gives None as well.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr
from xarray.backends import AbstractDataStore, BackendArray
from xarray.core import indexing

__all__ = ["HDF5_SIGNATURE", "is_hdf5", "open_dataset"]

#: The first 8 bytes of an HDF5 file whose superblock is at offset 0 (NetCDF-4 files).
HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"

#: Attributes the NetCDF library keeps for itself and never shows (its reserved names).
_HIDDEN = frozenset({
    "CLASS", "DIMENSION_LIST", "NAME", "REFERENCE_LIST", "_Netcdf4Coordinates",
    "_Netcdf4Dimid", "_NCProperties", "_nc3_strict", "_NCZARR_ATTR", "_nczarr_attr",
    "_ARRAY_DIMENSIONS",
})
#: How the NetCDF library marks a dimension stored without a coordinate variable.
_DIMENSION_ONLY = b"This is a netCDF dimension but not a netCDF variable"
#: Prefix of a variable named like a dimension it is not the coordinate of.
_NON_COORD = "_nc4_non_coord_"


class _Unsupported(Exception):
    """The file uses a feature this reader does not present as the NetCDF library does."""


def is_hdf5(path) -> bool:
    """Whether the file starts with the HDF5 signature (as NetCDF-4 files do).

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.NamedTemporaryFile(suffix=".nc") as f:
    ...     _ = f.write(b"CDF\\x01" + bytes(28)); f.flush()
    ...     is_hdf5(f.name)
    False
    """
    with Path(path).open("rb", buffering=0) as f:  # 8 bytes, not a buffer's worth
        return f.read(len(HDF5_SIGNATURE)) == HDF5_SIGNATURE


def open_dataset(path, *, mask_and_scale: bool = True) -> xr.Dataset | None:
    """Open a NetCDF-4 file through h5py, lazily, with times left undecoded.

    Parameters
    ----------
    path : str or Path
        An HDF5-format file (see :func:`is_hdf5`).
    mask_and_scale : bool
        Apply ``_FillValue``/``missing_value``/``scale_factor``/``add_offset``.

    Returns
    -------
    xarray.Dataset or None
        As ``xarray.open_dataset(path, engine="netcdf4", decode_times=False,
        decode_timedelta=False, mask_and_scale=mask_and_scale)`` gives it; None when
        h5py is not installed or the file needs the NetCDF library (see the module
        docstring). Closing the Dataset closes the file.

    Raises
    ------
    OSError
        When HDF5 cannot open the file (truncated, corrupt, not HDF5).
    """
    try:
        import h5py
    except ImportError:
        return None
    handle = h5py.File(path, "r")
    try:
        store = _Store(handle, str(path))
        ds = xr.open_dataset(store, decode_times=False, decode_timedelta=False,
                             mask_and_scale=mask_and_scale)
    except _Unsupported:
        handle.close()
        return None
    except BaseException:
        handle.close()
        raise
    ds.encoding["source"] = str(path)
    return ds


class _Store(AbstractDataStore):
    """The root group of an open h5py file as xarray's data-store interface."""

    def __init__(self, handle, source: str):
        self._handle, self._source = handle, source
        self._datasets = _root_datasets(handle)

    def get_variables(self):
        return {name.removeprefix(_NON_COORD): self._variable(ds)
                for name, ds in self._datasets if not _is_dimension_only(ds)}

    def get_attrs(self):
        return _attributes(self._handle)

    def get_dimensions(self):
        return {name: ds.shape[0] for name, ds in self._datasets
                if _is_dimension_scale(ds)}

    def get_encoding(self):
        return {"unlimited_dims": {name for name, ds in self._datasets
                                   if _is_dimension_scale(ds) and ds.maxshape[0] is None}}

    def close(self):
        self._handle.close()

    def _variable(self, ds) -> xr.Variable:
        dims = _dimensions(ds, self._handle)
        data = indexing.LazilyIndexedArray(_Array(ds))
        attrs = _attributes(ds)
        if ds.dtype.kind == "S" and "_FillValue" in attrs:
            attrs["_FillValue"] = np.bytes_(attrs["_FillValue"])  # as xarray's netcdf4 store
        encoding = {"dtype": ds.dtype, "source": self._source, "original_shape": ds.shape,
                    "contiguous": ds.chunks is None, "chunksizes": ds.chunks}
        if ds.chunks is not None:
            encoding["preferred_chunks"] = dict(zip(dims, ds.chunks, strict=True))
        return xr.Variable(dims, data, attrs, encoding)


class _Array(BackendArray):
    """Lazy view of one h5py dataset: indexing with slices reads only those chunks."""

    def __init__(self, ds):
        _check_dtype(ds)
        self._ds, self.shape, self.dtype = ds, ds.shape, ds.dtype

    def __getitem__(self, key):
        return indexing.explicit_indexing_adapter(
            key, self.shape, indexing.IndexingSupport.BASIC, self._getitem)

    def _getitem(self, key):
        return np.asarray(self._ds[key], dtype=self.dtype)


def _root_datasets(handle) -> list:
    """(name, dataset) of the root group's datasets in the file's order: variables and
    dimensions (groups and named types are not variables of the root group)."""
    import h5py

    found = ((name, handle.get(name)) for name in handle)
    return [(name, obj) for name, obj in found if isinstance(obj, h5py.Dataset)]


def _check_dtype(ds) -> None:
    """Raise _Unsupported for types the NetCDF library presents differently."""
    import h5py

    dt = ds.dtype
    if h5py.check_enum_dtype(dt) is not None or dt.kind not in "iufS" or (
            dt.kind == "S" and dt.itemsize != 1):
        raise _Unsupported(f"{ds.name}: type {dt}")


def _is_dimension_scale(ds) -> bool:
    return _raw_attr(ds, "CLASS") == b"DIMENSION_SCALE"


def _is_dimension_only(ds) -> bool:
    name = _raw_attr(ds, "NAME")
    return isinstance(name, bytes) and name.startswith(_DIMENSION_ONLY)


def _raw_attr(obj, key):
    return obj.attrs[key] if key in obj.attrs else None


def _dimension_name(ds) -> str:
    return ds.name.rsplit("/", 1)[-1]


def _dimensions(ds, handle) -> tuple[str, ...]:
    """Dimension names of a dataset, from its own dimension scale or its
    ``DIMENSION_LIST`` (one scale per axis, as the NetCDF library writes them)."""
    if ds.ndim == 0:
        return ()
    if _is_dimension_scale(ds):
        if ds.ndim != 1:
            raise _Unsupported(f"{ds.name}: a {ds.ndim}-D dimension scale")
        return (_dimension_name(ds),)
    refs = _raw_attr(ds, "DIMENSION_LIST")
    if refs is None or len(refs) != ds.ndim or any(len(r) != 1 for r in refs):
        raise _Unsupported(f"{ds.name}: no dimension scale for every axis")
    return tuple(_dimension_name(handle[r[0]]) for r in refs)


def _attributes(obj) -> dict:
    """The attributes the NetCDF library shows, with its Python types."""
    return {key: _attribute_value(key, obj.attrs[key]) for key in obj.attrs
            if key not in _HIDDEN}


def _attribute_value(key: str, value):
    """An attribute as the NetCDF library's Python interface returns it: text as str
    (NUL characters dropped; a text ``_FillValue`` as bytes), a list of str for several
    strings, a numpy scalar for one number, else a 1-D array.

    Examples
    --------
    >>> _attribute_value("units", np.bytes_(b"dB"))
    'dB'
    >>> _attribute_value("flag_values", np.array([0, 1, 255], np.uint8))
    array([  0,   1, 255], dtype=uint8)
    >>> _attribute_value("scale_factor", np.array([0.5]))
    np.float64(0.5)
    >>> _attribute_value("names", np.array(["a", "b"], dtype=object))
    ['a', 'b']
    """
    import h5py

    if isinstance(value, h5py.Empty):
        if value.dtype.kind in "SO":
            return ""
        return np.array([], dtype=value.dtype)
    if isinstance(value, bytes):
        return bytes(value) if key == "_FillValue" else _text(value)
    if isinstance(value, str):
        return _text(value)
    arr = np.asarray(value)
    if arr.dtype.kind == "O" and all(isinstance(v, (str, bytes)) for v in arr.ravel()):
        texts = [_text(v) for v in arr.ravel()]
        return texts[0] if len(texts) == 1 else texts
    if arr.dtype.kind not in "iuf":
        raise _Unsupported(f"attribute {key}: type {arr.dtype}")
    arr = arr.reshape(-1).astype(arr.dtype.newbyteorder("="), copy=False)
    return arr[0] if arr.size == 1 else arr


def _text(value) -> str:
    if isinstance(value, bytes):
        value = value.decode("utf-8", errors="replace")
    return str(value).replace("\x00", "")
