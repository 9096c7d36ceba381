"""Every default physical constant and method default, each beside its source.

Config may override the defaults; code never writes these numbers anywhere else.
"""

from __future__ import annotations

__all__ = [
    "M_PER_CM",
    "CP0_J_KG_K",
    "RHO0_KG_M3",
    "RHO_WATER_DEFAULT_KG_M3",
    "RHO_ICE_KG_M3",
    "RHO_SNOW_KG_M3",
    "LATENT_HEAT_FUSION_J_KG",
    "K_ICE_W_M_K",
    "K_ICE_BETA_W_M_PPT",
    "C_ICE_J_KG_K",
    "C_WATER_BL99_J_KG_K",
    "MU_LIQUIDUS_K_PPT",
    "ALBEDO_OPEN_WATER",
    "SOLAR_CONSTANT_W_M2",
    "BULK_HEAT_EXCHANGE_CH",
    "RADIUS_DEFAULT_M",
    "RADIUS_SWEEP_M",
    "WINDOW_DAYS",
    "COVERAGE_THRESHOLD",
    "MAX_SCENE_GAP_DAYS",
    "DENSITY_THRESHOLD_KG_M3",
    "Z2_MARGIN_M",
    "SATURATION_FRACTION",
    "SEASON_NORTH",
    "SEASON_SOUTH",
    "CRS_WORKING_NORTH",
    "CRS_WORKING_SOUTH",
    "CRS_CLIMATOLOGY_NORTH",
    "CRS_CLIMATOLOGY_SOUTH",
    "CLIMATOLOGY_CELL_M",
    "MASK_CODES",
    "MAX_DRIFT_SPEED_M_S",
    "SECONDS_PER_DAY",
    "ENSEMBLE_MEMBERS",
    "ENSEMBLE_CHUNK_MEMBERS",
    "ALBEDO_OPEN_WATER_SD",
    "RHO_ICE_HALF_WIDTH_KG_M3",
    "LATENT_HEAT_REL_HALF_WIDTH",
    "K_ICE_SD_W_M_K",
    "BULK_SALINITY_SD",
    "STORAGE_BOUND_HALF_WIDTH",
    "ICE_BOTTOM_PICK_SD_SPACINGS",
    "ICE_SENSOR_SPACING_DEFAULT_M",
    "SHORTWAVE_BIAS_SD",
    "COVERAGE_THRESHOLD_HALF_WIDTH",
    "F_OW_CORRELATION_LENGTH_M",
    "ICE_OCEAN_DRAG_COEFFICIENT",
    "SCREEN_ISOBATH_M",
    "SCREEN_DISTANCE_M",
    "SCREEN_MAX_DAILY_SPEED_M_S",
    "SCREEN_MAX_SEPARATION_CHANGE_M",
    "SCREEN_OUTLIER_MAD",
    "SCREEN_OUTLIER_FLOOR_W_M2",
    "BULK_DISAGREE_FACTOR",
    "BULK_MIN_FLUX_W_M2",
]

# --- Units ----------------------------------------------------------------------
#: Metres per centimetre: the SI prefix centi, 1e-2. Source: The International System
#: of Units (SI Brochure, BIPM, 9th ed. 2019), Table 7. Used where the archive contract
#: fixes a unit by name (thermistor columns T_<depth in cm>); units read from files go
#: through floeheat.units.
M_PER_CM = 1e-2

# --- Seawater (TEOS-10) ---------------------------------------------------------
#: Specific heat of seawater used with conservative temperature.
#: Source: TEOS-10 manual (IOC, SCOR and IAPSO 2010, Manuals & Guides 56), Eq. 3.3.3.
CP0_J_KG_K = 3991.86795711963
#: Constant density, an option for the heat-content integral. Common practice, no source.
RHO0_KG_M3 = 1025.0
#: Seawater density for the isostatic draft when no profile is available.
#: Common practice, no source (a typical polar surface density).
RHO_WATER_DEFAULT_KG_M3 = 1025.0
#: Air-saturated water by default for the freezing temperature (gsw saturation_fraction).
#: Source: TEOS-10 manual; gsw.CT_freezing documentation.
SATURATION_FRACTION = 1.0

# --- Sea ice --------------------------------------------------------------------
#: Ice density. Source: pure ice; Timco & Frederking 1996 (Cold Reg. Sci. Technol. 24)
#: give 900-940 kg m-3 for first-year sea ice below the waterline.
RHO_ICE_KG_M3 = 917.0
#: Summer snow density. Common practice, no source.
RHO_SNOW_KG_M3 = 330.0
#: Latent heat of fusion of fresh ice. Source: Bitz & Lipscomb 1999 (JGR 104, 15669).
LATENT_HEAT_FUSION_J_KG = 3.34e5
#: Thermal conductivity of fresh ice, k0. Source: Untersteiner 1964;
#: Maykut & Untersteiner 1971 (JGR 76, 1550).
K_ICE_W_M_K = 2.03
#: beta in k = k0 + beta S / T (S in ppt, T in degC). Source: Untersteiner 1964 as
#: quoted by a sea-ice model's science guide (0.13 W m-1 ppt-1); other tables give 0.1172.
K_ICE_BETA_W_M_PPT = 0.13
#: Specific heat of fresh ice, c0. Source: Bitz & Lipscomb 1999.
C_ICE_J_KG_K = 2106.0
#: Specific heat of (brine) water in the enthalpy form. Source: Bitz & Lipscomb 1999.
C_WATER_BL99_J_KG_K = 4218.0
#: Liquidus slope, Tm = -mu S. Source: Bitz & Lipscomb 1999.
MU_LIQUIDUS_K_PPT = 0.054

# --- Radiation ------------------------------------------------------------------
#: Albedo of open water in leads under overcast skies.
#: Source: Pegau & Paulson 2001 (Ann. Glaciol. 33), 0.066 +- 0.007.
ALBEDO_OPEN_WATER = 0.066
#: Total solar irradiance. Source: Kopp & Lean 2011 (GRL 38, L01706), 1360.8 +- 0.5 W m-2.
SOLAR_CONSTANT_W_M2 = 1360.8

# --- Ice-ocean exchange ---------------------------------------------------------
#: Bulk heat exchange coefficient c_h in rho cp c_h u* (T - Tf).
#: Source: Maykut & McPhee 1995 (JGR 100, 24691).
BULK_HEAT_EXCHANGE_CH = 0.006

# --- Method defaults (science.md) -----------------------------------------------
#: Averaging radius on the ground. Common practice (close to a 25 km microwave cell).
RADIUS_DEFAULT_M = 15_000.0
#: Radius sweep. Common practice.
RADIUS_SWEEP_M = (2_000.0, 4_000.0, 8_000.0, 15_000.0)
#: Averaging window for transmitted flux and transmittance. Common practice.
WINDOW_DAYS = 15.0
#: Minimum valid coverage of the circle for a scene to count. Common practice.
COVERAGE_THRESHOLD = 0.5
#: Longest gap between scenes over which f_ow is interpolated. Common practice.
MAX_SCENE_GAP_DAYS = 6.0
#: Potential-density step defining the per-profile mixed-layer depth. Common practice.
DENSITY_THRESHOLD_KG_M3 = 0.1
#: Margin added below the deepest per-profile threshold depth. Common practice.
Z2_MARGIN_M = 5.0
#: Fastest plausible ice drift; faster fixes are rejected. Common practice, no source
#: (free drift rarely exceeds about 1 m s-1).
MAX_DRIFT_SPEED_M_S = 1.5

#: Analysis season (month, day) start and end, UTC, by hemisphere (science.md).
SEASON_NORTH = ((5, 1), (10, 1))
SEASON_SOUTH = ((11, 1), (4, 1))

#: Working CRS by hemisphere: polar stereographic north (true scale 70 N) / south (71 S).
CRS_WORKING_NORTH = "EPSG:3413"
CRS_WORKING_SOUTH = "EPSG:3976"
#: Equal-area climatology grids (EASE-Grid 2.0 north/south) and their cell size.
CRS_CLIMATOLOGY_NORTH = "EPSG:6931"
CRS_CLIMATOLOGY_SOUTH = "EPSG:6932"
CLIMATOLOGY_CELL_M = 200_000.0

#: Default radar mask coding (archive format v1).
MASK_CODES = {"water": 0, "ice": 1, "nodata": 255}

SECONDS_PER_DAY = 86_400.0

# --- Uncertainty ensemble (floeheat.ensemble; spreads around the configured values) ---
#: Ensemble size. Common practice, no source (enough for stable 5th/95th percentiles).
ENSEMBLE_MEMBERS = 200
#: Members per dask block. Common practice, no source.
ENSEMBLE_CHUNK_MEMBERS = 50
#: Standard deviation of the open-water albedo. Source: Pegau & Paulson 2001
#: (Ann. Glaciol. 33), leads under cloudy skies 0.066 +- 0.007.
ALBEDO_OPEN_WATER_SD = 0.007
#: Half-width of a uniform ice density spread. Source: Timco & Frederking 1996
#: (Cold Reg. Sci. Technol. 24): 900-940 kg m-3 for first-year ice below the waterline.
RHO_ICE_HALF_WIDTH_KG_M3 = 20.0
#: Half-width of a uniform relative spread of L: about half of the 11 % between fresh-ice
#: L and the Bitz & Lipscomb 1999 melt energy of 4 g kg-1 ice at -1.8 degC (computed from
#: their enthalpy; see tests/test_ensemble.py).
LATENT_HEAT_REL_HALF_WIDTH = 0.06
#: Standard deviation of k_i (or k0). Source: Pringle et al. 2006 (measured in situ),
#: measured 2.14 +- 0.11 (first-year) and 1.88 +- 0.13 (multiyear) W m-1 K-1.
K_ICE_SD_W_M_K = 0.12
#: Standard deviation of the bulk salinity in the salinity form of k_i. Common practice,
#: no source.
BULK_SALINITY_SD = 1.0
#: Half-width of the storage bound's uniform spread, in units of the sensitivity offset
#: (the bound anywhere within +- offset of z2). Common practice, no source.
STORAGE_BOUND_HALF_WIDTH = 1.0
#: Standard deviation of the ice-bottom pick at each end of the window, in sensor
#: spacings. Common practice, no source ("about a sensor spacing").
ICE_BOTTOM_PICK_SD_SPACINGS = 1.0
#: Sensor spacing assumed when the in-situ record gives none. Common practice, no source.
ICE_SENSOR_SPACING_DEFAULT_M = 0.02
#: Standard deviation of a multiplicative bias of the shortwave forcing. Common practice,
#: no source.
SHORTWAVE_BIAS_SD = 0.07
#: Half-width of the coverage threshold's uniform spread. Common practice, no source.
COVERAGE_THRESHOLD_HALF_WIDTH = 0.1
#: Size of an independent patch of the ice cover for the sampling error of a scene's
#: f_ow. Common practice, no source (lead spacing of the order of a kilometre).
F_OW_CORRELATION_LENGTH_M = 1000.0

# --- Where a 1-D budget holds: screens and the bulk-flux cross-check --------------
#: Ice-ocean drag coefficient in u* = sqrt(Cd) |u_ice - u_water|. Source: McPhee 1980
#: (in Sea Ice Processes and Models, ed. Pritchard), 5.5e-3; from memory.
ICE_OCEAN_DRAG_COEFFICIENT = 5.5e-3
#: Isobath that marks shelves and slopes for the advection screen [m]. Common practice,
#: no source (the shelf break lies shallower; the slope current above it).
SCREEN_ISOBATH_M = 1000.0
#: Windows that come within this ground distance of the isobath are flagged [m].
#: Common practice, no source (about the width of a slope boundary current).
SCREEN_DISTANCE_M = 50_000.0
#: Daily-mean drift speed above which a window is flagged [m s-1]. Common practice,
#: no source (summer pack ice rarely drifts faster than about 0.5 m s-1 for a day).
SCREEN_MAX_DAILY_SPEED_M_S = 0.5
#: Change of the distance between two deployments of one array within a window above
#: which the window is flagged as shear [m]. Common practice, no source.
SCREEN_MAX_SEPARATION_CHANGE_M = 10_000.0
#: Robust z-score (scaled median absolute deviations) of a residual outlier.
#: Common practice, no source.
SCREEN_OUTLIER_MAD = 3.0
#: Smallest departure of a window's transmitted flux from its array's median that can
#: flag it [W m-2]. Common practice, no source.
SCREEN_OUTLIER_FLOOR_W_M2 = 2.0
#: Measured and bulk ocean-to-ice flux disagree when their ratio exceeds this factor
#: (either way). Common practice, no source.
BULK_DISAGREE_FACTOR = 2.0
#: Below this magnitude both fluxes count as zero and are not compared [W m-2].
#: Common practice, no source.
BULK_MIN_FLUX_W_M2 = 1.0
