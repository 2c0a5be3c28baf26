"""Melting laws: Katz et al. (2003) and McKenzie & Bickle (1988).

Check values name their source beside them. "Katz 2003 Table 2" values are verified against a
secondary source that quotes the table; "derived" values follow from the published formulas
by algebra; "from memory" marks values not checked against the paper.
"""

import dataclasses

import numpy as np
import numpy.testing as npt
import pytest

from lidmelt._errors import ModelError
from lidmelt.physics import melt_column
from lidmelt.physics._melting import KATZ2003, MCKENZIE_BICKLE1988, MODELS, get_model

K = KATZ2003


def test_katz_table2_constants():
    # Katz, Spiegelman & Langmuir 2003, Table 2 (verified secondary)
    expected = {
        "solidus_a1_c": 1085.7,
        "solidus_a2_c_gpa": 132.9,
        "solidus_a3_c_gpa2": -5.1,
        "lherzolite_liquidus_b1_c": 1475.0,
        "lherzolite_liquidus_b2_c_gpa": 80.0,
        "lherzolite_liquidus_b3_c_gpa2": -3.2,
        "liquidus_c1_c": 1780.0,
        "liquidus_c2_c_gpa": 45.0,
        "liquidus_c3_c_gpa2": -2.0,
        "cpx_reaction_r0": 0.5,
        "cpx_reaction_r1_gpa": 0.08,
        "beta1": 1.5,
        "beta2": 1.5,
        "water_depression_k_c": 43.0,
        "water_depression_gamma": 0.75,
        "water_partition_coefficient": 0.01,
        "saturation_chi1_wt_pct": 12.0,
        "saturation_chi2_wt_pct_gpa": 1.0,
        "saturation_lambda": 0.6,
        "specific_heat_j_kg_k": 1000.0,
        "entropy_of_melting_j_kg_k": 300.0,
    }
    params = K.parameters()
    for key, value in expected.items():
        assert params[key] == value, key


@pytest.mark.parametrize("p", [0.0, 1.0, 3.0, 6.0])
def test_katz_polynomials(p):
    # Katz 2003 eqs. 4, 5, 10 with the Table 2 constants (forms from memory, constants verified
    # secondary)
    npt.assert_allclose(K.solidus_c(p), 1085.7 + 132.9 * p - 5.1 * p**2, rtol=1e-12)
    npt.assert_allclose(K.liquidus_c(p), 1780.0 + 45.0 * p - 2.0 * p**2, rtol=1e-12)
    _t_sol, t_lherz, *_ = K.pressure_terms(p)
    npt.assert_allclose(t_lherz, 1475.0 + 80.0 * p - 3.2 * p**2, rtol=1e-12)


@pytest.mark.parametrize("p", [0.5, 2.0, 4.0])
@pytest.mark.parametrize("water", [0.0, 0.01])
def test_katz_limits_and_cpx_continuity(p, water):
    # Katz 2003 eqs. 3, 6, 8, 9: F = 0 at the solidus, F = 1 at the liquidus, and both branches
    # give F_cpx-out at T_cpx-out (continuity), with F_cpx-out = M_cpx / (r0 + r1 P).
    assert K.melt_fraction(p, K.solidus_c(p, water) - 1e-9, water) == 0.0
    npt.assert_allclose(K.melt_fraction(p, K.liquidus_c(p, water), water), 1.0, atol=1e-9)
    f_cpx = 0.17 / (0.5 + 0.08 * p)
    t_cpx = K.temperature_c(p, f_cpx, water)
    for eps in (1e-6, -1e-6):
        npt.assert_allclose(K.melt_fraction(p, t_cpx + eps, water), f_cpx, atol=1e-6)
    # the cpx-free branch uses the true liquidus C with T_cpx-out (Katz et al. 2003, eq. 9, from
    # memory)
    _t_sol, _t_lherz, t_liq, _, t_cpx_dry, _, _ = K.pressure_terms(p)
    mid = t_cpx_dry + 0.5 * (t_liq - t_cpx_dry)
    npt.assert_allclose(K.melt_fraction(p, mid), f_cpx + (1 - f_cpx) * 0.5**1.5, rtol=1e-9)


def test_katz_inverse_round_trip():
    # identity: temperature_c(P, melt_fraction(P, T)) = T inside the melting interval
    rng = np.random.default_rng(3)
    p = rng.uniform(0.1, 6.0, 200)
    w = rng.choice([0.0, 0.005, 0.05], 200)
    f = rng.uniform(0.001, 0.999, 200)
    t = K.temperature_c(p, f, w)
    npt.assert_allclose(K.melt_fraction(p, t, w), f, atol=1e-9)


def test_katz_wet_solidus_depression():
    # derived from Katz et al. 2003 eqs. 16-18 and Table 2: the wet solidus is K*min(X_bulk/D,
    # X_sat)^gamma below the dry one:
    # 43 K for 0.01 wt% and 43 * 10^0.75 = 241.8 K for 0.1 wt% (unsaturated at 3 GPa).
    npt.assert_allclose(K.solidus_c(3.0) - K.solidus_c(3.0, 0.01), 43.0, rtol=1e-12)
    npt.assert_allclose(K.solidus_c(3.0) - K.solidus_c(3.0, 0.1), 43.0 * 10**0.75, rtol=1e-12)
    # saturation X_sat = 12 P^0.6 + P wt% (Katz 2003 eq. 17): 13 wt% at 1 GPa; at 0.1 GPa the
    # first melt of a 0.1 wt% source (10 wt% water) is capped at X_sat
    npt.assert_allclose(K.saturation_wt_pct(1.0), 13.0)
    x_sat = 12 * 0.1**0.6 + 0.1
    npt.assert_allclose(K.solidus_c(0.1) - K.solidus_c(0.1, 0.1), 43.0 * x_sat**0.75, rtol=1e-12)
    # at P = 0 the melt holds no water, so the wet solidus is the dry one (trap 6)
    assert K.solidus_c(0.0, 0.1) == K.solidus_c(0.0)


def test_katz_hotter_than_1500_runs_through_the_cpx_free_branch():
    # derived (Katz et al. 2003 Table 2, M_cpx 0.17 from memory): only Tp >= ~1450 C reaches F >
    # F_cpx-out; check it is reached and that
    # the cpx-free branch is continuous with the cpx-present one along the column.
    res = melt_column(1550.0, 0.0, method="direct")
    top_p = float(K.pressure_gpa(7.0))
    f_cpx = 0.17 / (0.5 + 0.08 * top_p)  # Katz 2003 eq. 6
    assert float(res.max_melt_fraction) > f_cpx
    # lower M_cpx moves cpx exhaustion to a lower F: the same column melts less beyond it
    leaner = melt_column(
        1550.0, 0.0, model=get_model("katz2003", cpx_mass_fraction=0.12), method="direct"
    )
    assert float(leaner.max_melt_fraction) < float(res.max_melt_fraction)


def test_mckenzie_bickle_limits():
    m = MCKENZIE_BICKLE1988
    # derived from McKenzie & Bickle 1988 (from memory): x(-0.5) = 0, x(+0.5) = 1; dx/dT' = 2.07 at
    # the solidus
    npt.assert_allclose(m.melt_fraction_of_reduced([-0.5, 0.5]), [0.0, 1.0], atol=1e-12)
    slope = (m.melt_fraction_of_reduced(-0.5 + 1e-7) - 0.0) / 1e-7
    npt.assert_allclose(slope, 2.07, atol=0.005)
    # derived from McKenzie & Bickle 1988 (from memory): T_s(0) = 1099.9 C, T_s(1.5 GPa) ~ 1303 C,
    # T_s(3 GPa) ~ 1500 C
    npt.assert_allclose(m.solidus_c(0.0), 1099.9, atol=0.1)
    npt.assert_allclose(m.solidus_c(1.5), 1303.0, atol=2.0)
    npt.assert_allclose(m.solidus_c(3.0), 1500.0, atol=3.0)
    # liquidus formula (McKenzie & Bickle 1988, from memory): T_l(0) = 1736.2 C
    npt.assert_allclose(m.liquidus_c(0.0), 1736.2)
    npt.assert_allclose(m.melt_fraction(2.0, m.temperature_c(2.0, 0.3)), 0.3, atol=1e-9)


def test_models_are_frozen_and_named():
    assert set(MODELS) == {"katz2003", "mckenzie-bickle1988"}
    with pytest.raises(dataclasses.FrozenInstanceError):
        K.beta1 = 2.0  # type: ignore[misc]


def test_variant_parameters_travel_with_results():
    variant = get_model("katz2003", cpx_mass_fraction=0.15, specific_heat_j_kg_k=1100.0)
    res = melt_column(1400.0, 20.0, model=variant, method="direct")
    assert res.model.cpx_mass_fraction == 0.15
    assert res.model.parameters()["specific_heat_j_kg_k"] == 1100.0
    assert res.model.sources["cpx_mass_fraction"] == "user override"
    assert K.cpx_mass_fraction == 0.17  # the published set is untouched


def test_model_errors_name_the_fix():
    with pytest.raises(ModelError, match="Did you mean 'katz2003'"):
        get_model("katz2030")
    with pytest.raises(ModelError, match="Did you mean 'cpx_mass_fraction'"):
        get_model("katz2003", cpx_mas_fraction=0.1)
    with pytest.raises(ModelError, match="must be > 0"):
        get_model("katz2003", specific_heat_j_kg_k=-1.0)
    with pytest.raises(ModelError, match="outside"):
        get_model("katz2003", cpx_mass_fraction=1.5)
