"""The lid-from-age lookup (lidmelt.physics._lidlookup) against the exact isotherm depth."""

from __future__ import annotations

import math

import numpy as np
import numpy.testing as npt
import pytest
from scipy.optimize import brentq

from lidmelt._engine import ChunkInputs, KernelSettings, evaluate_chunk
from lidmelt._errors import ModelError
from lidmelt._variables import OUTPUTS
from lidmelt.physics import get_model
from lidmelt.physics._cooling import (
    GDH1,
    HALF_SPACE,
    PS77,
    get_cooling_model,
    isotherm_depth_km,
    temperature_c,
)
from lidmelt.physics._lidlookup import AGE_MAX_MA, TOLERANCE_KM, lid_lookup

PLATES = (GDH1, PS77)
# Isotherms as fractions of Tm - T0: 5 %, the default 1100 C in GDH1, 0.9, and 1 K below Tm (the
# hardest: the isotherm bends most where it meets the plate base).
FRACTIONS = (0.05, 1100.0 / 1450.0, 0.9, "1 K below Tm")


def _isotherm(model, fraction):
    t0, tm = model.surface_temperature_c, model.mantle_temperature_c
    if fraction == "1 K below Tm":
        return tm - 1.0
    return t0 + fraction * (tm - t0)


@pytest.mark.parametrize("model", PLATES, ids=lambda m: m.name)
@pytest.mark.parametrize("fraction", FRACTIONS)
def test_plate_lookup_within_bound_at_random_ages_nodes_and_midpoints(model, fraction):
    # Bound stated by lidmelt.physics._lidlookup (TOLERANCE_KM = 0.01 km against
    # isotherm_depth_km, 0-400 Ma); linear interpolation errs most near the steps' midpoints.
    iso = _isotherm(model, fraction)
    lookup = lid_lookup(iso, model=model)
    steps = lookup.base_km.size - 1
    k = np.arange(steps)
    rng = np.random.default_rng(11)
    s = np.concatenate([(k + 0.5) * lookup.step, k * lookup.step, [steps * lookup.step]])
    ages = np.concatenate([s**2, rng.uniform(0.0, AGE_MAX_MA, 100_000), [1e-9, 1e-4, 0.01]])
    ages = ages[ages <= AGE_MAX_MA]
    error = np.abs(lookup.depth_km(ages) - isotherm_depth_km(iso, ages, model=model))
    assert error.max() <= TOLERANCE_KM
    assert lookup.midpoint_error_km <= TOLERANCE_KM / 4  # the build's own target


@pytest.mark.parametrize("model", PLATES, ids=lambda m: m.name)
@pytest.mark.parametrize("fraction", [1100.0 / 1450.0, "1 K below Tm"])
def test_plate_lookup_within_bound_of_a_direct_root_find(model, fraction):
    # Independent reference: scipy.optimize.brentq on temperature_c (the plate series).
    iso = _isotherm(model, fraction)
    rng = np.random.default_rng(5)
    ages = np.concatenate([[1e-3, 0.5, 399.0], rng.uniform(0.0, AGE_MAX_MA, 30)])
    direct = [
        brentq(
            lambda z, t=t: float(temperature_c(z, t, model=model)) - iso,
            0.0,
            model.plate_thickness_km,
            xtol=1e-9,
        )
        for t in ages
    ]
    npt.assert_allclose(lid_lookup(iso, model=model).depth_km(ages), direct, atol=TOLERANCE_KM)


def test_half_space_lookup_is_the_exact_function():
    # In sqrt(age) the half-space depth is a straight line (T&S 2002 section 4.15, z ~ sqrt(t)),
    # so the lookup is its slope: the same numbers bit for bit, with no age range.
    ages = np.array([0.0, 1e-6, 3.0, 150.0, 400.0, 1000.0, 1e5, -1.0, np.nan])
    for iso in (0.0, 1100.0, 1299.0):
        lookup = lid_lookup(iso, model=HALF_SPACE)
        npt.assert_array_equal(
            lookup.depth_km(ages), isotherm_depth_km(iso, ages, model=HALF_SPACE)
        )
        assert lookup.age_max_ma == math.inf


@pytest.mark.parametrize("model", PLATES, ids=lambda m: m.name)
def test_plate_lookup_edges_match_the_exact_function(model):
    # Module conventions (lidmelt.physics._cooling): NaN and negative ages give NaN, age 0 gives
    # 0; ages beyond the nodes are the exact function's values, not clipped.
    lookup = lid_lookup(1100.0, model=model)
    ages = np.array([np.nan, -1.0, -1e-12, 0.0, AGE_MAX_MA, AGE_MAX_MA + 0.5, 2000.0])
    got = lookup.depth_km(ages)
    exact = isotherm_depth_km(1100.0, ages, model=model)
    assert np.isnan(got[:3]).all()
    assert got[3] == 0.0
    assert abs(got[4] - exact[4]) <= TOLERANCE_KM
    npt.assert_array_equal(got[5:], exact[5:])
    assert got[6] > got[4]  # the plate keeps thickening towards its asymptote


def test_lookup_shapes_dtypes_and_float32_ages():
    ages = np.linspace(0.0, 300.0, 24, dtype=np.float32).reshape(2, 3, 4)
    lookup = lid_lookup(1100.0, model=GDH1)
    z = lookup.depth_km(ages)
    assert z.shape == (2, 3, 4)
    assert z.dtype == np.float64
    npt.assert_allclose(z, isotherm_depth_km(1100.0, ages, model=GDH1), atol=TOLERANCE_KM)
    assert np.ndim(lookup.depth_km(50.0)) == 0
    assert lookup.depth_km([]).shape == (0,)
    # A broadcast (read-only, zero-stride) array of ages, as the engine passes.
    flat = lookup.depth_km(np.broadcast_to(np.float32(80.0), (3, 5)))
    npt.assert_array_equal(flat, lookup.depth_km(np.full((3, 5), 80.0, np.float32)))


def test_lookups_are_cached_per_model_parameters_and_isotherm():
    first = lid_lookup(1100.0, model=GDH1)
    assert lid_lookup(np.float64(1100.0), model=GDH1) is first
    assert lid_lookup(1150.0, model=GDH1) is not first
    thicker = get_cooling_model("gdh1", plate_thickness_km=110.0)
    other = lid_lookup(1100.0, model=thicker)
    assert other is not first
    # A thicker plate holds the 1100 C isotherm deeper at old ages [derived: steady geotherm
    # depth = a (T - T0) / (Tm - T0)].
    assert other.depth_km(300.0) > first.depth_km(300.0)


@pytest.mark.parametrize("bad", [1450.0, -5.0, math.nan, "hot"])
def test_invalid_isotherm_raises(bad):
    with pytest.raises(ModelError, match="isotherm"):
        lid_lookup(bad, model=GDH1)


def test_non_model_raises():
    with pytest.raises(ModelError, match="get_cooling_model"):
        lid_lookup(1100.0, model="gdh1")


def test_engine_lid_from_age_is_the_lookup():
    # evaluate_chunk takes the lid from the lookup where no lid grid is given; the lid output
    # is within the lookup's bound of the exact isotherm depth.
    settings = KernelSettings(
        model=get_model("katz2003"),
        table=None,
        cooling=GDH1,
        lid_isotherm_c=1100.0,
        ambient_c=1350.0,
        min_top_km=0.0,
        method="direct",
        sources={},
    )
    age = np.array([[0.5, 7.3, 23.0], [61.0, 140.0, 390.0]], np.float32)
    out = evaluate_chunk(ChunkInputs(age, np.nan, 150.0, 0.0), settings=settings)
    given = lid_lookup(1100.0, model=GDH1).depth_km(age)
    same = evaluate_chunk(ChunkInputs(age, given, 150.0, 0.0), settings=settings)
    npt.assert_array_equal(out, same)
    lid = out[list(OUTPUTS).index("melting_top_km")]
    exact = isotherm_depth_km(1100.0, age, model=GDH1)
    npt.assert_allclose(lid, exact, atol=TOLERANCE_KM + 1e-5 * exact.max())  # float32 output


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_compiled_plate_lookup_equals_the_numpy_passes(dtype):
    """The compiled loop does the numpy path's arithmetic in the same order: equal bit for bit
    (check values: the same lookup with compiled=False), NaN, negative and beyond-400-Ma ages
    included."""
    look = lid_lookup(1100.0, model=get_cooling_model("gdh1"))
    rng = np.random.default_rng(11)
    age = rng.uniform(-5.0, 450.0, 20000).astype(dtype)
    age[::97] = np.nan
    age[:3] = (0.0, 400.0, 1e-6)
    grid = age.reshape(100, 200)
    np.testing.assert_array_equal(look.depth_km(grid), look.depth_km(grid, compiled=False))
