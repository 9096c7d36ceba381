"""floeheat.io.profiles: the three CF DSG profile layouts and the CSV layout."""

from __future__ import annotations

import gsw
import netCDF4
import numpy as np
import pytest

import variant_files as vf
from floeheat.errors import ArchiveError
from floeheat.io.profiles import CSV_COLUMNS, read_profiles, salinity_from_conductivity


def _conductivity_mS_cm():
    """Conductivity [mS cm-1] per profile that gives back PROFILE_S."""
    return [gsw.C_from_SP(s, t, p) for s, t, p in
            zip(vf.PROFILE_S, vf.PROFILE_T, vf.PROFILE_P, strict=True)]


def _check(ds, layout, salinity_from="salinity", atol=1e-6):
    assert ds.attrs["layout"] == layout
    assert ds.attrs["salinity_from"] == salinity_from
    assert ds["pressure"].dims == ("profile", "level")
    assert ds["pressure"].attrs["units"] == "dbar"
    assert ds["temperature"].attrs["units"] == "degC"
    assert ds["salinity"].attrs["units"] == "1"
    assert np.all(np.diff(ds["time"].values) > np.timedelta64(0))
    for k, (hours, lat, lon, p, t, s) in enumerate(vf.profiles_expected()):
        assert ds["time"].values[k] == vf.EPOCH + np.timedelta64(int(hours * 3600), "s")
        assert float(ds["latitude"][k]) == pytest.approx(lat, abs=1e-4)
        assert float(ds["longitude"][k]) == pytest.approx(lon, abs=1e-4)
        n = len(p)
        np.testing.assert_allclose(ds["pressure"].values[k, :n], p, atol=1e-5)
        np.testing.assert_allclose(ds["temperature"].values[k, :n], t, atol=1e-9)
        np.testing.assert_allclose(ds["salinity"].values[k, :n], s, atol=atol)
        for var in ("pressure", "temperature", "salinity"):
            assert np.all(np.isnan(ds[var].values[k, n:]))


def test_orthogonal_kelvin_pascal(tmp_path):
    ds = read_profiles(vf.profiles_orthogonal(tmp_path / "o.nc"))
    _check(ds, "orthogonal")
    assert ds.sizes["level"] == 4
    assert list(ds["profile_id"].values) == ["cast1", "cast2", "cast0"]


def test_orthogonal_upcast_is_reversed(tmp_path):
    _check(read_profiles(vf.profiles_orthogonal(tmp_path / "u.nc", upcast=True)),
           "orthogonal")


def test_incomplete_fill_value_padding_level_first(tmp_path):
    _check(read_profiles(vf.profiles_incomplete(tmp_path / "i.nc")), "incomplete")


def test_ragged_conductivity_S_per_m(tmp_path):
    c_S_m = np.concatenate(_conductivity_mS_cm()) / 10.0
    ds = read_profiles(vf.profiles_ragged(tmp_path / "r.nc", c_S_m))
    _check(ds, "ragged", "conductivity", atol=1e-4)


def test_csv_salinity_and_conductivity(tmp_path):
    _check(read_profiles(vf.profiles_csv(tmp_path / "p.csv")), "csv")
    ds = read_profiles(vf.profiles_csv(tmp_path / "c.csv", conductivity=_conductivity_mS_cm()))
    _check(ds, "csv", "conductivity", atol=1e-4)
    assert list(ds["profile_id"].values) == ["P1", "P2", "P0"]


def test_pss78_reference_point():
    # PSS-78 definition (UNESCO 1983): C(35, 15 degC IPTS-68, 0 dbar) = 42.914 mS cm-1
    # gives SP = 35. gsw takes ITS-90: t90 = t68 / 1.00024.
    assert salinity_from_conductivity(42.914, 15.0 / 1.00024, 0.0) == pytest.approx(
        35.0, abs=1e-5)


def test_pressure_going_up_and_down_names_the_profile(tmp_path):
    path = vf.profiles_incomplete(tmp_path / "bad.nc",
                                  pressure_fn=lambda p: p[[1, 0, *range(2, len(p))]]
                                  if len(p) > 2 else p)
    with pytest.raises(ArchiveError) as err:
        read_profiles(path)
    assert "bad.nc: profile 'cast0', sample index 1" in str(err.value)
    assert "pressure decreases" in str(err.value)


def test_csv_pressure_order_error(tmp_path):
    path = vf.write_csv(tmp_path / "p.csv", list(CSV_COLUMNS) + ["salinity_psu"], [
        ["A", "2020-05-01T00:00Z", 80, 0, 1.0, -1.8, 30],
        ["A", "2020-05-01T00:00Z", 80, 0, 3.0, -1.8, 30],
        ["A", "2020-05-01T00:00Z", 80, 0, 2.0, -1.8, 30]])
    with pytest.raises(ArchiveError, match=r"p\.csv: profile 'A', sample index 2"):
        read_profiles(path)


def _edit(path, name, **attrs):
    with netCDF4.Dataset(path, "a") as ds:
        var = ds[name]
        for key, value in attrs.items():
            if value is None:
                var.delncattr(key)
            else:
                var.setncattr(key, value)


def test_missing_standard_name(tmp_path):
    path = vf.profiles_orthogonal(tmp_path / "o.nc")
    _edit(path, "tk", standard_name=None)
    with pytest.raises(ArchiveError, match=r"o\.nc: standard_name 'sea_water_temperature'"):
        read_profiles(path)


def test_unknown_units(tmp_path):
    path = vf.profiles_orthogonal(tmp_path / "o.nc")
    _edit(path, "prs", units="bananas")
    with pytest.raises(ArchiveError, match=r"o\.nc: variable prs: units 'bananas'"):
        read_profiles(path)


def test_salinity_units_must_be_practical(tmp_path):
    path = vf.profiles_orthogonal(tmp_path / "o.nc")
    _edit(path, "psal", units="%")
    with pytest.raises(ArchiveError, match="variable psal: units '%' are not those"):
        read_profiles(path)


def test_all_nan_variable(tmp_path):
    path = vf.profiles_orthogonal(tmp_path / "o.nc")
    with netCDF4.Dataset(path, "a") as ds:
        ds["psal"][:] = np.nan
    with pytest.raises(ArchiveError, match=r"o\.nc: variable psal: every value is missing"):
        read_profiles(path)


def test_wrong_feature_type_and_bad_csv_cell(tmp_path):
    path = vf.profiles_orthogonal(tmp_path / "o.nc")
    with netCDF4.Dataset(path, "a") as ds:
        ds.featureType = "timeSeries"
    with pytest.raises(ArchiveError, match="featureType is 'timeSeries'"):
        read_profiles(path)
    csv = vf.write_csv(tmp_path / "p.csv", list(CSV_COLUMNS) + ["salinity_psu"],
                       [["A", "2020-05-01T00:00Z", 80, 0, 1.0, -1.8, 30],
                        ["A", "2020-05-01T00:00Z", 80, 0, 2.0, "warm", 30]])
    with pytest.raises(ArchiveError, match=r"p\.csv: line 3, column temperature_degC"):
        read_profiles(csv)
    csv = vf.write_csv(tmp_path / "q.csv", list(CSV_COLUMNS), [["A"] * 6])
    with pytest.raises(ArchiveError, match="neither salinity_psu nor conductivity_mS_cm"):
        read_profiles(csv)
