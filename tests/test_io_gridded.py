"""floeheat.io.gridded: shortwave, concentration and bathymetry grids."""

from __future__ import annotations

import dask
import numpy as np
import pytest

import variant_files as vf
from floeheat.errors import ArchiveError
from floeheat.io.gridded import (
    open_bathymetry,
    open_concentration,
    open_shortwave,
    read_shortwave_csv,
)


def _no_compute(*args, **kwargs):
    raise AssertionError("dask computed while opening: the reader must stay lazy")


def _months(tmp_path, units="J m-2"):
    flux = lambda h: 50.0 + h  # noqa: E731 - W m-2 at hours since the month start
    return [vf.shortwave_accumulated_month(tmp_path / "sw_2020_06.nc", "2020-06-01", 4,
                                           units=units, flux_W_m2=flux),
            vf.shortwave_accumulated_month(tmp_path / "sw_2020_05.nc", "2020-05-31T12:00", 4,
                                           units=units, flux_W_m2=flux)]


@pytest.mark.parametrize("units", ["J m-2", "W s m-2"])
def test_shortwave_accumulation_split_by_month_lazy(tmp_path, units):
    with dask.config.set(scheduler=_no_compute):
        ds = open_shortwave(_months(tmp_path, units))
    assert ds["sw_down"].chunks is not None
    assert ds["sw_down"].dims == ("time", "latitude", "longitude")
    t = ds["time"].values
    assert t[0] == np.datetime64("2020-05-31T15:00", "ns") and t.size == 8
    assert np.all(np.diff(t) == np.timedelta64(3, "h"))  # May file first after sorting
    np.testing.assert_array_equal(ds["time_bnds"].values[:, 1], t)
    np.testing.assert_array_equal(ds["time_bnds"].values[:, 0], t - np.timedelta64(3, "h"))
    np.testing.assert_allclose(ds["sw_down"].values[:, 0, 0],
                               [53.0, 56.0, 59.0, 62.0] * 2, rtol=1e-6)
    assert list(ds["latitude"].values) == [79.0, 80.0, 81.0]
    assert ds.attrs["longitude_range"] == "0..360"
    assert ds["sw_down"].attrs["units"] == "W m-2"


def test_shortwave_overlap_and_duplicates_are_rejected(tmp_path):
    a = vf.shortwave_accumulated_month(tmp_path / "a.nc", "2020-06-01", 4)
    b = vf.shortwave_accumulated_month(tmp_path / "b.nc", "2020-06-01T06:00", 2)
    with pytest.raises(ArchiveError) as err:
        open_shortwave([a, b])
    assert "a.nc and " in str(err.value) and "b.nc" in str(err.value)
    assert "the same time" in str(err.value)


def test_shortwave_irregular_without_bounds(tmp_path):
    import netCDF4

    path = vf.shortwave_accumulated_month(tmp_path / "i.nc", "2020-06-01", 4)
    with netCDF4.Dataset(path, "a") as ds:
        ds["valid_time"][:] = [3.0, 6.0, 9.0, 10.0]
    with pytest.raises(ArchiveError, match=r"i\.nc: variable time, index 3: irregular"):
        open_shortwave(path)


def test_shortwave_projected_with_bounds(tmp_path):
    ds = open_shortwave(vf.shortwave_projected_bounds(tmp_path / "p.nc"))
    assert ds["sw_down"].dims == ("time", "y", "x")
    assert list(ds["y"].values) == [10000.0, 20000.0, 30000.0]
    assert ds["time_bnds"].values[0, 0] == np.datetime64("2020-06-01T12:00", "ns")
    np.testing.assert_allclose(ds["sw_down"].values[0, :, 0], [4.0, 2.0, 0.0])
    assert "Polar Stereographic" in ds.attrs["crs_wkt"]


def test_shortwave_csv(tmp_path):
    path = vf.write_csv(tmp_path / "sw.csv", ["time", "sw_down_W_m2"],
                        [["2020-06-01T01:00Z", 10], ["2020-06-01T02:00Z", 20],
                         ["2020-06-01T04:00Z", ""]])
    ds = read_shortwave_csv(path)
    assert ds["time_bnds"].values[0, 0] == np.datetime64("2020-06-01T00:00", "ns")
    assert ds["time_bnds"].values[2, 0] == np.datetime64("2020-06-01T03:00", "ns")
    assert np.isnan(ds["sw_down"].values[2])


def test_concentration_daily_percent_flags_reversed_y(tmp_path):
    day1 = [[0, 50, 100], [251, 255, 80]]
    day2 = [[10, 20, 30], [40, 150, 252]]
    paths = [vf.concentration_day(tmp_path / "c2.nc", "2020-06-02", day2),
             vf.concentration_day(tmp_path / "c1.nc", "2020-06-01", day1)]
    with dask.config.set(scheduler=_no_compute):
        ds = open_concentration(paths)
    assert ds["sea_ice_area_fraction"].chunks is not None
    sic = ds["sea_ice_area_fraction"].values
    # y stored descending: ascending y puts the second stored row first.
    np.testing.assert_allclose(sic[0], [[np.nan, np.nan, 0.8], [0.0, 0.5, 1.0]])
    np.testing.assert_allclose(sic[1], [[0.4, np.nan, np.nan], [0.1, 0.2, 0.3]])
    assert ds["time_bnds"].values[0, 0] == np.datetime64("2020-06-01", "ns")
    assert ds["time_bnds"].values[0, 1] == np.datetime64("2020-06-02", "ns")
    assert "crs_wkt" in ds.attrs and list(ds["y"].values) == [0.0, 25000.0]


def test_concentration_2d_latlon_with_bounds(tmp_path):
    ds = open_concentration(vf.concentration_swath(tmp_path / "s.nc"))
    assert ds["latitude"].dims == ("y", "x")
    np.testing.assert_allclose(ds["sea_ice_area_fraction"].values[0],
                               [[0.1, 0.5, np.nan], [0.9, np.nan, np.nan]], rtol=1e-6)
    assert ds["time_bnds"].values[1, 1] == np.datetime64("2020-07-02", "ns")


def test_concentration_missing_standard_name(tmp_path):
    import netCDF4

    path = vf.concentration_day(tmp_path / "c.nc", "2020-06-01", [[1, 2], [3, 4]])
    with netCDF4.Dataset(path, "a") as ds:
        ds["ice_conc"].standard_name = "sea_ice_thickness"
    with pytest.raises(ArchiveError, match=r"c\.nc: standard_name 'sea_ice_area_fraction'"):
        open_concentration(path)


def test_bathymetry_netcdf_elevation_is_negated(tmp_path):
    da = open_bathymetry(vf.bathymetry_netcdf(tmp_path / "b.nc"))
    assert da.name == "sea_floor_depth" and da.attrs["positive"] == "down"
    np.testing.assert_allclose(da.values[0], [3000.0, 50.0, -10.0])
    assert "WGS 84" in da.attrs["crs_wkt"]


def test_bathymetry_geotiff_lazy(tmp_path):
    depth = np.array([[10.0, 20.0], [-32768.0, 40.0], [50.0, 60.0]])
    with dask.config.set(scheduler=_no_compute):
        da = open_bathymetry(vf.bathymetry_tiff(tmp_path / "b.tif", depth))
    assert da.dims == ("y", "x")
    assert list(da["y"].values) == [500.0, 1500.0, 2500.0]
    np.testing.assert_allclose(da.values, [[50.0, 60.0], [np.nan, 40.0], [10.0, 20.0]])
