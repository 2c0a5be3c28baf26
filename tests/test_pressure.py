"""Depth and pressure (lidmelt.physics._pressure) against PREM.

Check values: PREM's tabulated pressures (Dziewonski & Anderson 1981, Table II; as listed in
the PREM table of a mineral-physics library, read there): 2.45 GPa at 80 km, 7.11 GPa at
220 km, 13.35 GPa at 400 km, 23.83 GPa at 670 km; PREM's density at 400 km, 3.5433 g/cm3 above
the discontinuity and 3.7238 below (same table); Earth's mass 5.972e24 kg (common knowledge,
from memory). lidmelt's own definitions: constant rho g = 3300 * 9.81 above the join
(docs/physics.md, section "Depth and pressure").
"""

import numpy as np
import numpy.testing as npt

from lidmelt.physics import get_model
from lidmelt.physics._pressure import (
    UPPER_MANTLE_FLOOR_GPA,
    _enclosed_mass_kg,
    depth_pressure,
    prem_density_kg_m3,
    prem_pressure_gpa,
    water_load_km,
)


def test_prem_pressures_match_the_published_table():
    depths = np.array([80.0, 220.0, 400.0, 670.0])
    published = np.array([2.45, 7.11, 13.35, 23.83])  # PREM Table II
    # the table gives 0.01 GPa (its rounding); the integration is within 0.1 % beyond that
    npt.assert_allclose(prem_pressure_gpa(depths), published, rtol=1e-3, atol=0.01)
    npt.assert_allclose(prem_density_kg_m3([399.999, 400.001]), [3543.3, 3723.8], atol=0.5)
    npt.assert_allclose(_enclosed_mass_kg(6371.0), 5.972e24, rtol=2e-3)


def test_constant_density_above_the_join_prem_below():
    dp = depth_pressure(3300.0, 9.81)
    # the join: where 3300 * 9.81 * z meets PREM's pressure (continuous in depth and pressure)
    npt.assert_allclose(dp.join_gpa, prem_pressure_gpa(dp.join_km), rtol=1e-4)
    assert 7.0 < dp.join_gpa < 7.5  # below every calibrated range (7 GPa)
    z = np.linspace(0.0, dp.join_km, 50)
    npt.assert_allclose(dp.pressure_gpa(z), z * 1e3 * 3300.0 * 9.81 / 1e9, rtol=1e-12)
    # below the join, depth differences are PREM's
    p = np.array([8.0, 10.0, 13.35])
    zp = dp.depth_km(p)
    prem_depth = np.interp(
        p, prem_pressure_gpa(np.linspace(0, 700, 70001)), np.linspace(0, 700, 70001)
    )
    npt.assert_allclose(
        zp - dp.join_km,
        prem_depth
        - np.interp(
            dp.join_gpa, prem_pressure_gpa(np.linspace(0, 700, 70001)), np.linspace(0, 700, 70001)
        ),
        atol=1e-3,
    )
    # the floor sits at PREM's 400 km (here 399.7 km of rock below a dry seafloor)
    npt.assert_allclose(dp.depth_km(UPPER_MANTLE_FLOOR_GPA), 400.0, atol=0.5)
    # a round trip, and monotonic
    zz = np.linspace(0.0, 600.0, 6001)
    npt.assert_allclose(dp.depth_km(dp.pressure_gpa(zz)), zz, atol=1e-9)
    assert np.all(np.diff(dp.pressure_gpa(zz)) > 0)


def test_water_load_moves_depths_not_melt():
    # P_w = rho_w g d_w with rho_w = 1030 (seawater, common practice): 2.6 km of water weigh as
    # 0.81 km of 3300 kg/m3 rock; the melt thickness H = integral of F dZ does not depend on it
    npt.assert_allclose(water_load_km(2600.0), 2600.0 * 1030.0 / 3300.0 / 1e3)
    npt.assert_array_equal(water_load_km([np.nan, -5.0]), [0.0, 0.0])  # land, nodata: no load
    m = get_model("katz2003")
    zw = float(water_load_km(2600.0))
    npt.assert_allclose(m.pressure_gpa(7.0, zw), m.pressure_gpa(7.0 + zw))
    npt.assert_allclose(m.depth_km(m.pressure_gpa(50.0, zw), zw), 50.0)
