"""The top of melting under the geotherm rule (lidmelt.physics._geotherm).

Check values: lidmelt's definition (docs/physics.md, "One mantle beneath the lid": the top is
the shallowest depth between the crust base and the onset where the cooling model's geotherm,
with the column's own isentrope as its mantle side, is at least as hot as the column), evaluated
independently here from one column's profile (lidmelt.physics.column_profile at 0.005 GPa,
proven in tests/test_column.py) and the cooling models' temperature (tests/test_cooling.py);
and the issue's requirements: the ridge column unchanged within 0.05 km, the three cooling
models within 0.1 km of each other beneath seafloor older than 60 Ma (ambient Tp 1350 C, dry and
0.01 wt%). Depth is below the seafloor: beneath a water load (its rock-equivalent depth Z(P_w),
lidmelt.physics._pressure) the column keeps its pressures and the geotherm is read at
z = Z(P) - Z(P_w); the loads used are the cooling models' own seafloor depths at the cell's age
(lidmelt.physics._cooling.seafloor_depth_m, tests/test_cooling.py), as a run without bathymetry
uses them, and arbitrary loads between the load nodes.
"""

import itertools
import math

import numpy as np
import numpy.testing as npt
import pytest
from scipy import special

from lidmelt._config import LithosphereOptions
from lidmelt._engine import ChunkInputs, KernelSettings, evaluate_chunk
from lidmelt._variables import OUTPUTS
from lidmelt.physics import (
    column_profile,
    evaluate_cells,
    get_cooling_model,
    get_model,
    get_table,
    melt_column,
)
from lidmelt.physics._cells import CellOptions
from lidmelt.physics._cooling import SECONDS_PER_MA, seafloor_depth_m, temperature_c
from lidmelt.physics._geotherm import (
    DEFAULT_TOP_OF_MELTING,
    direct_excess_k,
    direct_top_km,
    geotherm_tops,
    geotherm_tops_direct,
)
from lidmelt.physics._geotherm_arrays import LOAD_STEP_KM, critical_sqrt_age
from lidmelt.physics._geotherm_search import AVAILABLE
from lidmelt.physics._kernel_records import Cells
from lidmelt.physics._pressure import water_load_km

MODELS = ("half-space", "gdh1", "ps77")
KATZ = get_model("katz2003")


def age_load(ages, cooling):
    """The water load [km] of the cooling model's seafloor depth at these ages."""
    return water_load_km(seafloor_depth_m(ages, model=get_cooling_model(cooling)))


def reference(tp, water, age, cooling, min_top=7.0, load=0.0):
    """(top km or inf, H km) by the definition, from one column's profile (deepest first)."""
    cm = get_cooling_model(cooling)
    prof = column_profile(
        tp, min_top, water, step_gpa=0.005, below_onset_km=0.5, water_load_km=load
    )
    z, t_col, f = prof["depth_km"], prof["temperature_c"], prof["melt_fraction"]
    t_is = KATZ.solid_adiabat_c(tp, prof["pressure_gpa"])
    t0, tm = cm.surface_temperature_c, cm.mantle_temperature_c
    theta = (temperature_c(z, age, model=cm) - t0) / (tm - t0)
    t_g = t0 + (t_is - t0) * theta
    z_on = float(
        melt_column(tp, 0.0, water, method="direct", water_load_km=load).solidus_crossing_depth_km
    )
    ok = (t_g >= t_col) & (z >= min_top - 1e-9) & (z < z_on)
    if not ok.any():
        return math.inf, 0.0
    top = float(z[ok].min())
    sel = z >= top
    return top, float(np.trapezoid(f[sel][::-1], z[sel][::-1]))


def geotherm_h(tp, water, age, cooling, *, ambient=1350.0, compiled=None, load=0.0):
    """H [km] of cells whose top comes from the geotherm rule (table path)."""
    table = get_table(KATZ)
    cm = get_cooling_model(cooling)
    top, amb, excess = geotherm_tops(
        table, cm, tp, water, age, ambient_c=ambient, compiled=compiled, water_load_km=load
    )
    cells = Cells(
        np.broadcast_to(np.asarray(tp, float), np.shape(top)), top, water, water_load_km=load,
        ambient_lid_depth_km=amb, excess_k=excess,
    )  # fmt: skip
    options = CellOptions(ambient_potential_temperature_c=ambient, table=table)
    return top, evaluate_cells(cells, options, dtype=np.float64).as_dict()


@pytest.mark.parametrize("water", [0.0, 0.01])
@pytest.mark.parametrize("loaded", [False, True])
def test_the_ridge_column_is_unchanged(water, loaded):
    # issue 18: with the geotherm rule the ridge column (age 0) is unchanged within 0.05 km:
    # theta = 1 below the surface at age 0, so the top is the minimum top (7 km below the
    # seafloor), and the column equals the isotherm rule's beneath the same water load (none,
    # or the cooling model's ridge depth)
    for cooling in MODELS:
        load = float(age_load(0.0, cooling)) if loaded else 0.0
        top, out = geotherm_h(np.array([1350.0]), water, np.array([0.0]), cooling, load=load)
        ridge = melt_column(1350.0, 0.0, water, method="table", water_load_km=load)
        assert top[0] == pytest.approx(7.0, abs=1e-9)
        assert abs(float(out["melt_thickness_km"][0]) - float(ridge.melt_thickness_km)) <= 0.05


@pytest.mark.parametrize("water", [0.0, 0.01])
@pytest.mark.parametrize("loaded", [False, True])
def test_the_cooling_models_agree_beneath_old_seafloor(water, loaded):
    # issue 18: ambient Tp 1350 C, dry and 0.01 wt%: the three cooling models give ambient melt
    # within 0.1 km of each other beneath seafloor older than 60 Ma (without a water load, and
    # each beneath its own seafloor depth, as a run without bathymetry)
    ages = np.array([60.0, 61.0, 80.0, 100.0, 150.0, 200.0, 300.0])
    h = np.array(
        [
            geotherm_h(
                np.full(ages.size, 1350.0),
                water,
                ages,
                c,
                load=age_load(ages, c) if loaded else 0.0,
            )[1]["melt_thickness_km"]
            for c in MODELS
        ]
    )
    assert np.all(h.max(axis=0) - h.min(axis=0) <= 0.1), h


@pytest.mark.parametrize(
    ("tp", "water", "age", "cooling", "load"),
    [
        (1350.0, 0.0, 1.0, "half-space", 0.0),
        (1350.0, 0.0, 5.0, "half-space", 0.0),
        (1350.0, 0.0, 10.0, "half-space", 0.0),
        (1350.0, 0.01, 10.0, "gdh1", 0.0),
        (1350.0, 0.0, 5.0, "ps77", 0.0),
        (1450.0, 0.0, 30.0, "half-space", 0.0),
        (1550.0, 0.0, 60.0, "half-space", 0.0),
        (1550.0, 0.0, 60.0, "gdh1", 0.0),
        (1500.0, 0.02, 40.0, "ps77", 0.0),
        (1350.0, 0.0, 5.0, "half-space", 0.93),
        (1350.0, 0.01, 10.0, "gdh1", 1.71),
        (1550.0, 0.0, 60.0, "half-space", 1.49),
        (1550.0, 0.0, 60.0, "gdh1", 3.6),
        (1500.0, 0.02, 40.0, "ps77", 0.4),
    ],
)
def test_the_table_top_is_the_definition(tp, water, age, cooling, load):
    # the definition evaluated from one column's profile (module docstring); tolerances: the
    # profile's node spacing (0.005 GPa = 0.15 km) and the table's on H (0.5 % or 0.02 km)
    ref_top, ref_h = reference(tp, water, age, cooling, load=load)
    top, out = geotherm_h(np.array([tp]), water, np.array([age]), cooling, load=load)
    h = float(out["melt_thickness_km"][0])
    if math.isinf(ref_top):
        assert math.isinf(top[0])
        assert h == 0.0
        return
    assert abs(top[0] - ref_top) <= 0.2, (top[0], ref_top)
    assert abs(h - ref_h) <= max(0.005 * ref_h, 0.02) + 0.01, (h, ref_h)


@pytest.mark.parametrize("loaded", [False, True])
def test_the_table_tops_equal_direct_integration(loaded):
    # direct_top_km (each column integrated at 0.002 GPa, the geotherm exact) against the
    # table's search (the column's deficit interpolated as H is): the tops within 0.1 km, or
    # within the distance the direct top moves over +-0.5 Ma of age (near a fold, where the
    # geotherm barely touches the column, the top moves fast with age); the melt thickness
    # within the table's tolerance (0.5 % or 0.02 km, tests/test_table.py); without a water
    # load and beneath loads of 0-3.7 km (12 km of water) cell by cell. Within 1 km above a
    # plate's base, where a wet column's deficit is a few K and its interpolation in water moves
    # the crossing, 0.2 km (as test_the_ambient_columns_tops_from_their_table_equal_direct_...)
    rng = np.random.default_rng(3)
    n = 40
    tp = rng.uniform(1300.0, 1600.0, n)
    water = rng.uniform(0.0, 0.05, n)
    age = rng.uniform(0.0, 120.0, n)
    load = rng.uniform(0.0, 3.7, n) if loaded else 0.0
    for cooling in MODELS:
        cm = get_cooling_model(cooling)
        kw = {"water_load_km": load}
        top = geotherm_tops(get_table(KATZ), cm, tp, water, age, ambient_c=1350.0, **kw)[0]
        ref = direct_top_km(KATZ, cm, tp, water, age, step_gpa=0.002, **kw)
        npt.assert_array_equal(np.isinf(top), np.isinf(ref))
        fin = np.isfinite(ref)
        younger = direct_top_km(KATZ, cm, tp, water, np.maximum(age - 0.5, 0.0), **kw)
        older = direct_top_km(KATZ, cm, tp, water, age + 0.5, **kw)
        with np.errstate(invalid="ignore"):
            moves = np.nan_to_num(np.abs(older - younger), nan=np.inf, posinf=np.inf)
        base = cm.plate_thickness_km or np.inf
        with np.errstate(invalid="ignore"):
            tol = np.maximum(np.where(ref > base - 1.0, 0.2, 0.1), moves)
        assert np.all(np.abs(top[fin] - ref[fin]) <= tol[fin])
        h_table = melt_column(tp, top, water, method="table", **kw).melt_thickness_km
        h_direct = melt_column(tp, ref, water, method="table", **kw).melt_thickness_km
        ok = np.isfinite(h_direct)
        assert np.all(np.abs(h_table - h_direct)[ok] <= np.maximum(0.005 * h_direct, 0.02)[ok])


@pytest.mark.long  # about 2 minutes (the numpy search of 54,000 cells): pytest -m long
def test_the_compiled_search_equals_the_numpy_search():
    assert AVAILABLE  # numba is required (pyproject): the compiled search must be there
    rng = np.random.default_rng(5)
    n = 3000
    tp = rng.uniform(1150.0, 1900.0, n)
    age = rng.uniform(0.0, 200.0, n)
    age[::50] = np.nan
    loads = rng.uniform(0.0, 4.2, n)  # beyond 4 km: left to direct integration in both
    for water, load in itertools.product((0.0, 0.013, rng.uniform(0.0, 0.1, n)), (0.0, loads)):
        for cooling in MODELS:
            args = (get_table(KATZ), get_cooling_model(cooling), tp, water, age)
            kw = {"ambient_c": 1350.0, "water_load_km": load}
            a = geotherm_tops(*args, compiled=True, **kw)
            b = geotherm_tops(*args, compiled=False, **kw)
            # the same steps; the roots converge to 1e-5 GPa (3e-4 km) in each
            for x, y in zip(a, b, strict=True):
                npt.assert_allclose(x, y, rtol=0.0, atol=1e-3)


@pytest.mark.parametrize("cooling", MODELS)
@pytest.mark.parametrize("water", [0.0, 0.01])
@pytest.mark.parametrize("load", ["none", "age", "between nodes"])
def test_the_excess_is_the_least_anomaly_that_melts(cooling, water, load):
    # definition: the least anomaly above ambient for which the column melts (H > 0) at this
    # age and water; a little below it the column does not melt, a little above it it does:
    # 0.3 K for the table's interpolation of that Tp, 1.5 K for the plates, where beneath old
    # seafloor it is the Tp whose onset reaches the plate's base (the interpolation across the
    # base, see test_the_table_tops_equal_direct_integration); without a water load, beneath
    # the cooling model's seafloor depth, and beneath loads between the load nodes (held on
    # nodes LOAD_STEP_KM apart, linear between them)
    ages = np.array([0.0, 2.0, 8.0, 30.0, 90.0])
    loads = {
        "none": 0.0,
        "age": age_load(ages, cooling),
        "between nodes": LOAD_STEP_KM * np.array([0.5, 2.3, 4.7, 6.1, 9.5]),
    }[load]
    table, cm = get_table(KATZ), get_cooling_model(cooling)
    excess = geotherm_tops(table, cm, 1350.0, water, ages, ambient_c=1350.0, water_load_km=loads)[2]
    margin = 0.3 if cooling == "half-space" else 1.5
    valid = 1350.0 + excess - margin > float(KATZ.solidus_c(0.0, 0.0))  # else invalid input
    assert valid[1:].all()
    for sign, melts in ((-1.0, False), (1.0, True)):
        tp = 1350.0 + excess + sign * margin
        h = geotherm_h(tp, water, ages, cooling, load=loads)[1]["melt_thickness_km"]
        assert np.all((h[valid] > 0) == melts), (sign, excess, h)


@pytest.mark.parametrize("load", [0.0, 1.13])
def test_direct_excess_agrees_with_the_table(load):
    # the path for cells outside the table (bisection with direct integration) and the table's
    # least melting Tp: within 1.5 K (the direct path integrates at 0.04 GPa), without a water
    # load and beneath one between the load nodes
    cm = get_cooling_model("half-space")
    ages = np.array([0.0, 3.0, 20.0])
    kw = {"ambient_c": 1350.0, "water_load_km": load}
    table = geotherm_tops(get_table(KATZ), cm, 1350.0, 0.0, ages, **kw)[2]
    direct = direct_excess_k(KATZ, cm, 0.0, ages, **kw)
    npt.assert_allclose(direct, table, atol=1.5)


def test_hotter_columns_rise_higher_and_the_fold():
    # hotter columns melt more, cool more by latent heat and so rise higher (the lead's
    # argument, docs/physics.md): the top is shallower for every hotter Tp at one age. The rule
    # is discontinuous where the two curves first touch (a fold): the ambient half-space column
    # melts about 0.2 km at 11 Ma and nothing at 12 Ma (docs/physics.md quantifies it)
    tp = np.linspace(1330.0, 1700.0, 75)
    top = geotherm_h(tp, 0.0, np.full(tp.size, 30.0), "half-space")[0]
    fin = np.isfinite(top)
    assert fin.sum() > 40
    assert np.all(np.diff(top[fin]) < 0)
    assert np.all(fin[np.argmax(fin) :])  # once a Tp melts, every hotter one does
    h = geotherm_h(np.full(2, 1350.0), 0.0, np.array([11.0, 12.0]), "half-space")[1]
    assert h["melt_thickness_km"][0] > 0.15
    assert h["melt_thickness_km"][1] == 0.0


def test_critical_age_inverts_the_cooling_models():
    # s* = sqrt(t*/Ma) solves theta(z, t*) = theta*: the half-space in closed form
    # (erf, Turcotte & Schubert 2002, from memory) and the plates by interpolation (within
    # 1e-4 of theta, the interpolation bound of geotherm_arrays)
    z = np.array([10.0, 40.0, 80.0, 94.0, 60.0])
    theta_star = np.array([0.6, 0.8, 0.95, 0.999, 0.99])
    for cooling in MODELS:
        cm = get_cooling_model(cooling)
        s = critical_sqrt_age(cm, z, theta_star)
        fin = s < 1e3
        t = s[fin] ** 2
        theta = temperature_c(z[fin], t, model=cm) / cm.mantle_temperature_c
        tol = 1e-9 if cooling == "half-space" else 1e-4
        npt.assert_allclose(theta, theta_star[fin], atol=tol)
    hs = get_cooling_model("half-space")
    kappa_ma = math.sqrt(hs.diffusivity_m2_s * SECONDS_PER_MA) * 1e-3
    assert critical_sqrt_age(hs, 40.0, 0.8) == pytest.approx(
        40.0 / (2 * kappa_ma * special.erfinv(0.8))
    )
    # beneath a plate's base theta = 1: every age qualifies (the cap)
    assert critical_sqrt_age(get_cooling_model("gdh1"), 96.0, 0.99) >= 1e3


@pytest.mark.parametrize("water_load", ["none", "bathymetry"])
def test_a_lid_grid_stays_the_users_cap_and_the_isotherm_rule_is_unchanged(water_load):
    # definition: where a lid grid has a value the top is the deeper of it and the minimum top,
    # whatever the rule; with top_of_melting = "isotherm" the chunk equals the isotherm lid
    # (lidmelt.physics.lid_lookup) passed as a lid, bit for bit (without a water load and
    # beneath the water of a bathymetry, the lid measured below the seafloor)
    kw = {"model": KATZ, "table": get_table(KATZ), "cooling": get_cooling_model("gdh1"),
          "lid_isotherm_c": 1100.0, "ambient_c": 1350.0, "min_top_km": 7.0,
          "method": "table", "sources": {}, "water_load": water_load}  # fmt: skip
    geo = KernelSettings(**kw, top_of_melting="geotherm")
    iso = KernelSettings(**kw, top_of_melting="isotherm")
    age = np.array([[0.0, 5.0, 30.0], [60.0, 100.0, 150.0]])
    lid = np.array([[np.nan, 50.0, np.nan], [3.0, np.nan, 90.0]])
    anomaly = np.array([[0.0, 100.0, 200.0], [0.0, 150.0, 250.0]])
    depth = np.array([[2600.0, 3100.0, 4200.0], [5000.0, 5600.0, 6100.0]])
    row = list(OUTPUTS).index("melting_top_km")
    out = evaluate_chunk(ChunkInputs(age, lid, anomaly, 0.0, 0.0, depth), settings=geo)
    given = np.isfinite(lid)
    npt.assert_allclose(out[row][given], np.maximum(lid[given], 7.0))
    from lidmelt.physics._lidlookup import lid_lookup

    iso_lid = np.where(given, lid, lid_lookup(1100.0, model=kw["cooling"]).depth_km(age))
    a = evaluate_chunk(ChunkInputs(age, lid, anomaly, 0.0, 0.0, depth), settings=iso)
    nan_age = np.full(age.shape, np.nan)
    b = evaluate_chunk(ChunkInputs(nan_age, iso_lid, anomaly, 0.0, 0.0, depth), settings=iso)
    npt.assert_array_equal(a, b)


@pytest.mark.parametrize("load", [0.0, np.array([0.6, 1.7, 2.9])])
def test_geotherm_tops_direct_matches_the_table_path(load):
    cm = get_cooling_model("ps77")
    tp, age = np.array([1350.0, 1500.0, 1350.0]), np.array([4.0, 50.0, 80.0])
    kw = {"ambient_c": 1350.0, "water_load_km": load}
    a = geotherm_tops(get_table(KATZ), cm, tp, 0.0, age, **kw)
    b = geotherm_tops_direct(KATZ, cm, tp, 0.0, age, **kw)
    npt.assert_allclose(a[0], b[0], atol=0.3)  # the direct path steps 0.04 GPa (1.2 km)
    npt.assert_allclose(a[2], b[2], atol=1.5)


def test_the_default_rule_is_one_value():
    assert LithosphereOptions().top_of_melting == DEFAULT_TOP_OF_MELTING


@pytest.mark.parametrize("cooling", MODELS)
@pytest.mark.parametrize("loaded", [False, True])
def test_the_ambient_columns_tops_from_their_table_equal_direct_integration(cooling, loaded):
    # with one water content the ambient column's top is read from a table against sqrt(age)
    # and the water load (lidmelt.physics._geotherm_search.ambient_tops; loads of the cooling
    # model's seafloor depth, between the table's load nodes): against direct integration
    # (0.002 GPa)
    # within 0.1 km at ages away from the folds (docs/physics.md: 11.2-17 Ma), 0.2 km in the
    # wet GDH1 sliver just above the plate's base (the column's deficit there is a few K, and
    # its interpolation in water, as the table's H, moves the crossing; the melt there is below
    # 0.003 km), and the same top for the ambient column of a cell with an anomaly (its ambient
    # top) and of a cell at ambient Tp (its own top)
    cm = get_cooling_model(cooling)
    ages = np.array([0.0, 0.3, 1.7, 4.0, 8.5, 9.9, 25.0, 40.0, 120.0])
    kw = {"water_load_km": age_load(ages, cooling) if loaded else 0.0}
    for water in (0.0, 0.01):
        table = get_table(KATZ)
        top, _, _ = geotherm_tops(table, cm, 1350.0, water, ages, ambient_c=1350.0, **kw)
        _, amb, excess = geotherm_tops(table, cm, 1400.0, water, ages, ambient_c=1350.0, **kw)
        melts = excess < 0
        npt.assert_array_equal(amb[melts], top[melts])
        ref = direct_top_km(KATZ, cm, 1350.0, water, ages, step_gpa=0.002, **kw)
        npt.assert_array_equal(np.isinf(top), np.isinf(ref))
        fin = np.isfinite(ref)
        base = cm.plate_thickness_km or np.inf
        tol = np.where(ref > base - 1.0, 0.2, 0.1)
        with np.errstate(invalid="ignore"):  # inf - inf where neither melts
            assert np.all(np.abs(top - ref)[fin] <= tol[fin]), (top, ref)
