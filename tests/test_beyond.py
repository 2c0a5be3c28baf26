"""No holes where the mantle is hottest: the phase boundaries continued beyond 7 GPa.

Check values: lidmelt definitions (docs/physics.md, sections "Definitions lidmelt fixes" and
"Beyond the calibrated pressure"): valid inputs from the table's lowest Tp to 1900 C, water 0 to
0.1 wt%, lid 0 to 250 km give finite outputs; melt thickness is monotonic in Tp and never jumps by
more than 0.5 km per 1 K step.
"""

import numpy as np
import numpy.testing as npt
import pytest

from lidmelt.physics import FLAG_BEYOND_CALIBRATION, get_model, get_table, melt_column
from lidmelt.physics.table import TableLayout

WATERS = (0.0, 0.01, 0.05, 0.1)
LIDS = (0.0, 100.0, 250.0)


def scan(method="table"):
    """Melt thickness and flag on a 1 K Tp grid, per (water, lid): arrays (water, lid, tp)."""
    tp = np.arange(TableLayout().tp_min_c, 1900.0 + 0.5, 1.0)
    h = np.empty((len(WATERS), len(LIDS), tp.size))
    flag = np.empty(h.shape, np.uint8)
    for i, w in enumerate(WATERS):
        for j, lid in enumerate(LIDS):
            res = melt_column(tp, lid, w, method=method)
            h[i, j], flag[i, j] = res.melt_thickness_km, res.flag
    return tp, h, flag


def test_scan_to_1900_c_is_finite_monotonic_and_smooth():
    _tp, h, flag = scan()
    assert np.all(np.isfinite(h))
    step = np.diff(h, axis=-1)
    assert np.all(step >= -1e-4), step.min()  # monotonic (float32 table values)
    largest = step.max()
    assert largest <= 0.5, largest  # km per 1 K step
    # the hot end lies beyond calibration and is flagged, computed anyway
    assert np.all(flag[..., -1] & FLAG_BEYOND_CALIBRATION)


def test_continuation_is_continuous_monotonic_and_keeps_the_interval():
    # lidmelt definition (docs/physics.md, "Beyond the calibrated pressure"): every boundary
    # shifted by T_sol'(P_c) (P - P_c); the Katz slope A2 + 2 A3 P_c = 132.9 - 71.4 = 61.5 K/GPa
    # (Katz et al. 2003 Table 2 constants [derived])
    for name in ("katz2003", "mckenzie-bickle1988"):
        m = get_model(name)
        pc = m.calibrated_max_pressure_gpa
        p = np.linspace(0.0, 30.0, 3001)
        sol, liq = m.solidus_c(p), m.liquidus_c(p)
        assert np.all(np.diff(sol) > 0), name
        assert np.all(np.diff(liq) > 0), name
        width = liq - sol
        npt.assert_allclose(width[p >= pc], width[p == pc][0], atol=1e-6, err_msg=name)
        eps = 1e-7
        npt.assert_allclose(m.solidus_c(pc + eps), m.solidus_c(pc - eps), atol=1e-4)
        slope_in = (m.solidus_c(pc) - m.solidus_c(pc - 1e-4)) / 1e-4
        npt.assert_allclose(slope_in, m.solidus_slope_c_gpa(), rtol=1e-3, err_msg=name)
    npt.assert_allclose(get_model("katz2003").solidus_slope_c_gpa(), 61.5)


def test_below_the_calibrated_pressure_nothing_changes():
    # identity: T(P, F) for P <= P_c is the published law itself (Katz et al. 2003 eq. 4 with
    # Table 2: T_sol = 1085.7 + 132.9 P - 5.1 P^2)
    m = get_model("katz2003")
    p = np.linspace(0.0, 7.0, 71)
    npt.assert_array_equal(m.solidus_c(p), 1085.7 + 132.9 * p + -5.1 * p * p)


@pytest.mark.slow
def test_table_equals_direct_in_the_continued_range():
    # the table's tolerance (tests/test_table.py: 0.5 % or 0.02 km on H, 0.2 km on onset depth)
    # where the onsets lie on the continuation (Tp 1650 to 1900 C)
    rng = np.random.default_rng(11)
    n = 60
    tp = rng.uniform(1650.0, 1900.0, n)
    lid = rng.uniform(0.0, 250.0, n)
    for water in (0.0, 0.05, rng.uniform(0.0, 0.1, n)):
        table = melt_column(tp, lid, water, method="table", table=get_table())
        direct = melt_column(tp, lid, water, method="direct")
        npt.assert_array_equal(table.flag, direct.flag)
        h_d, h_t = direct.melt_thickness_km, table.melt_thickness_km
        assert np.all(np.isfinite(h_d))
        assert np.all(np.abs(h_t - h_d) <= np.maximum(0.005 * np.abs(h_d), 0.02))
        npt.assert_allclose(table.onset_depth_km, direct.onset_depth_km, atol=0.2)
