"""The compiled melting kernel and its numpy fallback, both against the direct integration.

Check values: the direct integration (tests/test_column.py proves it against published values
and an independent solve_ivp solution) and the table tolerances of tests/test_table.py (0.5 %
or 0.02 km on melt thickness, 0.2 km on onset depth, 2e-3 on F). The goal that no valid,
in-range cell leaves the kernel for slow integration is the one of the kernel's issue.
"""

import numba  # noqa: F401 - required (pyproject): a missing numba fails here, never skips
import numpy as np
import numpy.testing as npt
import pytest

from lidmelt._errors import ModelError
from lidmelt.physics import _kernel as kernel
from lidmelt.physics import evaluate_cells, excess_to_melt_k, melt_column
from lidmelt.physics._cells import CellOptions
from lidmelt.physics._kernel_records import Cells
from test_table import assert_within_tolerance


def sample(n, seed, water):
    rng = np.random.default_rng(seed)
    tp = rng.uniform(1250.0, 1650.0, n)
    lid = rng.uniform(0.0, 200.0, n)
    w = rng.uniform(0.0, 0.1, n) if water == "varying" else water
    return tp, lid, w


@pytest.mark.parametrize("compiled", [True, False])
@pytest.mark.parametrize("water", [0.0, 0.01, "varying"])
def test_both_paths_equal_direct_within_the_table_tolerance(compiled, water):
    tp, lid, w = sample(160, 7, water)
    tp[:3] = [np.nan, 1000.0, 1400.0]  # invalid Tp, Tp below the surface solidus, and a
    lid[2] = -5.0  # negative lid: flagged alike on every path
    direct = melt_column(tp, lid, w, method="direct")
    table = melt_column(tp, lid, w, compiled=compiled)
    assert_within_tolerance(direct, table)
    assert np.sum(direct.melt_thickness_km > 0) > 40  # the sample really melts


@pytest.mark.parametrize("water", [0.0, 0.01, "varying"])
def test_every_output_of_the_kernel_equals_the_numpy_path(water):
    tp, lid, w = sample(20000, 3, water)
    tp[::97] = np.nan
    lid[5::89] = np.nan
    cells = Cells(tp, lid, w, upwelling_mm_yr=30.0)
    fast, slow = (
        evaluate_cells(
            cells, CellOptions(ambient_potential_temperature_c=1350.0, compiled=compiled),
            dtype=np.float64,
        ).as_dict()
        for compiled in (True, False)
    )  # fmt: skip
    assert set(fast) == set(slow)
    npt.assert_array_equal(fast["flag"], slow["flag"])
    for name in fast:
        npt.assert_array_equal(np.isnan(fast[name]), np.isnan(slow[name]), err_msg=name)
    # the excess to melt is the same curve at the top of melting (exact: excess_to_melt_k)
    exact = excess_to_melt_k(lid, w, ambient_potential_temperature_c=1350.0)
    npt.assert_allclose(fast["excess_to_melt_k"], exact, atol=5e-3, equal_nan=True)
    ok = np.isfinite(slow["melt_thickness_km"])
    for name in ("melt_thickness_km", "anomaly_melt_thickness_km", "crustal_thickness_km"):
        a, b = fast[name][ok], slow[name][ok]
        assert np.all(np.abs(a - b) <= np.maximum(0.01 * np.abs(b), 0.04)), name
    on = np.isfinite(slow["onset_depth_km"])
    npt.assert_allclose(fast["onset_depth_km"][on], slow["onset_depth_km"][on], atol=0.2)
    # the regime differs only where the column just touches the top (H within the tolerance)
    differ = fast["melting_regime"][ok] != slow["melting_regime"][ok]
    assert np.all(
        np.maximum(fast["melt_thickness_km"][ok], slow["melt_thickness_km"][ok])[differ] <= 0.04
    )


def tangency_band_c(water, model="katz2003"):
    """(lo, hi): the Tp whose onsets lie beyond the calibrated pressure below the floor, from
    Tp*(P) = (T_sol(P) + 273.15) exp(-alpha_s P / (rho_s c_p)) - 273.15 (the onset condition,
    docs/physics.md) between P_c and the floor, widened by three table nodes (6 K: a rough
    interval's neighbours to two nodes are rough too, MeltTable._rough_intervals)."""
    from lidmelt.physics import get_model

    m = get_model(model)
    p = np.linspace(m.calibrated_max_pressure_gpa, m.max_onset_pressure_gpa, 2001)
    curve = (m.solidus_c(p, water) + 273.15) * np.exp(-m.adiabat_coefficient_per_gpa * p)
    return curve[0] - 273.15 - 6.0, curve.max() - 273.15 + 6.0


def test_no_valid_in_range_cell_leaves_the_kernel():
    # the whole table range the runs use: Tp 1200-1700 C, lid 0-250 km, water 0-0.1 wt%, dry
    # and at one water content. Only columns whose onset lies beyond the calibrated pressure
    # leave (lidmelt choice, physics/kernel_arrays.py::_rough): at a water content on a table
    # node those near the tangency of isentrope and continued solidus, between water nodes all
    # of them; away from them none does. Where water varies cell by cell none leaves (the
    # table's finer water nodes beyond the calibrated pressure).
    rng = np.random.default_rng(11)
    n = 200_000
    tp, lid = rng.uniform(1200.0, 1700.0, n), rng.uniform(0.0, 250.0, n)
    lo = tangency_band_c(0.1)[0]  # below it every onset is calibrated, at any water
    for w in (0.0, 0.01, 0.1, rng.uniform(0.0, 0.1, n)):
        on_node = np.ndim(w) == 0 and w in (0.0, 0.1)  # the table's first and last water nodes
        band = tangency_band_c(w) if on_node else (lo, np.inf)
        outside = (tp < band[0]) | (tp > band[1])
        options = CellOptions(ambient_potential_temperature_c=1350.0)
        clock = evaluate_cells(Cells(tp, lid, w), options, dtype=np.float32).timings
        assert clock.cells == n
        if np.ndim(w):  # water varying: the finer water nodes beyond P_c, none leaves
            assert clock.numpy_cells == 0
            continue
        assert 0 < clock.numpy_cells <= np.count_nonzero(~outside)
        w_out = w if np.ndim(w) == 0 else w[outside]
        clock = evaluate_cells(
            Cells(tp[outside], lid[outside], w_out), options, dtype=np.float32
        ).timings
        assert clock.numpy_cells == 0


def test_cells_outside_the_table_take_the_numpy_path():
    # Tp 1950 C lies beyond the table's Tp nodes (to 1900 C) and a 450 km top below its
    # deepest top node (TableLayout): those cells go to the numpy path, the rest stay
    tp = np.array([1950.0, 1400.0, 1900.0, 1450.0])
    lid = np.array([30.0, 30.0, 450.0, 60.0])
    options = CellOptions(ambient_potential_temperature_c=1350.0)
    res = evaluate_cells(Cells(tp, lid, 0.0), options, dtype=np.float64)
    fast, clock = res.as_dict(), res.timings
    slow = evaluate_cells(
        Cells(tp, lid, 0.0), CellOptions(ambient_potential_temperature_c=1350.0, compiled=False),
        dtype=np.float64,
    ).as_dict()  # fmt: skip
    assert clock.numpy_cells == 2
    npt.assert_array_equal(fast["flag"], slow["flag"])
    npt.assert_allclose(fast["melt_thickness_km"], slow["melt_thickness_km"], rtol=1e-5)


def test_without_numba_the_numpy_path_runs_and_compiled_true_says_why(monkeypatch):
    monkeypatch.setattr(kernel, "AVAILABLE", False)
    options = CellOptions(ambient_potential_temperature_c=1350.0)
    out = evaluate_cells(Cells([1450.0], [40.0], 0.01), options, dtype=np.float64).outputs
    assert out["excess_to_melt_k"].dtype == np.float64  # the dtype asked
    assert out["melt_thickness_km"][0] > 0
    with pytest.raises(ModelError, match=r"numba cannot be imported.*compiled=False"):
        evaluate_cells(
            Cells([1450.0], [40.0]),
            CellOptions(ambient_potential_temperature_c=1350.0, compiled=True), dtype=np.float64,
        )  # fmt: skip


def test_rows_are_the_registry_order():
    """The engine writes the kernel's rows straight into its stacked array, in registry order."""
    from lidmelt._variables import OUTPUTS
    from lidmelt.physics._kernel import ROWS as OUTPUT_ROWS

    assert tuple(OUTPUTS) == OUTPUT_ROWS


@pytest.mark.parametrize("compiled", [True, False])
def test_out_and_nodata_give_the_same_values_on_both_paths(compiled):
    """``out=`` receives every output in OUTPUT_ROWS order and ``nodata=`` blanks cells with a
    non-finite input; check values: the same call without them (NaN and the flag 255 put in by
    hand where an input is NaN)."""
    from lidmelt.physics._kernel import ROWS as OUTPUT_ROWS

    rng = np.random.default_rng(3)
    tp = rng.uniform(1300.0, 1600.0, 500)
    lid = rng.uniform(0.0, 150.0, 500)
    tp[::7] = np.nan
    lid[::11] = np.nan
    kw = {"ambient_potential_temperature_c": 1350.0, "compiled": compiled}
    plain = evaluate_cells(Cells(tp, lid, 0.01), CellOptions(**kw), dtype=np.float64).as_dict()
    out = np.full((len(OUTPUT_ROWS), tp.size), -1.0, np.float32)
    got = evaluate_cells(
        Cells(tp, lid, 0.01), CellOptions(**kw, nodata=255), dtype=np.float32, out=out
    ).as_dict()
    missing = ~(np.isfinite(tp) & np.isfinite(lid))
    npt.assert_array_equal(got["flag"], np.where(missing, 255, plain["flag"]))
    for k, name in enumerate(OUTPUT_ROWS):
        want = np.where(missing, np.nan, plain.get(name, np.full(tp.size, np.nan)))
        npt.assert_array_equal(out[k], want.astype(np.float32), err_msg=name)


@pytest.mark.parametrize("compiled", [True, False])
def test_no_anomaly_means_exactly_no_anomaly_melt(compiled):
    """Where Tp equals the ambient Tp the anomaly adds nothing: anomaly melt thickness exactly
    0 (check value: its definition H(ambient + 0) - H(ambient), docs/physics.md), also where the
    ambient mantle melts (young seafloor, thin lids) and with water."""
    lid = np.linspace(0.0, 120.0, 2000)
    for water in (0.0, 0.01):
        out = evaluate_cells(
            Cells(np.full(lid.size, 1350.0), lid, water),
            CellOptions(ambient_potential_temperature_c=1350.0, compiled=compiled),
            dtype=np.float64,
        ).outputs
        assert (out["melt_thickness_km"] > 0).any()  # the ambient mantle melts under thin lids
        npt.assert_array_equal(out["anomaly_melt_thickness_km"], 0.0)


@pytest.mark.parametrize("model", ["katz2003", "mckenzie-bickle1988"])
def test_water_varying_per_cell_on_hot_columns_stays_in_the_kernel_within_tolerance(model):
    # hot wet cells whose onsets lie beyond the calibrated pressure or at the upper mantle's
    # floor (Tp 1500-1900 C, water 0-0.05 wt% cell by cell, lid 0-250 km): the kernel reads the
    # table's finer water nodes there (MeltTable.deep_values) within the table tolerance of the
    # direct integration, and leaves none of them to the numpy path (dry, one water content: only
    # those near the jump of the onset to the floor, under a tenth). McKenzie & Bickle (1988) is
    # anhydrous: dry cells.
    rng = np.random.default_rng(5)
    n = 500
    tp, lid = rng.uniform(1500.0, 1900.0, n), rng.uniform(0.0, 250.0, n)
    w = rng.uniform(0.0, 0.05, n) if model == "katz2003" else 0.0
    res = evaluate_cells(
        Cells(tp, lid, w),
        CellOptions(ambient_potential_temperature_c=1350.0, model=model, compiled=True),
        dtype=np.float64,
    )
    fast, clock = res.as_dict(), res.timings
    direct = melt_column(tp, lid, w, model=model, method="direct")
    h_d, h_k = direct.melt_thickness_km, fast["melt_thickness_km"]
    assert np.all(np.isfinite(h_d))
    assert np.count_nonzero(direct.onset_pressure_gpa > 7.0) > 200
    assert np.all(np.abs(h_k - h_d) <= np.maximum(0.005 * np.abs(h_d), 0.02))
    npt.assert_array_equal(fast["flag"], direct.flag)
    npt.assert_allclose(fast["onset_depth_km"], direct.onset_depth_km, atol=0.2)
    # the share is a ratio of two readings each within 0.5 %: within 1 %
    npt.assert_allclose(fast["deep_melt_share"], direct.deep_melt_share, atol=1e-2)
    assert clock.numpy_cells == 0 if np.ndim(w) else clock.numpy_cells < n // 10


@pytest.mark.parametrize("compiled", [True, False])
def test_the_outputs_have_the_dtype_the_caller_asks(compiled):
    """The caller chooses the dtype on either path (lidmelt's API); an ``out`` of another dtype
    is refused. Check values: the float32 outputs are the float64 ones rounded to float32
    (the compiled kernel stores float32, so there they are equal)."""
    tp, lid = np.array([1450.0, 1350.0, np.nan]), np.array([40.0, 20.0, 30.0])
    options = CellOptions(ambient_potential_temperature_c=1350.0, compiled=compiled)
    wide = evaluate_cells(Cells(tp, lid, 0.01), options, dtype=np.float64).outputs
    narrow = evaluate_cells(Cells(tp, lid, 0.01), options, dtype=np.float32).outputs
    for name in wide:
        assert wide[name].dtype == np.float64, name
        assert narrow[name].dtype == np.float32, name
        npt.assert_array_equal(narrow[name], wide[name].astype(np.float32), err_msg=name)
    out = np.empty((13, 3), np.float32)
    with pytest.raises(ModelError, match="out has dtype float32"):
        evaluate_cells(Cells(tp, lid, 0.01), options, dtype=np.float64, out=out)
