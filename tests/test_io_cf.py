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
