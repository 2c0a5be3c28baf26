"""Hot plumes: the phase boundaries beyond 7 GPa follow a published high-pressure solidus.

Check values:

* Herzberg, Raterron & Zhang (2000), G-cubed 1, 2000GC000089, abstract: the anhydrous solidus of
  peridotite KLB-1 is T = 1086 - 5.7 P + 390 ln P (deg C, GPa), +-68 deg C (2 sigma), from 2.7
  to 22.5 GPa. lidmelt joins it to each model at P_c = 7 GPa by shifting it by the model's own
  offset there (docs/physics.md, section "Beyond the calibrated pressure"): Katz et al. (2003)
  Table 2 gives T_sol(7) = 1085.7 + 132.9 * 7 - 5.1 * 49 = 1766.1 deg C against the fit's
  1805.0 (-38.9 K).
* With water, the onset lies on that curve lowered by the Katz et al. (2003) water depression
  K min(X_bulk / D, X_sat)^gamma at F = 0 (Table 2: K = 43, gamma = 0.75, D = 0.01; X_sat held at
  its 7 GPa value beyond it, lidmelt's choice).
* The floor: PREM's pressure at 400 km, 13.35 GPa (Dziewonski & Anderson 1981, Table II).
* lidmelt definitions (docs/physics.md): outputs finite or flagged (those the registry leaves
  undefined without melt, onset and mean melt pressure among them, finite where H > 0), melt
  thickness monotonic in Tp. The onsets checked are the solidus crossings of the scan's columns
  (``solidus_crossing_depth_km``: the onset whatever the lid).
"""

import numpy as np
import numpy.testing as npt
import pytest

from lidmelt._variables import OUTPUTS
from lidmelt.physics import get_model, melt_column
from lidmelt.physics._flags import (
    FLAG_BEYOND_CALIBRATION,
    FLAG_INVALID_INPUT,
    FLAG_NO_ONSET,
    FLAG_UPPER_MANTLE_FLOOR,
    FLAG_WATER_SATURATED,
)
from lidmelt.physics._table import TableLayout

WATERS = (0.0, 0.01, 0.05)
LIDS = (0.0, 100.0, 250.0)
MODELS = ("katz2003", "mckenzie-bickle1988")
BAND_K = 68.0  # Herzberg et al. (2000): 2 sigma of their fit


def herzberg_2000_c(p):
    """The published fit itself (abstract), written out here, not taken from lidmelt."""
    return 1086.0 - 5.7 * p + 390.0 * np.log(p)


def reference_onset_c(model, p, water):
    """The shifted fit lowered by the water depression at the onset (see the module doc)."""
    pc = model.calibrated_max_pressure_gpa
    dry_pc = float(model.solidus_c(pc))  # the model's own published law at P_c
    ref = dry_pc + herzberg_2000_c(p) - herzberg_2000_c(pc)
    if water > 0:
        x_sat = 12.0 * pc**0.6 + 1.0 * pc  # Katz et al. (2003) Table 2, at P_c
        ref = ref - 43.0 * min(water / 0.01, x_sat) ** 0.75
    return ref


def scan(model_name, *, tp_step=1.0):
    """Every output on a Tp grid from the table's lowest Tp to 1900 C, per (water, lid)."""
    tp = np.arange(TableLayout().tp_min_c, 1900.0 + 0.5 * tp_step, tp_step)
    out = {}
    for w in WATERS:
        for lid in LIDS:
            out[w, lid] = melt_column(tp, lid, w, model=model_name)
    return tp, out


def check_scan(model_name, tp_step=1.0):
    """The figures the tests assert (and the closing note quotes)."""
    model = get_model(model_name)
    tp, res = scan(model_name, tp_step=tp_step)
    figures = {"cells": 0, "flag_counts": {}, "max_band_dev_k": 0.0, "max_slope_k_gpa": 0.0}
    for (w, _lid), r in res.items():
        figures["cells"] += tp.size
        for bit in (1, 2, 4, 8, 16):
            figures["flag_counts"][bit] = figures["flag_counts"].get(bit, 0) + int(
                np.count_nonzero(r.flag & bit)
            )
        unusable = (r.flag & (FLAG_INVALID_INPUT | FLAG_NO_ONSET | FLAG_WATER_SATURATED)) > 0
        melts = ~unusable & (r.melt_thickness_km > 0)
        for name, arr in r.as_dict().items():
            if name == "flag":
                continue
            defined = melts if OUTPUTS[name].undefined_without_melt else ~unusable
            assert np.all(np.isfinite(arr[defined])), (model_name, w, name)
        h = np.where(unusable, np.nan, r.melt_thickness_km)
        ok = np.isfinite(h)
        assert np.all(np.diff(h[ok]) >= -1e-4), (model_name, w, np.diff(h[ok]).min())
        # onsets that are solidus crossings between 7 and 13.5 GPa (not the floor, flag 16)
        p = model.pressure_gpa(r.solidus_crossing_depth_km.astype(float))
        cross = ~unusable & (p > 7.0) & (p <= 13.5) & ~(r.flag & FLAG_UPPER_MANTLE_FLOOR > 0)
        if not cross.any():
            continue
        t_on = model.solid_adiabat_c(tp[cross], p[cross])
        dev = np.abs(t_on - reference_onset_c(model, p[cross], w))
        figures["max_band_dev_k"] = max(figures["max_band_dev_k"], float(dev.max()))
        sel = p[cross] >= 9.0
        if sel.sum() > 2:
            pp, tt = p[cross][sel], t_on[sel]
            order = np.argsort(pp)
            dp, dt = np.diff(pp[order]), np.diff(tt[order])
            slope = dt[dp > 0.02] / dp[dp > 0.02]  # finite differences over the scan
            figures["max_slope_k_gpa"] = max(figures["max_slope_k_gpa"], float(slope.max()))
    return figures


@pytest.mark.parametrize("model_name", MODELS)
def test_scan_to_1900_c_onsets_on_the_published_solidus(model_name):
    fig = check_scan(model_name, tp_step=1.0 if model_name == "katz2003" else 2.0)
    assert fig["max_band_dev_k"] <= BAND_K, fig
    assert fig["max_slope_k_gpa"] < 45.0, fig  # the 7 GPa tangent was 61.5 K/GPa
    assert fig["flag_counts"][FLAG_UPPER_MANTLE_FLOOR] > 0  # hot columns reach the floor
    assert fig["flag_counts"][FLAG_NO_ONSET] == 0  # never a hole: the floor bounds the onset


def test_the_join_is_continuous_and_follows_the_published_shapes():
    # Katz et al. (2003) Table 2 at 7 GPa and the Herzberg et al. (2000) fit: offset -38.9 K
    m = get_model("katz2003")
    npt.assert_allclose(float(m.solidus_c(7.0)), 1766.1, atol=1e-9)
    npt.assert_allclose(herzberg_2000_c(7.0), 1805.0, atol=0.05)
    p = np.array([7.5, 10.0, 13.0, 20.0])
    npt.assert_allclose(m.solidus_c(p), 1766.1 + herzberg_2000_c(p) - herzberg_2000_c(7.0))
    for name in MODELS:
        m = get_model(name)
        pc = m.calibrated_max_pressure_gpa
        for f in (0.0, 0.2, 0.5, 1.0):  # every boundary continuous at P_c
            npt.assert_allclose(
                m.temperature_c(pc + 1e-9, f), m.temperature_c(pc - 1e-9, f), atol=1e-5
            )
        grid = np.linspace(0.01, 22.5, 4000)
        sol, liq = m.solidus_c(grid), m.liquidus_c(grid)
        assert np.all(np.diff(sol) > 0), name
        assert np.all(np.diff(liq) > 0), name
        assert np.all(liq - sol > 100.0), name  # the melting interval stays open (physical)
        # the slope flattens as the published solidus does: 390/P - 5.7 (derivative of the fit)
        for pp in (10.0, 15.0):
            slope = (m.solidus_c(pp + 1e-4) - m.solidus_c(pp - 1e-4)) / 2e-4
            npt.assert_allclose(slope, 390.0 / pp - 5.7, rtol=1e-4)


def test_below_the_calibrated_pressure_nothing_changes():
    # identity: T(P, F) for P <= P_c is the published law itself (Katz et al. 2003 eq. 4 with
    # Table 2: T_sol = 1085.7 + 132.9 P - 5.1 P^2)
    m = get_model("katz2003")
    p = np.linspace(0.0, 7.0, 71)
    npt.assert_array_equal(m.solidus_c(p), 1085.7 + 132.9 * p + -5.1 * p * p)


def test_lid_deeper_than_calibration_flags_the_excess_to_melt():
    # lidmelt definition (docs/physics.md, flag 4): an output resting on the continued
    # boundaries is flagged; a 250 km lid puts the top of melting (7.9 GPa, PREM below 7.25 GPa)
    # beyond 7 GPa, where the excess to melt reads the continued solidus
    from lidmelt.physics import evaluate_cells
    from lidmelt.physics._cells import CellOptions
    from lidmelt.physics._kernel_records import Cells

    for compiled in (True, False):
        out = evaluate_cells(
            Cells(np.array([1350.0, 1350.0]), np.array([250.0, 100.0]), 0.0),
            CellOptions(ambient_potential_temperature_c=1350.0, compiled=compiled),
            dtype=np.float64,
        ).as_dict()
        assert out["flag"][0] & FLAG_BEYOND_CALIBRATION
        assert out["flag"][1] == 0
        assert np.isfinite(out["excess_to_melt_k"][0])


def test_uniform_water_outside_the_table_runs_on_the_compiled_path():
    # a cell beyond the table's Tp nodes (1900 C) with one uniform water content used to raise
    # AttributeError on the numpy fallback; both cells now give the direct integration's values
    from lidmelt import melt_column as api_melt_column

    res = api_melt_column(np.array([1950.0, 1350.0]), 80.0, 0.0)
    direct = melt_column(np.array([1950.0, 1350.0]), 80.0, 0.0, method="direct")
    npt.assert_allclose(res.melt_thickness_km, direct.melt_thickness_km, rtol=5e-3, atol=0.02)
    npt.assert_array_equal(res.flag, direct.flag)


@pytest.mark.slow
def test_table_equals_direct_in_the_continued_range():
    # the table's tolerance (tests/test_table.py: 0.5 % or 0.02 km on H, 0.2 km on onset depth)
    # where the onsets lie on the continuation or at the floor (Tp 1600 to 1900 C)
    rng = np.random.default_rng(11)
    n = 60
    tp = rng.uniform(1600.0, 1900.0, n)
    lid = rng.uniform(0.0, 250.0, n)
    for water in (0.0, 0.05, rng.uniform(0.0, 0.1, n)):
        table = melt_column(tp, lid, water, method="table")
        direct = melt_column(tp, lid, water, method="direct")
        npt.assert_array_equal(table.flag, direct.flag)
        h_d, h_t = direct.melt_thickness_km, table.melt_thickness_km
        assert np.all(np.isfinite(h_d))
        assert np.all(np.abs(h_t - h_d) <= np.maximum(0.005 * np.abs(h_d), 0.02))
        npt.assert_allclose(table.onset_depth_km, direct.onset_depth_km, atol=0.2)
        npt.assert_allclose(table.deep_melt_share, direct.deep_melt_share, atol=5e-3)


def test_deep_melt_share_is_the_melt_made_beyond_calibration():
    # the definition (docs/physics.md, "How much is extrapolation"), checked with separate
    # columns of the public API: H_deep = H(top at P_c) + F(P_c) (z_c - z_top), share = H_deep/H;
    # 0 where the onset is shallower than P_c, 1 where the top is deeper than P_c
    m = get_model("katz2003")
    z_c = float(m.depth_km(m.calibrated_max_pressure_gpa))  # 216.2 km, above the PREM join
    at_c = melt_column(1700.0, z_c, 0.0, method="direct", min_top_km=0.0)
    full = melt_column(1700.0, 0.0, 0.0, method="direct")  # top at 7 km
    h_deep = at_c.melt_thickness_km + at_c.max_melt_fraction * (z_c - 7.0)
    npt.assert_allclose(full.deep_melt_share, h_deep / full.melt_thickness_km, rtol=1e-6)
    for compiled in (True, False):
        res = melt_column(
            np.array([1700.0, 1450.0, 1700.0, 1350.0]), np.array([0.0, 0.0, 230.0, 150.0]),
            0.0, compiled=compiled,
        )  # fmt: skip
        npt.assert_allclose(res.deep_melt_share[0], h_deep / full.melt_thickness_km, atol=5e-3)
        assert res.deep_melt_share[1] == 0.0  # onset 4.1 GPa: nothing made beyond 7 GPa
        assert res.deep_melt_share[2] == 1.0  # top 7.5 GPa: everything
        assert np.isnan(res.deep_melt_share[3])  # no melt
