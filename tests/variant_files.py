"""Small archive files in variant layouts and units, for the reader tests.

Variable names, units and layouts deliberately differ from the demo synthesizer's:
the readers must find everything by standard_name/role and convert by units.
Every writer returns what the reader should give back, in canonical units.
"""

from __future__ import annotations

import csv
from pathlib import Path

import netCDF4
import numpy as np
import pyproj
from affine import Affine

EPOCH = np.datetime64("2020-05-01T00:00:00", "ns")
POLAR = pyproj.CRS.from_epsg(3413)


def write_csv(path, header, rows) -> Path:
    """Write a UTF-8 CSV with a header row."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    with path.open("w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(header)
        w.writerows(rows)
    return path


def _nc(path, **globals_) -> netCDF4.Dataset:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    ds = netCDF4.Dataset(path, "w")
    ds.setncatts({"Conventions": "CF-1.8", **globals_})
    return ds


def _var(ds, name, dtype, dims, data=None, fill=None, **attrs):
    v = ds.createVariable(name, dtype, dims, fill_value=fill)
    v.setncatts(attrs)
    if data is not None:
        v[...] = data
    return v


def _grid_mapping(ds, name="proj", crs=POLAR):
    v = ds.createVariable(name, "i4", ())
    v.setncatts(crs.to_cf())
    return name


# ------------------------------------------------------------------ profiles

#: Three profiles, stored out of time order: hours after EPOCH, lat, lon (0..360).
PROFILE_HOURS = np.array([12.0, 0.0, 6.0])
PROFILE_LAT = np.array([80.1, 80.0, 80.05])
PROFILE_LON = np.array([350.0, 10.0, 200.0])
#: Per profile: pressure [dbar], temperature [degC], salinity [1] (by pressure).
PROFILE_P = [np.array([2.0, 5.0, 10.0]), np.array([1.0, 4.0]), np.array([3.0, 6.0, 9.0, 12.0])]
PROFILE_T = [np.array([-1.7, -1.6, -1.2]), np.array([-1.8, -1.75]),
             np.array([-1.65, -1.5, -1.4, -1.1])]
PROFILE_S = [np.array([30.1, 31.0, 32.5]), np.array([29.0, 29.5]),
             np.array([30.0, 30.8, 31.9, 33.0])]


def profiles_expected():
    """Canonical values sorted by time: list of (hours, lat, lon, p, t, s)."""
    order = np.argsort(PROFILE_HOURS)
    lon = (PROFILE_LON + 180) % 360 - 180
    return [(PROFILE_HOURS[k], PROFILE_LAT[k], lon[k], PROFILE_P[k], PROFILE_T[k],
             PROFILE_S[k]) for k in order]


def _profile_coords(ds, dim):
    _var(ds, "when", "f8", (dim,), PROFILE_HOURS * 60,
         standard_name="time", units="minutes since 2020-05-01T00:00:00Z")
    _var(ds, "phi", "f4", (dim,), PROFILE_LAT, standard_name="latitude",
         units="degrees_north")
    _var(ds, "lam", "f4", (dim,), PROFILE_LON, standard_name="longitude",
         units="degrees_east")
    ids = _var(ds, "cast", str, (dim,), cf_role="profile_id")
    for k in range(PROFILE_HOURS.size):
        ids[k] = f"cast{k}"


def profiles_orthogonal(path, *, upcast=False) -> Path:
    """Orthogonal layout: 1-D pressure [Pa], temperature [K]; NaN where absent."""
    levels = np.array([1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 9.0, 10.0, 12.0])
    if upcast:
        levels = levels[::-1]
    ds = _nc(path, featureType="profile")
    ds.createDimension("cast_no", PROFILE_HOURS.size)
    ds.createDimension("z", levels.size)
    _profile_coords(ds, "cast_no")
    _var(ds, "prs", "f8", ("z",), levels * 1e4, standard_name="sea_water_pressure",
         units="Pa")
    tk = np.full((PROFILE_HOURS.size, levels.size), np.nan)
    sal = np.full_like(tk, np.nan)
    for k, (p, t, s) in enumerate(zip(PROFILE_P, PROFILE_T, PROFILE_S, strict=True)):
        idx = [int(np.flatnonzero(levels == v)[0]) for v in p]
        tk[k, idx], sal[k, idx] = t + 273.15, s
    _var(ds, "tk", "f8", ("cast_no", "z"), tk, standard_name="sea_water_temperature",
         units="K")
    _var(ds, "psal", "f8", ("cast_no", "z"), sal,
         standard_name="sea_water_practical_salinity", units="PSU")
    ds.close()
    return Path(path)


def profiles_incomplete(path, *, pressure_fn=None) -> Path:
    """Incomplete layout: 2-D pressure [dbar] and temperature with _FillValue padding,
    dims stored (level, profile) to test transposition."""
    width = max(len(p) for p in PROFILE_P)
    fill = -9999.0
    ds = _nc(path, featureType="profile")
    ds.createDimension("obs", width)
    ds.createDimension("station", PROFILE_HOURS.size)
    _profile_coords(ds, "station")
    arrays = {}
    for key, src in (("p", PROFILE_P), ("t", PROFILE_T), ("s", PROFILE_S)):
        a = np.full((width, PROFILE_HOURS.size), fill)
        for k, v in enumerate(src):
            a[:len(v), k] = pressure_fn(v) if (key == "p" and pressure_fn) else v
        arrays[key] = a
    _var(ds, "pp", "f8", ("obs", "station"), arrays["p"], fill=fill,
         standard_name="sea_water_pressure", units="dbar")
    _var(ds, "tt", "f8", ("obs", "station"), arrays["t"], fill=fill,
         standard_name="sea_water_temperature", units="degC")
    _var(ds, "ss", "f8", ("obs", "station"), arrays["s"], fill=fill,
         standard_name="sea_water_practical_salinity", units="1")
    ds.close()
    return Path(path)


def profiles_ragged(path, conductivity_S_m=None) -> Path:
    """Contiguous ragged layout with conductivity [S m-1] instead of salinity."""
    ds = _nc(path, featureType="profile")
    ds.createDimension("prof", PROFILE_HOURS.size)
    n = sum(len(p) for p in PROFILE_P)
    ds.createDimension("samples", n)
    _profile_coords(ds, "prof")
    _var(ds, "count", "i4", ("prof",), [len(p) for p in PROFILE_P],
         sample_dimension="samples", long_name="samples per profile")
    _var(ds, "p", "f4", ("samples",), np.concatenate(PROFILE_P),
         standard_name="sea_water_pressure", units="dbar")
    _var(ds, "t", "f8", ("samples",), np.concatenate(PROFILE_T),
         standard_name="sea_water_temperature", units="degree_Celsius")
    _var(ds, "c", "f8", ("samples",), conductivity_S_m,
         standard_name="sea_water_electrical_conductivity", units="S m-1")
    ds.close()
    return Path(path)


def profiles_csv(path, *, conductivity=None) -> Path:
    """CSV layout; rows of one profile interleaved with another's."""
    header = ["profile_id", "time", "latitude", "longitude", "pressure_dbar",
              "temperature_degC", "conductivity_mS_cm" if conductivity else "salinity_psu"]
    rows = []
    for k in range(PROFILE_HOURS.size):
        t = (EPOCH + np.timedelta64(int(PROFILE_HOURS[k] * 3600), "s"))
        stamp = str(t.astype("datetime64[s]")) + "+00:00"
        for j, p in enumerate(PROFILE_P[k]):
            third = conductivity[k][j] if conductivity else PROFILE_S[k][j]
            rows.append([f"P{k}", stamp, PROFILE_LAT[k], PROFILE_LON[k], p,
                         PROFILE_T[k][j], third])
    return write_csv(path, header, rows)


# ------------------------------------------------------------------ ice mass balance

ICE_DEPTHS_M = np.array([-0.4, 0.0, 0.5, 1.5])  # positive down, canonical
ICE_HOURS = np.array([0.0, 1.0, 2.0])


def icemass_netcdf(path, *, times=ICE_HOURS) -> Path:
    """time x sensor NetCDF: heights [cm, positive up], temperature [K], stored
    (sensor, time) and sensors out of depth order; bottom depth [cm]; rise [degC]."""
    order = np.array([2, 0, 3, 1])
    ds = _nc(path)
    ds.createDimension("t", len(times))
    ds.createDimension("chan", ICE_DEPTHS_M.size)
    _var(ds, "clock", "f8", ("t",), np.asarray(times) * 3600,
         standard_name="time", units="seconds since 2020-05-01 00:00:00")
    _var(ds, "la", "f8", ("t",), [85.0, 85.01, 85.02][:len(times)], standard_name="latitude",
         units="degrees_north")
    _var(ds, "lo", "f8", ("t",), [200.0, 200.1, 200.2][:len(times)],
         standard_name="longitude", units="degrees_east")
    _var(ds, "h", "f8", ("chan",), -ICE_DEPTHS_M[order] * 100, standard_name="depth",
         units="cm", positive="up", reference="snow surface")
    temp = icemass_temperature()[:len(times)]
    _var(ds, "therm", "f8", ("chan", "t"), (temp[:, order] + 273.15).T, units="K",
         role="string_temperature")
    _var(ds, "sounder", "f8", ("t",), [160.0, 161.0, 162.0][:len(times)], units="cm",
         role="ice_bottom_depth")
    _var(ds, "pulse", "f8", ("t", "chan"), np.full((len(times), 4), 0.25), units="degC",
         role="heated_temperature_rise")
    ds.close()
    return Path(path)


def icemass_temperature():
    """Canonical temperature [degC] (time, sensor by depth)."""
    return np.array([[-10.0, -5.0, -3.0, -1.8], [-11.0, -5.5, -3.1, -1.8],
                     [-12.0, -6.0, -3.2, -1.8]])


def icemass_csv(path) -> Path:
    header = ["time", "latitude", "longitude", "T_150", "T_-40", "T_0", "T_50"]
    temp = icemass_temperature()
    rows = [[f"2020-05-01T{int(h):02d}:00:00Z", 85.0, -160.0, r[3], r[0], r[1], r[2]]
            for h, r in zip(ICE_HOURS, temp, strict=True)]
    return write_csv(path, header, rows)


# ------------------------------------------------------------------ shortwave

SW_LAT = np.array([81.0, 80.0, 79.0])  # stored descending
SW_LON = np.array([350.0, 355.0, 0.0, 5.0])


def shortwave_accumulated_month(path, start, hours, *, units="J m-2", flux_W_m2=None,
                                step_h=3) -> Path:
    """Accumulated shortwave over the step ending at each stamp, no bounds,
    latitude stored descending, longitude 0..360."""
    ds = _nc(path)
    ds.createDimension("valid_time", hours)
    ds.createDimension("lat", SW_LAT.size)
    ds.createDimension("lon", SW_LON.size)
    offsets = (np.arange(hours) + 1) * step_h
    _var(ds, "valid_time", "f8", ("valid_time",), offsets, standard_name="time",
         units=f"hours since {start}", calendar="proleptic_gregorian")
    _var(ds, "lat", "f4", ("lat",), SW_LAT, standard_name="latitude", units="degrees_north")
    _var(ds, "lon", "f4", ("lon",), SW_LON, standard_name="longitude", units="degrees_east")
    flux = flux_W_m2(offsets) if flux_W_m2 else np.full(hours, 100.0)
    data = flux[:, None, None] * step_h * 3600 * np.ones((1, SW_LAT.size, SW_LON.size))
    _var(ds, "ssrd", "f4", ("valid_time", "lat", "lon"), data,
         standard_name="integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air",
         units=units)
    ds.close()
    return Path(path)


def shortwave_projected_bounds(path) -> Path:
    """Flux [W m-2] with time_bnds on projected y/x [km], y reversed."""
    ds = _nc(path)
    ds.createDimension("time", 2)
    ds.createDimension("nb", 2)
    ds.createDimension("row", 3)
    ds.createDimension("col", 2)
    _var(ds, "time", "f8", ("time",), [1.0, 2.0], standard_name="time",
         units="days since 2020-06-01", bounds="tb")
    _var(ds, "tb", "f8", ("time", "nb"), [[0.5, 1.5], [1.5, 2.5]])
    _var(ds, "row", "f8", ("row",), [30.0, 20.0, 10.0],
         standard_name="projection_y_coordinate", units="km")
    _var(ds, "col", "f8", ("col",), [-5.0, 5.0], standard_name="projection_x_coordinate",
         units="km")
    gm = _grid_mapping(ds)
    data = np.arange(12.0).reshape(2, 3, 2)
    _var(ds, "rsds", "f4", ("time", "row", "col"), data,
         standard_name="surface_downwelling_shortwave_flux_in_air", units="W m-2",
         grid_mapping=gm)
    ds.close()
    return Path(path)


# ------------------------------------------------------------------ concentration


def concentration_day(path, day: str, values_percent, *, flags=(251, 252, 253)) -> Path:
    """One day of uint8 percent concentration with flag_values, y reversed, a scalar
    time and no bounds."""
    values_percent = np.asarray(values_percent)
    ny, nx = values_percent.shape
    ds = _nc(path)
    ds.createDimension("yc", ny)
    ds.createDimension("xc", nx)
    _var(ds, "t", "f8", (), 12.0, standard_name="time", units=f"hours since {day}")
    _var(ds, "yc", "f8", ("yc",), 25000.0 * np.arange(ny)[::-1],
         standard_name="projection_y_coordinate", units="m")
    _var(ds, "xc", "f8", ("xc",), 25000.0 * np.arange(nx),
         standard_name="projection_x_coordinate", units="m")
    gm = _grid_mapping(ds, "polar")
    _var(ds, "ice_conc", "u1", ("yc", "xc"), values_percent, fill=255,
         standard_name="sea_ice_area_fraction", units="%", grid_mapping=gm,
         flag_values=np.array(flags, "u1"), flag_meanings="land coast pole_hole")
    ds.close()
    return Path(path)


def concentration_swath(path) -> Path:
    """Two steps of fraction [1] on 2-D latitude/longitude with time_bnds."""
    ds = _nc(path)
    ds.createDimension("time", 2)
    ds.createDimension("two", 2)
    ds.createDimension("nj", 2)
    ds.createDimension("ni", 3)
    _var(ds, "time", "f8", ("time",), [0.0, 12.0], standard_name="time",
         units="hours since 2020-07-01", bounds="time_bounds")
    _var(ds, "time_bounds", "f8", ("time", "two"), [[0.0, 12.0], [12.0, 24.0]])
    lat = np.array([[80.0, 80.0, 80.0], [81.0, 81.0, 81.0]])
    lon = np.array([[0.0, 10.0, 20.0], [0.0, 10.0, 20.0]])
    _var(ds, "nav_lat", "f8", ("nj", "ni"), lat, standard_name="latitude",
         units="degrees_north")
    _var(ds, "nav_lon", "f8", ("nj", "ni"), lon, standard_name="longitude",
         units="degrees_east")
    data = np.array([[[0.1, 0.5, 1.2], [0.9, np.nan, -0.1]],
                     [[0.2, 0.6, 1.0], [0.0, 0.3, 0.4]]])
    _var(ds, "aice", "f4", ("time", "nj", "ni"), data, fill=np.float32(-1e20),
         standard_name="sea_ice_area_fraction", units="1", coordinates="nav_lat nav_lon")
    ds.close()
    return Path(path)


# ------------------------------------------------------------------ bathymetry


def bathymetry_netcdf(path) -> Path:
    """Surface elevation [m] on a regular latitude/longitude grid (negative at sea)."""
    ds = _nc(path)
    ds.createDimension("la", 2)
    ds.createDimension("lo", 3)
    _var(ds, "la", "f8", ("la",), [70.0, 71.0], standard_name="latitude",
         units="degrees_north")
    _var(ds, "lo", "f8", ("lo",), [-10.0, 0.0, 10.0], standard_name="longitude",
         units="degrees_east")
    _var(ds, "z", "f4", ("la", "lo"), [[-3000.0, -50.0, 10.0], [-200.0, -20.0, -1.0]],
         standard_name="height_above_mean_sea_level", units="m")
    ds.close()
    return Path(path)


def bathymetry_tiff(path, depth_m) -> Path:
    """Sea-floor depth GeoTIFF [m, positive down] in EPSG:3413, with a nodata value."""
    import rasterio

    Path(path).parent.mkdir(parents=True, exist_ok=True)
    depth_m = np.asarray(depth_m, "float32")
    with rasterio.open(path, "w", driver="GTiff", width=depth_m.shape[1],
                       height=depth_m.shape[0], count=1, dtype="float32", crs="EPSG:3413",
                       transform=Affine(1000.0, 0.0, 0.0, 0.0, -1000.0, 3000.0),
                       nodata=-32768.0) as dst:
        dst.write(depth_m, 1)
        dst.set_band_unit(1, "m")
        dst.update_tags(1, standard_name="sea_floor_depth_below_geoid")
    return Path(path)


# ------------------------------------------------------------------ scenes


#: Pixel corners of the GeoTIFF scenes: 50 m pixels, north up.
SCENE_TRANSFORM = Affine(50.0, 0.0, 100000.0, 0.0, -50.0, -200000.0)


def scene_tiff(path, *, crs="EPSG:3413", bands=("HH", "HV"), size=(64, 80), tile=16,
               units="dB", extra=True, describe=True, time="2020-06-01T06:30:00Z"):
    """Tiled float32 backscatter GeoTIFF; values = band*1e4 + row*100 + col."""
    import rasterio

    Path(path).parent.mkdir(parents=True, exist_ok=True)
    rows, cols = size
    names = list(bands) + (["incidence_angle"] + [f"noise_equivalent_sigma0_{b}"
                                                  for b in bands] if extra else [])
    r, c = np.mgrid[0:rows, 0:cols]
    kwargs = {"crs": crs} if crs else {}
    with rasterio.open(path, "w", driver="GTiff", width=cols, height=rows,
                       count=len(names), dtype="float32", tiled=True, blockxsize=tile,
                       blockysize=tile, nodata=np.nan,
                       transform=SCENE_TRANSFORM,
                       **kwargs) as dst:
        for i, name in enumerate(names, start=1):
            data = (i * 1e4 + r * 100 + c).astype("float32")
            if name == "incidence_angle":
                data = (20 + 25 * c / cols).astype("float32")
            dst.write(data, i)
            if describe:
                dst.set_band_description(i, name)
            if name != "incidence_angle":
                dst.set_band_unit(i, units)
        dst.update_tags(time_coverage_start=time, content="backscatter")
    return Path(path)


def scene_netcdf_mask(path, *, with_crs=True, codes=(0, 1, 255)) -> Path:
    """Mask scene on x ascending / y ascending (south-up), stored (x, y)."""
    ny, nx = 6, 5
    water, ice, nodata = codes
    ds = _nc(path, time_coverage_start="2020-06-02T00:00:00Z", content="mask")
    ds.createDimension("ys", ny)
    ds.createDimension("xs", nx)
    _var(ds, "ys", "f8", ("ys",), -1000.0 + 200.0 * np.arange(ny),
         standard_name="projection_y_coordinate", units="m")
    _var(ds, "xs", "f8", ("xs",), 5.0 + 10.0 * np.arange(nx),
         standard_name="projection_x_coordinate", units="m")
    mask = np.full((ny, nx), ice, "u1")
    mask[:, 0] = water
    mask[0, :] = nodata
    attrs = {"flag_values": np.array([water, ice, nodata], "u1"),
             "flag_meanings": "water ice no_data"}
    if with_crs:
        attrs["grid_mapping"] = _grid_mapping(ds, "crs")
    _var(ds, "classes", "u1", ("xs", "ys"), mask.T, **attrs)
    ds.close()
    return Path(path)
