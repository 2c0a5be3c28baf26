"""The isentropic melting column (direct integration).

Each check value names its source: a published number, an identity of the equations, an
independent solution (scipy solve_ivp of the differential form), or common practice of the trade.
"""

import numpy as np
import numpy.testing as npt
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from lidmelt.physics import (
    column_profile,
    excess_to_melt_k,
    get_cooling_model,
    isotherm_depth_km,
    melt_column,
)
from lidmelt.physics._column import onset_pressure_gpa
from lidmelt.physics._flags import (
    FLAG_BEYOND_CALIBRATION,
    FLAG_INVALID_INPUT,
    FLAG_NO_ONSET,
    FLAG_UPPER_MANTLE_FLOOR,
    FLAG_WATER_SATURATED,
)
from lidmelt.physics._melting import GPA, KATZ2003
from lidmelt.physics._reference import solve_ivp_column

K = KATZ2003


def katz_solidus_c(p):
    """Katz et al. (2003) dry solidus, A1 + A2 P + A3 P^2 with A = 1085.7, 132.9, -5.1 (their
    Table 2, verified (secondary): docs/physics.md), written out here."""
    return 1085.7 + 132.9 * p - 5.1 * p**2


def katz_isentrope_c(tp, p):
    """The solid isentrope (Tp + 273.15) exp(alpha_s P / (rho_s c_p)) - 273.15 with alpha_s =
    40e-6 /K, rho_s = 3300 kg/m^3 (from memory) and c_p = 1000 J/kg/K (verified (secondary))
    (docs/physics.md, "Isentropic decompression melting"), P in GPa, written out here."""
    return (tp + 273.15) * np.exp(40e-6 / (3300.0 * 1000.0) * 1e9 * p) - 273.15


def direct(tp, lid, water=0.0, **kw):
    return melt_column(tp, lid, water, method="direct", **kw)


def test_ridge_at_ambient_makes_normal_oceanic_crust():
    # 7.1 +- 0.8 km: normal oceanic crust by seismic refraction (White, McKenzie & O'Nions 1992,
    # JGR 97, 19683; from memory). Default model, ambient Tp 1350 C, no lid, top at 7 km.
    res = direct(1350.0, 0.0)
    assert 7.1 - 0.8 <= float(res.melt_thickness_km) <= 7.1 + 0.8
    assert float(res.melting_top_km) == 7.0
    assert res.flag == 0


def test_solid_isentrope_gradient():
    # derived from the solid isentrope (docs/physics.md, Katz et al. 2003 constants): alpha_s T /
    # (rho_s c_p) = 19.7 K/GPa ~ 0.64 K/km at Tp 1350 C
    t0 = K.solid_adiabat_c(1350.0, 0.0)
    gradient = (K.solid_adiabat_c(1350.0, 1e-4) - t0) / 1e-4
    npt.assert_allclose(t0, 1350.0)
    npt.assert_allclose(gradient, 19.7, atol=0.05)
    npt.assert_allclose(gradient / float(K.depth_km(1.0)), 0.64, atol=0.005)
    # 1 GPa = 30.89 km with rho 3300 kg/m3 and g 9.81 m/s2 (derived: P = rho g z)
    npt.assert_allclose(K.depth_km(1.0), 30.89, atol=0.005)


@pytest.mark.parametrize("water", [0.0, 0.02])
def test_entropy_is_conserved_along_the_column(water):
    # identity (Katz et al. 2003, eq. 20, from memory): s = c_p ln T - int abar dP + dS F is
    # constant on the isentrope
    prof = column_profile(1500.0, 20.0, water, step_gpa=0.005)
    p = prof["pressure_gpa"] * GPA
    t = prof["temperature_c"] + 273.15
    f = prof["melt_fraction"]
    abar = (1 - f) * K.solid_expansivity_k / K.solid_density_kg_m3 + f * (
        K.melt_expansivity_k / K.melt_density_kg_m3
    )
    int_abar = np.concatenate([[0.0], np.cumsum(0.5 * (abar[1:] + abar[:-1]) * np.diff(p))])
    s = K.specific_heat_j_kg_k * np.log(t) - int_abar + K.entropy_of_melting_j_kg_k * f
    assert np.ptp(s) < 1e-8 * K.specific_heat_j_kg_k
    assert f.max() > 0.2  # the test really crossed a melting interval
    # F rises as P falls (decompression melting, Katz 2003 eq. 20 has dF/dP < 0)
    assert np.all(np.diff(f[f > 0]) >= -1e-12)


@pytest.mark.slow
@pytest.mark.parametrize(("tp", "lid", "water"), [(1350.0, 0.0, 0.0), (1450.0, 30.0, 0.01)])
def test_direct_agrees_with_an_independent_solve_ivp_solution(tp, lid, water):
    # independent check: the differential form dT/dP = (T/c_p)(abar - dS F_P)/(1 + T dS F_T/c_p)
    # with finite-difference partials, integrated by scipy's adaptive RK45 (reference.py)
    ref = solve_ivp_column(tp, lid, water)
    res = direct(tp, lid, water)
    npt.assert_allclose(float(res.melt_thickness_km), ref["melt_thickness_km"], atol=2e-3)
    npt.assert_allclose(float(res.max_melt_fraction), ref["max_melt_fraction"], atol=1e-4)


def test_step_convergence():
    # the default step (0.01 GPa) and the table's fallback step (0.04 GPa) are converged:
    # against 0.0025 GPa they change H by < 1e-3 km
    from lidmelt.physics._table import FALLBACK_STEP_GPA

    tp = np.array([1300.0, 1350.0, 1550.0, 1600.0, 1400.0])
    water = np.array([0.0, 0.01, 0.0, 0.0, 0.1])
    fine = direct(tp, 0.0, water, step_gpa=0.0025)
    for step in (0.01, FALLBACK_STEP_GPA):
        coarse = direct(tp, 0.0, water, step_gpa=step)
        npt.assert_allclose(coarse.melt_thickness_km, fine.melt_thickness_km, atol=1e-3)
        npt.assert_allclose(coarse.max_melt_fraction, fine.max_melt_fraction, atol=1e-4)


def test_melting_only_where_the_isentrope_is_above_the_solidus():
    # common practice: a rock melts only above its solidus; below the onset the column is solid
    prof = column_profile(1450.0, 10.0, 0.0)
    p, f = prof["pressure_gpa"], prof["melt_fraction"]
    solid_t = K.solid_adiabat_c(1450.0, p)
    assert np.all(f[solid_t < K.solidus_c(p) - 1e-6] == 0.0)
    assert np.all(f[solid_t > K.solidus_c(p) + 1e-6] > 0.0)
    # the melting column is colder than the solid isentrope: latent heat is consumed
    melting = f > 0.01
    assert np.all(prof["temperature_c"][melting] < solid_t[melting])


def test_hotter_parallel_adiabat_melts_deeper_and_more():
    # common practice (e.g. McKenzie & Bickle 1988): onset and melt thickness grow with Tp
    tp = np.arange(1250.0, 1651.0, 50.0)
    res = direct(tp, 0.0)
    assert np.all(np.diff(res.onset_depth_km) > 0)
    assert np.all(np.diff(res.melt_thickness_km) > 0)


def test_melt_never_grows_as_the_lid_thickens():
    # common practice: a thicker lid truncates the column from above
    lid = np.linspace(0.0, 200.0, 41)
    res = direct(1550.0, lid)
    assert np.all(np.diff(res.melt_thickness_km) <= 1e-12)
    assert np.all(np.diff(res.max_melt_fraction) <= 1e-12)
    # the solidus crossing does not depend on the lid (the onset is given where H > 0 only)
    npt.assert_allclose(res.solidus_crossing_depth_km, res.solidus_crossing_depth_km[0])


def test_old_thick_lid_ambient_versus_plume():
    # common practice: ambient dry mantle beneath old, thick lithosphere makes little or no melt;
    # a plume excess of a few hundred K beneath the same lid does. 120 Ma half-space lid.
    lid = float(isotherm_depth_km(1100.0, 120.0, model=get_cooling_model("half-space")))
    assert lid > 110.0
    ambient = direct(1350.0, lid)
    plume = direct(1350.0 + 250.0, lid)
    assert float(ambient.melt_thickness_km) == 0.0
    assert np.isfinite(ambient.solidus_crossing_depth_km)
    assert float(ambient.solidus_crossing_depth_km) < lid
    assert float(plume.melt_thickness_km) > 1.0


def test_water_moves_the_onset_more_than_the_melt():
    # derived (Katz et al. 2003 hydrous law, Table 2 constants): 100 ppm moves the onset deeper by
    # more than 10 km, but adds under 1 km
    # of melt at ambient Tp (ridge, dry vs 0.01 wt%)
    dry, wet = direct(1350.0, 0.0, 0.0), direct(1350.0, 0.0, 0.01)
    assert float(wet.onset_depth_km - dry.onset_depth_km) > 10.0
    assert 0.0 < float(wet.melt_thickness_km - dry.melt_thickness_km) < 1.0


def test_outputs_definitions():
    res = direct(np.array([1350.0, 1550.0]), np.array([30.0, 3.0]))
    # top of melting = max(lid, 7 km) (lidmelt definition, docs/physics.md)
    npt.assert_allclose(res.melting_top_km, [30.0, 7.0])
    # onset pressure and depth agree through P = rho g z
    npt.assert_allclose(res.onset_depth_km, K.depth_km(res.onset_pressure_gpa))
    # the mean pressure of melting lies between the top and the onset
    top_p = K.pressure_gpa(res.melting_top_km)
    assert np.all(
        (res.mean_melt_pressure_gpa > top_p) & (res.mean_melt_pressure_gpa < res.onset_pressure_gpa)
    )


def test_zero_melt_keeps_the_solidus_crossing_not_the_onset():
    # lidmelt definition (docs/physics.md, "Definitions lidmelt fixes"): where H = 0 the onset
    # depth and pressure and the mean pressure are NaN (nothing melts), and the depth where the
    # isentrope crosses the solidus is reported as the solidus crossing
    res = direct(1350.0, 120.0)
    assert float(res.melt_thickness_km) == 0.0
    assert float(res.max_melt_fraction) == 0.0
    assert np.isnan(res.mean_melt_pressure_gpa)
    assert np.isnan(res.onset_depth_km)
    assert np.isnan(res.onset_pressure_gpa)
    # check value computed here from the stated inputs: the root of isentrope = dry solidus
    # (2.6607 GPa), at rho g = 3300 x 9.81 (lidmelt's default, docs/physics.md): 82.19 km, the
    # docs' "onset 82.2 km (2.66 GPa)" of a ridge at 1350 C
    p_cross = brentq(lambda p: katz_isentrope_c(1350.0, p) - katz_solidus_c(p), 0.1, 6.0)
    z_cross = p_cross * 1e9 / (3300.0 * 9.81) / 1e3
    assert (round(p_cross, 2), round(z_cross, 1)) == (2.66, 82.2)  # as the docs quote them
    npt.assert_allclose(res.solidus_crossing_depth_km, z_cross, atol=1e-6)


def test_onset_is_the_shallowest_crossing():
    # definition of the onset (docs/physics.md): the isentrope must equal the solidus at the onset,
    # and be hotter above it
    for tp, w in ((1350.0, 0.0), (1600.0, 0.0), (1400.0, 0.03)):
        p0 = float(onset_pressure_gpa(K, tp, w))
        npt.assert_allclose(K.solid_adiabat_c(tp, p0), K.solidus_c(p0, w), atol=1e-6)
        p = np.linspace(0.0, p0 - 1e-6, 500)
        assert np.all(K.solid_adiabat_c(tp, p) > K.solidus_c(p, w))


def test_broadcasting_shapes():
    tp = np.full((2, 3), 1400.0)
    res = direct(tp, np.array([0.0, 50.0, 100.0]), 0.0)
    for name, arr in res.as_dict().items():
        assert arr.shape == (2, 3), name
    npt.assert_allclose(res.melt_thickness_km[0], res.melt_thickness_km[1])


def test_invalid_inputs_are_nan_and_flagged():
    tp = np.array([np.nan, 1350.0, 1000.0, 1350.0, 1350.0, 1350.0])
    lid = np.array([10.0, -5.0, 10.0, 10.0, np.nan, 10.0])
    water = np.array([0.0, 0.0, 0.0, -0.01, 0.0, 0.5])
    res = direct(tp, lid, water)
    assert np.all(res.flag[:5] & FLAG_INVALID_INPUT)
    # 0.5 wt% exceeds what the solid holds, D X_sat (derived from Katz et al. 2003 eq. 17 and Table
    # 2): the solidus is
    # then depressed so far that no onset exists, or the source is saturated at it
    assert res.flag[5] & (FLAG_WATER_SATURATED | FLAG_NO_ONSET)
    for name in ("melt_thickness_km", "onset_depth_km", "max_melt_fraction"):
        assert np.all(np.isnan(getattr(res, name))), name


def test_beyond_calibration_is_flagged_not_clipped():
    # lidmelt definitions, docs/physics.md sections "Beyond the calibrated pressure" and "The
    # upper mantle's floor": an onset deeper than 7 GPa lies on the continued solidus (the
    # Herzberg, Raterron & Zhang 2000 fit 1086 - 5.7 P + 390 ln P, shifted to Katz's 1766.1 C at
    # 7 GPa) and is flagged; an isentrope above the solidus at PREM's 400 km (13.35 GPa,
    # Dziewonski & Anderson 1981) melts from there, flagged 16
    res = direct(np.array([1630.0, 1700.0]), 30.0, 0.0)
    assert res.flag[0] == FLAG_BEYOND_CALIBRATION

    def fit(p):  # Herzberg, Raterron & Zhang (2000)
        return 1086.0 - 5.7 * p + 390.0 * np.log(p)

    # check value computed here: the root in 7-13.35 GPa of the isentrope at 1630 C against the
    # fit shifted to Katz's solidus at 7 GPa (1085.7 + 132.9 x 7 - 5.1 x 49 = 1766.1 C)
    assert katz_solidus_c(7.0) == pytest.approx(1766.1, abs=1e-9)
    p0 = brentq(
        lambda p: katz_isentrope_c(1630.0, p) - (katz_solidus_c(7.0) + fit(p) - fit(7.0)),
        7.0, 13.35, xtol=1e-12,
    )  # fmt: skip
    npt.assert_allclose(res.onset_pressure_gpa[0], p0, atol=1e-6)  # 8.734 GPa
    assert res.flag[1] == FLAG_BEYOND_CALIBRATION | FLAG_UPPER_MANTLE_FLOOR
    assert float(res.onset_pressure_gpa[1]) == 13.35
    assert res.melt_thickness_km[1] > res.melt_thickness_km[0] > 0


def test_excess_to_melt_is_the_threshold():
    # identity: at Tp = ambient + excess the onset is exactly at the top of melting, so 1 K more
    # melts and 1 K less does not
    lid = np.array([20.0, 60.0, 100.0, 150.0])
    ex = excess_to_melt_k(lid, 0.0, ambient_potential_temperature_c=1350.0)
    p0 = onset_pressure_gpa(K, 1350.0 + ex, 0.0)
    npt.assert_allclose(p0, K.pressure_gpa(lid), atol=1e-9)
    assert np.all(direct(1350.0 + ex + 1.0, lid).melt_thickness_km > 0)
    assert np.all(direct(1350.0 + ex - 1.0, lid).melt_thickness_km == 0)
    # at a ridge (lid 0, top 7 km) ambient mantle melts: the excess is negative
    assert float(excess_to_melt_k(0.0)) < 0


def test_mckenzie_bickle_column_runs_and_rejects_water():
    res = melt_column(
        np.array([1280.0, 1280.0]),
        0.0,
        np.array([0.0, 0.01]),
        model="mckenzie-bickle1988",
        method="direct",
    )
    assert float(res.melt_thickness_km[0]) > 2.0
    assert res.flag[0] == 0
    assert res.flag[1] & FLAG_INVALID_INPUT  # an anhydrous model: water is outside it


@settings(max_examples=15, deadline=None)
@given(
    st.lists(
        st.tuples(st.floats(1200.0, 1620.0), st.floats(0.0, 250.0), st.floats(0.0, 0.02)),
        min_size=1,
        max_size=6,
    )
)
def test_properties_monotone_and_bounded(cells):
    # common practice: more Tp never melts less; a thicker lid never melts more; 0 <= F <= 1;
    # where melt forms the onset lies below the top of melting
    tp, lid, w = (np.array(c) for c in zip(*cells, strict=True))
    base = direct(tp, lid, w)
    hotter = direct(tp + 10.0, lid, w)
    thicker = direct(tp, lid + 10.0, w)
    ok = base.flag == 0
    h, h_hot, h_thick = base.melt_thickness_km, hotter.melt_thickness_km, thicker.melt_thickness_km
    assert np.all(h_hot[ok & (hotter.flag == 0)] >= h[ok & (hotter.flag == 0)] - 1e-9)
    assert np.all(h_thick[ok] <= h[ok] + 1e-9)
    f = base.max_melt_fraction[ok]
    assert np.all((f >= 0) & (f <= 1))
    melts = ok & (h > 0)
    assert np.all(base.onset_depth_km[melts] > base.melting_top_km[melts])
