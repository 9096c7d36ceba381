"""floeheat.io.cf: variable look-up, units, times, CRS, safe opening."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from floeheat.errors import ArchiveError
from floeheat.io import cf


def _ds(**variables):
    return xr.Dataset({k: v for k, v in variables.items()})


def test_find_by_standard_name_and_role():
    ds = _ds(a=("n", [1.0], {"standard_name": "sea_water_temperature"}),
             b=("n", [2.0], {"role": "string_temperature"}))
    assert cf.find_variable(ds, file="f.nc", standard_name="sea_water_temperature") == "a"
    assert cf.find_variable(ds, file="f.nc", role="string_temperature") == "b"
    assert cf.find_variable(ds, file="f.nc", role="ice_bottom_depth", required=False) is None


def test_missing_standard_name_names_file_and_name():
    ds = _ds(a=("n", [1.0], {"standard_name": "sea_water_temperature"}))
    with pytest.raises(ArchiveError, match=r"f\.nc: standard_name 'sea_water_pressure'"):
        cf.find_variable(ds, file="f.nc", standard_name="sea_water_pressure")


def test_two_variables_claiming_a_name_is_an_error_but_bounds_are_skipped():
    ds = _ds(a=("n", [1.0], {"standard_name": "time", "bounds": "a_b"}),
             a_b=(("n", "v"), [[0.0, 1.0]], {"standard_name": "time"}))
    assert cf.find_variable(ds, file="f.nc", standard_name="time") == "a"
    ds["c"] = ("n", [3.0], {"standard_name": "time"})
    with pytest.raises(ArchiveError, match="variables a, c"):
        cf.find_variable(ds, file="f.nc", standard_name="time")


@pytest.mark.parametrize(("units", "to", "value", "expected"), [
    ("K", "degC", 271.35, -1.8),
    ("Pa", "dbar", 25000.0, 2.5),
    ("W s m-2", "J m-2", 5.0, 5.0),
    ("%", "1", 87.0, 0.87),
    ("km", "m", 1.5, 1500.0),
])
def test_canonical_conversion(units, to, value, expected):
    ds = _ds(v=("n", [value], {"units": units}))
    assert float(cf.canonical(ds, "v", to, file="f.nc")[0]) == pytest.approx(expected)


def test_canonical_stays_lazy():
    ds = _ds(v=("n", np.arange(4.0), {"units": "K"})).chunk()
    out = cf.canonical(ds, "v", "degC", file="f.nc")
    assert out.chunks is not None
    assert out.attrs["units"] == "degC"


@pytest.mark.parametrize("units", ["furlongs per fortnight", "m"])
def test_unknown_or_wrong_units_name_file_variable_and_units(units):
    ds = _ds(temp=("n", [1.0], {"units": units}))
    with pytest.raises(ArchiveError) as err:
        cf.canonical(ds, "temp", "degC", file="f.nc")
    assert "f.nc: variable temp" in str(err.value) and repr(units) in str(err.value)


def test_missing_units():
    with pytest.raises(ArchiveError, match="variable v: has no units"):
        cf.canonical(_ds(v=("n", [1.0])), "v", "m", file="f.nc")


def test_decode_time_offset_and_noleap():
    ds = _ds(t=("n", [0.0, 90.0], {"units": "minutes since 2020-05-01T03:00:00+03:00"}))
    assert str(cf.decode_time(ds, "t", file="f.nc")[1]) == "2020-05-01T01:30:00.000000000"
    ds = _ds(t=("n", [59.0], {"units": "days since 2021-01-01", "calendar": "noleap"}))
    assert cf.decode_time(ds, "t", file="f.nc")[0] == np.datetime64("2021-03-01", "ns")
    ds = _ds(t=("n", [1.0], {"units": "m"}))
    with pytest.raises(ArchiveError, match="variable t: units 'm' are not CF time units"):
        cf.decode_time(ds, "t", file="f.nc")


def test_times_not_increasing_names_first_offending_index():
    t = np.array(["2020-01-01", "2020-01-02", "2020-01-02", "2020-01-01"], "datetime64[ns]")
    with pytest.raises(ArchiveError, match=r"f\.nc: variable clock, index 2: times are not"):
        cf.check_increasing(t, file="f.nc", where="variable clock")


def test_crs_from_grid_mapping_attributes_and_wkt():
    import pyproj

    polar = pyproj.CRS.from_epsg(3413)
    params = {k: v for k, v in polar.to_cf().items() if k != "crs_wkt"}
    ds = _ds(v=(("y", "x"), [[1.0]], {"grid_mapping": "gm"}), gm=((), 0, params))
    got = cf.crs_of(ds, "v", file="f.nc").to_cf()
    assert got["grid_mapping_name"] == "polar_stereographic"
    assert got["standard_parallel"] == 70.0
    assert got["straight_vertical_longitude_from_pole"] == -45.0
    ds = _ds(v=(("y", "x"), [[1.0]], {"grid_mapping": "gm: x y"}),
             gm=((), 0, {"spatial_ref": polar.to_wkt()}))
    assert cf.crs_of(ds, "v", file="f.nc") == polar
    with pytest.raises(ArchiveError, match="no CRS"):
        cf.crs_of(_ds(v=(("y", "x"), [[1.0]])), "v", file="f.nc")


def test_truncated_netcdf_names_the_file(tmp_path):
    import netCDF4

    good = tmp_path / "good.nc"
    with netCDF4.Dataset(good, "w", format="NETCDF3_CLASSIC") as ds:
        ds.createDimension("n", 5000)
        ds.createVariable("v", "f8", ("n",))[:] = np.arange(5000.0)
    bad = tmp_path / "bad.nc"
    bad.write_bytes(good.read_bytes()[:20000])
    assert cf.open_netcdf(good)["v"].size == 5000
    with pytest.raises(ArchiveError, match=r"bad\.nc: cannot be read as NetCDF"):
        cf.open_netcdf(bad)
    h5 = tmp_path / "h5.nc"
    with netCDF4.Dataset(h5, "w") as ds:
        ds.createDimension("n", 5000)
        ds.createVariable("v", "f8", ("n",))[:] = np.arange(5000.0)
    (tmp_path / "h5bad.nc").write_bytes(h5.read_bytes()[:3000])
    with pytest.raises(ArchiveError, match=r"h5bad\.nc: cannot be read as NetCDF"):
        cf.open_netcdf(tmp_path / "h5bad.nc")
    with pytest.raises(ArchiveError, match="does not exist"):
        cf.open_netcdf(tmp_path / "absent.nc")


def test_windowed_open_names_a_truncated_or_missing_file(tmp_path):
    import netCDF4

    for fmt in ("NETCDF3_CLASSIC", "NETCDF4"):
        good = tmp_path / f"good_{fmt}.nc"
        with netCDF4.Dataset(good, "w", format=fmt) as ds:
            ds.createDimension("n", 5000)
            ds.createVariable("v", "f8", ("n",))[:] = np.arange(5000.0)
        assert float(cf.open_netcdf_windowed(good)["v"][-1]) == 4999.0
        bad = tmp_path / f"bad_{fmt}.nc"
        bad.write_bytes(good.read_bytes()[:3000])
        with pytest.raises(ArchiveError, match=rf"bad_{fmt}\.nc: cannot be read as NetCDF"):
            cf.open_netcdf_windowed(bad)
    with pytest.raises(ArchiveError, match=r"absent\.nc: the file does not exist"):
        cf.open_netcdf_windowed(tmp_path / "absent.nc")


def _netcdf4_variety(path, fmt):
    """A NetCDF-4 file with what scene and gridded files carry: packed and flagged
    variables, a grid mapping, text, string and numeric attributes, a big-endian
    coordinate, a dimension without coordinate variable, an unlimited dimension, a
    variable named like a dimension it is not the coordinate of, a subgroup."""
    import netCDF4

    strings = fmt == "NETCDF4"  # the classic model has neither strings nor groups
    with netCDF4.Dataset(path, "w", format=fmt) as ds:
        ds.setncatts({"Conventions": "CF-1.8", "content": "mask", "empty": "",
                      "time_coverage_start": "2020-06-02T00:00:00Z",
                      "levels": np.array([1, 2, 3], "i4"), "version": 1.5})
        ds.createDimension("y", 3)
        ds.createDimension("x", 4)
        ds.createDimension("nv", 2)
        ds.createDimension("t", None)
        y = ds.createVariable("y", ">f8", ("y",), endian="big")
        y[:] = [250.0, 150.0, 50.0]
        y.setncatts({"standard_name": "projection_y_coordinate", "units": "m"})
        x = ds.createVariable("x", "f8", ("x",), zlib=True)
        x[:] = [50.0, 150.0, 250.0, 350.0]
        x.setncatts({"standard_name": "projection_x_coordinate", "units": "km"})
        gm = ds.createVariable("crs", "i4", ())
        gm.setncatts({"grid_mapping_name": "polar_stereographic",
                      "straight_vertical_longitude_from_pole": -45.0,
                      "standard_parallel": 70.0, "latitude_of_projection_origin": 90.0})
        if strings:
            gm.setncattr_string("crs_wkt", "EPSG:3413 as text")
            gm.setncattr_string("names", ["a", "b"])
        packed = ds.createVariable("sigma0", "i2", ("y", "x"), fill_value=-9, zlib=True,
                                   chunksizes=(2, 2))
        packed.setncatts({"scale_factor": 0.5, "add_offset": -20.0, "units": "dB",
                          "grid_mapping": "crs"})
        packed.set_auto_maskandscale(False)  # write the packed integers as they are
        packed[:] = np.array([[0, 2, 4, -9], [6, -9, 8, 10], [12, 14, 16, 18]], "i2")
        byte = "u1" if strings else "i1"  # the classic model has no unsigned types
        mask = ds.createVariable("classes", byte, ("y", "x"))
        mask.setncatts({"flag_values": np.array([0, 1, 9], byte),
                        "flag_meanings": "water ice no_data", "grid_mapping": "crs"})
        mask[:] = np.array([[0, 1, 1, 9]] * 3, byte)
        bnds = ds.createVariable("bounds", "f4", ("t", "nv"))
        bnds[0:2] = np.array([[0.0, 1.0], [1.0, 2.0]], "f4")
        if strings:
            ds.createVariable("nv", "f4", ("t",))[0:2] = [5.0, 6.0]
            chars = ds.createVariable("code", "S1", ("nv",), fill_value=b"-")
            chars[0] = b"a"
            ds.createGroup("extra").createVariable("z", "f4", ())


def _same_value(a, b) -> bool:
    if type(a) is not type(b):
        return False
    if isinstance(a, np.ndarray):
        return a.dtype == b.dtype and np.array_equal(a, b)
    return a == b


@pytest.mark.parametrize("fmt", ["NETCDF4", "NETCDF4_CLASSIC"])
@pytest.mark.parametrize("mask_and_scale", [True, False])
def test_windowed_open_gives_what_the_netcdf_library_gives(tmp_path, fmt, mask_and_scale):
    # The check values are the NetCDF library's own reading of the same file (xarray's
    # netcdf4 engine), names, order, types and values alike.
    from floeheat.io import _hdf5

    path = tmp_path / "v.nc"
    _netcdf4_variety(path, fmt)
    assert _hdf5.open_dataset(path) is not None  # the h5py reader, not the fallback
    with cf.open_netcdf_windowed(path, mask_and_scale=mask_and_scale) as got, \
            cf.open_netcdf(path, probe=False, mask_and_scale=mask_and_scale) as want:
        xr.testing.assert_identical(got, want)
        assert list(got.variables) == list(want.variables)
        assert got.encoding["unlimited_dims"] == want.encoding["unlimited_dims"] == {"t"}
        for name in [None, *got.variables]:
            a, b = (got.attrs, want.attrs) if name is None else (got[name].attrs,
                                                                 want[name].attrs)
            assert list(a) == list(b), name
            assert all(_same_value(a[k], b[k]) for k in a), (name, a, b)
            if name is not None:
                assert got[name].dtype == want[name].dtype, name
        raw = np.array([[0, 2, 4, -9], [6, -9, 8, 10], [12, 14, 16, 18]], "i2")
        # CF Conventions 1.8, 8.1 (packed data) and 2.5.1 (_FillValue): 0.5 raw - 20
        expected = np.where(raw == -9, np.nan, 0.5 * raw - 20.0) if mask_and_scale else raw
        np.testing.assert_array_equal(got["sigma0"].values, expected)


def test_windowed_open_leaves_other_files_to_the_netcdf_library(tmp_path):
    import netCDF4

    from floeheat.io import _hdf5

    strings = tmp_path / "strings.nc"
    with netCDF4.Dataset(strings, "w") as ds:
        ds.createDimension("n", 2)
        v = ds.createVariable("platform", str, ("n",))
        v[0], v[1] = "floe camp", "ship"
    classic = tmp_path / "classic.nc"
    with netCDF4.Dataset(classic, "w", format="NETCDF3_CLASSIC") as ds:
        ds.createDimension("n", 3)
        ds.createVariable("v", "f4", ("n",))[:] = [1.0, 2.0, 3.0]
    assert _hdf5.open_dataset(strings) is None  # variable-length strings: not handled
    assert not _hdf5.is_hdf5(classic)
    for path in (strings, classic):
        with cf.open_netcdf_windowed(path) as got, cf.open_netcdf(path, probe=False) as want:
            xr.testing.assert_identical(got, want)


def test_cf_degree_spellings_agree_with_the_units_registry():
    # CF Conventions 1.11, sections 4.1-4.2: the recommended latitude/longitude units;
    # reference: pint with cf-xarray's registry (PyPI) reads each as degrees of that axis
    from floeheat.io.cf import _CF_DEGREES, is_degrees
    from floeheat.units import parse_units

    for axis, spellings in _CF_DEGREES.items():
        assert len(spellings) == 6
        for units in spellings:
            assert is_degrees(units, axis)
            assert str(parse_units(units)) == f"degrees_{axis}"
    assert not is_degrees("degrees_north", "east")
