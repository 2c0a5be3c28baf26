"""Every output of a cell from :func:`lidmelt.physics.evaluate_cells`.

Check values: lidmelt definitions (docs/physics.md, section "Definitions lidmelt fixes":
anomaly melt thickness, melting regime, melt production, crustal thickness) and McKenzie &
Bickle (1988) for the crust of a ridge (from memory, see below).
"""

import numpy as np
import numpy.testing as npt
import pytest

from lidmelt._variables import OUTPUTS
from lidmelt.physics import evaluate_cells, excess_to_melt_k, melt_column
from lidmelt.physics._cells import CellOptions
from lidmelt.physics._evaluate import EXTRACTION_MIN_MELT_FRACTION
from lidmelt.physics._kernel_records import Cells
from lidmelt.physics._regime import (
    LEAST_ANOMALY_MELT_KM,
    REGIME_AMBIENT_AND_ANOMALY,
    REGIME_AMBIENT_ONLY,
    REGIME_ANOMALY_ONLY,
    REGIME_NO_MELTING,
)


def cells(tp, lid, water=0.0, upwelling_mm_yr=None, **kw):
    kw.setdefault("ambient_potential_temperature_c", 1350.0)
    kw.setdefault("method", "direct")
    given = Cells(np.asarray(tp, float), np.asarray(lid, float), water, upwelling_mm_yr)
    return evaluate_cells(given, CellOptions(**kw), dtype=np.float64).as_dict()


def test_every_registered_output_is_computed():
    out = cells([1400.0], [60.0], upwelling_mm_yr=30.0)
    assert set(OUTPUTS) | {"flag"} == set(out)
    assert "melt_production_mm_yr" not in cells([1400.0], [60.0])  # no upwelling: not computed


def test_anomaly_melt_and_regime():
    # lidmelt definition: anomaly melt = H(Tp) - H(ambient), same lid and water, never negative;
    # regime (registry classes, lidmelt.physics._regime): 0 no melting, 1 ambient mantle only
    # (the anomaly adds less than the least anomaly melt), 2 ambient melts and the anomaly adds,
    # 3 the anomaly only (ambient mantle does not melt beneath this lid)
    tp = np.array([1350.0, 1450.0, 1450.0, 1600.0, 1300.0, 1350.0, 1350.1])
    lid = np.array([20.0, 20.0, 120.0, 120.0, 20.0, 150.0, 20.0])
    out = cells(tp, lid, 0.01)
    h = melt_column(tp, lid, 0.01, method="direct").melt_thickness_km
    h_amb = melt_column(1350.0, lid, 0.01, method="direct").melt_thickness_km
    npt.assert_allclose(out["anomaly_melt_thickness_km"], np.maximum(h - h_amb, 0.0), atol=1e-9)
    assert out["anomaly_melt_thickness_km"][0] == 0.0  # no anomaly: no added melt
    assert out["anomaly_melt_thickness_km"][4] == 0.0  # a cold anomaly adds nothing (never < 0)
    # 0.1 K adds melt, but less than the least anomaly melt (the registry's negligible_below)
    assert 0.0 < out["anomaly_melt_thickness_km"][6] < LEAST_ANOMALY_MELT_KM
    ambient_melts = excess_to_melt_k(lid, 0.01) < 0
    assert list(ambient_melts) == [True, True, False, False, True, False, True]
    npt.assert_array_equal(out["melting_regime"], [1, 2, 3, 3, 1, 0, 1])


def test_regime_classes_are_the_registry_classes():
    # one place for the classes: the registry (lidmelt._variables), read by the physics
    classes = {c.key: c.value for c in OUTPUTS["melting_regime"].classes}
    assert classes == {
        "no_melting": REGIME_NO_MELTING,
        "ambient_only": REGIME_AMBIENT_ONLY,
        "ambient_and_anomaly": REGIME_AMBIENT_AND_ANOMALY,
        "anomaly_only": REGIME_ANOMALY_ONLY,
    }
    assert sorted(classes.values()) == [0, 1, 2, 3]


def test_a_column_below_the_extraction_threshold_does_not_count_as_melting():
    # lidmelt definition: a column whose melt fraction at the top of melting is below
    # EXTRACTION_MIN_MELT_FRACTION (0.5 %, sources in lidmelt.physics._evaluate) is "not melting"
    # for the regime; its raw melt thickness and fraction stay in the outputs. Lids just above
    # the onset of Tp 1350 C (dry, 82.2 km; docs/physics.md) leave a little melt at the top.
    lid = np.array([81.0, 79.0, 78.0, 70.0])
    out = cells(np.full(4, 1350.0), lid)
    f, h = out["max_melt_fraction"], out["melt_thickness_km"]
    assert np.all(h > 0)
    small = f < EXTRACTION_MIN_MELT_FRACTION
    assert small.any()
    assert not small.all()
    npt.assert_array_equal(out["melting_regime"][small], REGIME_NO_MELTING)
    npt.assert_array_equal(out["melting_regime"][~small], REGIME_AMBIENT_ONLY)


def test_onset_is_nodata_where_nothing_melts_and_the_crossing_stays():
    # lidmelt definition (issue: onset depth is defined only where the column melts): where
    # H = 0 beneath a deep lid the onset depth and pressure are NaN; the solidus crossing depth
    # is the depth where the isentrope meets the solidus whatever the lid (82.2 km for Tp 1350 C
    # dry, docs/physics.md "Isentropic decompression melting"); excess to melt stays defined
    for method in ("direct", "table"):
        out = cells([1350.0, 1350.0], [20.0, 133.0], method=method)
        assert out["melt_thickness_km"][1] == 0.0
        assert np.isnan(out["onset_depth_km"][1])
        assert np.isnan(out["onset_pressure_gpa"][1])
        assert np.isnan(out["mean_melt_pressure_gpa"][1])
        npt.assert_allclose(out["solidus_crossing_depth_km"], 82.2, atol=0.05)
        npt.assert_allclose(out["onset_depth_km"][0], 82.2, atol=0.05)
        assert np.all(np.isfinite(out["excess_to_melt_k"]))


@pytest.mark.parametrize("method", ["direct", "table"])  # numpy, and compiled where it imports
def test_crust_and_melt_production_follow_their_definitions(method):
    # each path on its own against the definitions: comparing the paths with each other cannot
    # catch a bug both share (DEVELOPERS.md, "Testing")
    out = cells(
        [1450.0, 1300.0], [30.0, 100.0], upwelling_mm_yr=np.array([50.0, 50.0]), method=method
    )
    # lidmelt definition: crust = H rho_s / rho_crust = H x 3300 / 2900 by default
    npt.assert_allclose(out["crustal_thickness_km"], out["melt_thickness_km"] * 3300.0 / 2900.0)
    # lidmelt definition: production = W x F(top); 0 where nothing melts
    npt.assert_allclose(out["melt_production_mm_yr"], 50.0 * out["max_melt_fraction"])
    assert out["melt_production_mm_yr"][1] == 0.0
    dense = cells([1450.0], [30.0], crust_density_kg_m3=2800.0, method=method)
    npt.assert_allclose(dense["crustal_thickness_km"], out["melt_thickness_km"][0] * 3300 / 2800)


def test_mckenzie_bickle_ridge_crust_at_1280_c():
    # McKenzie & Bickle (1988): melting to the surface at Tp 1280 C gives about 7 km of crust
    # (their paper; from memory, one significant figure, hence 0.5 km). lidmelt gives 6.95 km
    # (docs/physics.md, "Melting models").
    out = cells(
        [1280.0],
        [0.0],
        model="mckenzie-bickle1988",
        min_top_km=0.0,
        ambient_potential_temperature_c=1280.0,
    )
    assert float(out["crustal_thickness_km"][0]) == pytest.approx(7.0, abs=0.5)
    assert out["melting_regime"][0] == REGIME_AMBIENT_ONLY  # a ridge: ambient mantle melts


def test_table_and_direct_agree_on_the_new_outputs():
    # the table's tolerance (tests/test_table.py): 0.5 % or 0.02 km on melt thickness
    tp = np.array([1350.0, 1420.0, 1500.0, 1650.0])
    lid = np.array([10.0, 60.0, 90.0, 140.0])
    a = cells(tp, lid, method="table")
    b = cells(tp, lid, method="direct")
    for name in ("anomaly_melt_thickness_km", "crustal_thickness_km"):
        tol = np.maximum(0.005 * np.abs(b[name]), 0.02) * 2  # a difference of two table values
        assert np.all(np.abs(a[name] - b[name]) <= tol), name
    npt.assert_array_equal(a["melting_regime"], b["melting_regime"])
