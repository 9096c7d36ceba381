"""floeheat.io.icemass: thermistor strings from NetCDF (by role) and CSV."""

from __future__ import annotations

import numpy as np
import pytest

import variant_files as vf
from floeheat.errors import ArchiveError
from floeheat.io.icemass import read_icemass


def test_netcdf_heights_kelvin_transposed(tmp_path):
    ds = read_icemass(vf.icemass_netcdf(tmp_path / "s.nc"))
    assert ds["temperature"].dims == ("time", "sensor")
    np.testing.assert_allclose(ds["depth"].values, vf.ICE_DEPTHS_M)
    np.testing.assert_allclose(ds["temperature"].values, vf.icemass_temperature(), atol=1e-9)
    np.testing.assert_allclose(ds["ice_bottom_depth"].values, [1.60, 1.61, 1.62])
    np.testing.assert_allclose(ds["heated_rise"].values, 0.25)  # degC rise = K rise
    assert ds.attrs["reference"] == "snow surface"
    assert ds["depth"].attrs["positive"] == "down"
    np.testing.assert_allclose(ds["longitude"].values, [-160.0, -159.9, -159.8])
    assert ds["time"].values[1] == np.datetime64("2020-05-01T01:00", "ns")


def test_csv(tmp_path):
    ds = read_icemass(vf.icemass_csv(tmp_path / "s.csv"))
    np.testing.assert_allclose(ds["depth"].values, vf.ICE_DEPTHS_M)
    np.testing.assert_allclose(ds["temperature"].values, vf.icemass_temperature())
    assert "ice_bottom_depth" not in ds and "heated_rise" not in ds


def test_times_not_increasing_name_first_index(tmp_path):
    path = vf.icemass_netcdf(tmp_path / "s.nc", times=[0.0, 2.0, 1.0])
    with pytest.raises(ArchiveError, match=r"s\.nc: variable clock, index 2: times are not"):
        read_icemass(path)


def test_missing_role_and_bad_column(tmp_path):
    import netCDF4

    path = vf.icemass_netcdf(tmp_path / "s.nc")
    with netCDF4.Dataset(path, "a") as ds:
        ds["therm"].delncattr("role")
    with pytest.raises(ArchiveError, match=r"s\.nc: role 'string_temperature'"):
        read_icemass(path)
    csv = vf.write_csv(tmp_path / "b.csv", ["time", "latitude", "longitude", "T_top"],
                       [["2020-05-01T00:00Z", 85, 0, -3]])
    with pytest.raises(ArchiveError, match=r"b\.csv: header \(line 1\), column T_top"):
        read_icemass(csv)


def test_all_nan_temperature(tmp_path):
    csv = vf.write_csv(tmp_path / "n.csv", ["time", "latitude", "longitude", "T_10"],
                       [["2020-05-01T00:00Z", 85, 0, ""], ["2020-05-01T01:00Z", 85, 0, ""]])
    with pytest.raises(ArchiveError, match="every temperature is missing"):
        read_icemass(csv)
