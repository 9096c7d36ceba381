"""Tests of floeheat.bulkflux against published values and reference libraries."""

from __future__ import annotations

import gsw
import numpy as np
import pandas as pd
import pytest
from pyproj import Geod

from floeheat import bulkflux as bf
from floeheat import constants as C


def test_bulk_formula_worked_check():
    # u* = 0.01 m s-1, T - T_f = 0.1 K, rho 1025, cp0, c_h 0.006 (Maykut & McPhee 1995):
    # 24.550 W m-2 (check values, section 6, computed).
    e = pd.date_range("2025-07-01", periods=25, freq="h").values
    t = bf.bulk_comparison(e, np.zeros(25), np.zeros(24), np.full(24, 0.01),
                           np.full(24, 0.1))
    assert t["f_w_bulk_W_m2"].iloc[-1] == pytest.approx(24.550, abs=5e-4)


def test_melt_rate_of_ten_watts():
    # A flux of 10 W m-2 melts 0.282 cm of ice per day (check values, section 6):
    # rho_i L dz/dt = 10 with rho_i 917 and L 3.34e5 -> 0.282 cm/day.
    rate_m_s = 0.00282 / 86400.0
    q = C.RHO_ICE_KG_M3 * C.LATENT_HEAT_FUSION_J_KG * rate_m_s * 3600.0 * np.arange(49)
    e = pd.date_range("2025-07-01", periods=49, freq="h").values
    t = bf.bulk_comparison(e, q, np.zeros(48), np.full(48, 0.01), np.full(48, 0.05))
    assert t["f_w_measured_W_m2"].iloc[-1] == pytest.approx(10.0, rel=2e-3)


def test_measured_flux_subtracts_conduction_and_windows_follow_the_budget():
    e = pd.date_range("2025-07-01", periods=20 * 24 + 1, freq="h").values
    q = 12.0 * 3600.0 * np.arange(e.size)  # F_b = 12 W m-2
    t = bf.bulk_comparison(e, q, np.full(e.size - 1, 2.0), np.full(e.size - 1, 0.01),
                           np.full(e.size - 1, 0.04), window_days=15.0)
    assert t["period"].tolist() == ["window 1", "window 2", "whole"]
    assert t["hours"].tolist() == [360.0, 120.0, 480.0]
    assert t["f_w_measured_W_m2"].tolist() == pytest.approx([10.0] * 3)


def test_disagreement_flag_by_factor_and_sign():
    e = pd.date_range("2025-07-01", periods=25, freq="h").values
    ones = np.ones(24)
    # bulk 24.55 W m-2 (u* 0.01, 0.1 K) against measured 5 W m-2: a factor of 4.9
    t = bf.bulk_comparison(e, 5.0 * 3600.0 * np.arange(25), 0 * ones, 0.01 * ones, 0.1 * ones)
    assert bool(t["disagree"].iloc[-1])
    t = bf.bulk_comparison(e, 15.0 * 3600.0 * np.arange(25), 0 * ones, 0.01 * ones, 0.1 * ones)
    assert not bool(t["disagree"].iloc[-1])
    t = bf.bulk_comparison(e, -5.0 * 3600.0 * np.arange(25), 0 * ones, 0.01 * ones, 0.1 * ones)
    assert bool(t["disagree"].iloc[-1])
    # both near zero: not compared
    t = bf.bulk_comparison(e, 0.1 * 3600.0 * np.arange(25), 0 * ones, 1e-4 * ones, 0.1 * ones)
    assert not bool(t["disagree"].iloc[-1])
    assert t["reason"].iloc[-1] == "both below the comparison floor"


def test_friction_velocity_relative_to_the_surface_layer():
    # drag law u* = sqrt(Cd) |du| with Cd 5.5e-3 (McPhee 1980, from memory)
    assert bf.friction_velocity(0.2, 0.0) == pytest.approx(np.sqrt(5.5e-3) * 0.2)
    assert bf.friction_velocity(0.2, 0.1, 0.2, 0.1) == 0.0
    assert bf.friction_velocity(0.0, 0.0, 0.03, -0.04) == pytest.approx(np.sqrt(5.5e-3) * 0.05)


def test_ice_velocity_against_the_geodesic():
    t = np.array(["2025-07-01T00", "2025-07-01T06"], dtype="datetime64[ns]")
    u, v = bf.ice_velocity(t, [80.0, 80.05], [10.0, 10.3])
    az, _, dist = Geod(ellps="WGS84").inv(10.0, 80.0, 10.3, 80.05)  # pyproj (Karney 2013)
    assert np.hypot(u[0], v[0]) == pytest.approx(dist / 21600.0, rel=1e-12)
    assert np.degrees(np.arctan2(u[0], v[0])) == pytest.approx(az, abs=1e-9)


def test_thermal_forcing_uses_the_teos10_freezing_point():
    # gsw.t_freezing(35.16504, 0, 1) = -1.921014315441 (check values, section 1)
    sa = gsw.SA_from_SP(35.0, 0.0, -30.0, 0.0)
    want = -1.8 - gsw.t_freezing(sa, 0.0, 1.0)
    assert bf.thermal_forcing(-1.8, 35.0, 0.0, 0.0, -30.0) == pytest.approx(want, abs=1e-12)
    assert gsw.t_freezing(35.16504, 0.0, 1.0) == pytest.approx(-1.921014315441, abs=1e-9)
