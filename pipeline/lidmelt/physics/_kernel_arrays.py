"""The arrays of the compiled melting kernel (:mod:`lidmelt.physics._kernel`), made with numpy.

For a melting table and a water content (or for water varying cell by cell) they hold the onset
curve Tp*(P) (the Tp whose solid isentrope meets the solidus at P) on a fine pressure grid, the
first node its running maximum reaches on a fine Tp grid, the inverse (onset against Tp) where it
is smooth, the saturation limit, and the table values the kernel interpolates; the kernel's
module docstring gives the method. They are made once per table and water content and kept.
"""

from __future__ import annotations

import threading
import weakref

import numpy as np

from lidmelt.physics._column import onset_pressure_gpa
from lidmelt.physics._kernel_records import CALL_FIELDS, KernelParameters
from lidmelt.physics._melting import MeltingModel
from lidmelt.physics._table import WATER_EXPONENT, MeltTable

#: Pressure step [GPa] of the tabulated onset curve Tp*(P). Linear interpolation errs by
#: h^2 |Tp*''| / 8 < 1e-4 K (|Tp*''| < 30 K/GPa^2 for the Katz solidus away from the surface,
#: [derived]), far inside the 0.2 km onset tolerance of tests/test_table.py.
ONSET_STEP_GPA = 0.005
#: Step [K] of the Tp grid on which the first node of the running maximum is indexed; a cell
#: steps from there over at most a few nodes (a choice of speed, not of accuracy).
TP_INDEX_STEP_K = 0.25
#: Water nodes of the bracketing curves where water varies (a choice of speed).
WATER_CURVES = 65


# ------------------------------------------------------------------------------------------------
# the arrays of a table and water content (numpy, made once and kept with the table)
# ------------------------------------------------------------------------------------------------
def _onset_curve(model: MeltingModel, p, water):
    """Tp*(P) [deg C]: the Tp whose solid isentrope meets the solidus at P (see module doc)."""
    with np.errstate(invalid="ignore", over="ignore"):
        sol = model.solidus_c(p, water)
    return (sol + 273.15) * np.exp(-model.adiabat_coefficient_per_gpa * p) - 273.15


def _water_form(model: MeltingModel, p, water_max):
    """(g0, d, u_sat) of Tp*(P, u) = g0 + d min(u, u_sat), checked; None if the model differs."""
    g0 = _onset_curve(model, p, 0.0)
    sat = np.asarray(model.water_saturated_bulk_wt_pct(p), float)
    if not model.hydrous or water_max <= 0:
        return g0, np.zeros_like(p), np.full_like(p, np.inf)
    w_ref = 1e-3  # saturates the source only above 3.5e-4 GPa [derived], so at node 0 alone
    d = (_onset_curve(model, p, w_ref) - g0) / w_ref**WATER_EXPONENT
    us = sat**WATER_EXPONENT
    for w in water_max * np.array([0.003, 0.05, 0.2, 0.5, 0.8, 1.0]):
        form = g0 + d * np.minimum(w**WATER_EXPONENT, us)
        if not np.all(np.abs(form - _onset_curve(model, p, w)) <= 1e-6):
            return None
    return g0, d, us


def _first_nodes(curves, t0, n_t):
    """For each curve (rows), the first node its running maximum reaches t0 + k dt (int32)."""
    targets = t0 + TP_INDEX_STEP_K * np.arange(n_t)
    running = np.maximum.accumulate(curves, axis=1)
    return np.stack([np.searchsorted(r, targets, side="left") for r in running]).astype(np.int32)


def _model_arrays(table: MeltTable):
    """The pressure nodes, the saturation limit and the checked water form of ``table``'s model
    (the same for every water content)."""
    model, lay = table.model, table.layout
    p = ONSET_STEP_GPA * np.arange(round(model.max_onset_pressure_gpa / ONSET_STEP_GPA) + 1)
    sat = np.asarray(model.water_saturated_bulk_wt_pct(p), float)
    form = _water_form(model, p, lay.water_max_wt_pct)
    if form is not None and not np.all(np.isfinite(form[0])):
        form = None
    return p, sat, form


def _arrays(table: MeltTable, water, model_arrays):
    """The kernel's arrays for one water content (a float) or for water varying (None).

    For one water content the table's values are not copied: the kernel interpolates them in
    the water coordinate of that content (:attr:`KernelParameters.water_u`), as where water
    varies, so that the arrays of many contents (an ensemble's members) are small enough to
    keep.
    """
    model, lay = table.model, table.layout
    p, sat, form = model_arrays
    depth = model.depth_pressure
    zp = np.ascontiguousarray(np.column_stack([depth.nodes_gpa, depth.nodes_km]))
    u_one = water**WATER_EXPONENT if water else 0.0
    if water is None:
        if form is None:
            return None
        g0, dg, us = form
        u_nodes = np.linspace(0.0, lay.water_max_wt_pct**WATER_EXPONENT, WATER_CURVES)
        curves = g0 + dg * np.minimum(u_nodes[:, None], us)
        vals, inv_du_curve = table.values, (WATER_CURVES - 1) / max(u_nodes[-1], 1e-300)
    else:
        if form is not None:  # the form keeps the kink where water saturates exact
            g0, dg, us = form
        else:  # the curve at this water itself; d = 0 makes it independent of u
            g0 = _onset_curve(model, p, water)
            dg, us = np.zeros_like(p), np.zeros_like(p)
        if not np.all(np.isfinite(g0)):
            return None
        curves, inv_du_curve = (g0 + dg * np.minimum(u_one, us))[None], 0.0
        vals = table.values
    t0 = float(np.floor(np.min(curves[:, 0])))
    n_t = int(np.ceil((np.max(curves) - t0) / TP_INDEX_STEP_K)) + 2
    du_table = table.water_u[1] - table.water_u[0] if table.water_u.size > 1 else np.inf
    first = _first_nodes(curves, t0, n_t)
    inv = np.stack([_inverse(c, f, t0) for c, f in zip(curves, first, strict=True)])
    # the continued solidus has a kink at P_c (highpressure.py): onsets across it are searched
    cal = model.calibrated_max_pressure_gpa
    with np.errstate(invalid="ignore"):
        inv[(inv[..., 0] <= cal) & (inv[..., 0] + inv[..., 1] > cal)] = np.nan
    if water is None:
        _check_water_steps(inv, g0, dg, us, u_nodes, t0)
    cv = np.ascontiguousarray(np.stack([g0, dg, us], axis=1))
    vals = np.ascontiguousarray(vals, dtype=np.float32)
    if water is None:  # the finer water nodes beyond the calibrated pressure
        exact = table.deep_values
        i0 = table.tp_c.size - exact.shape[0]
        du_deep = lay.water_max_wt_pct**WATER_EXPONENT / max(exact.shape[1] - 1, 1) or np.inf
    else:  # the columns integrated at exactly this water
        i0, exact = table.deep_columns(water)
        du_deep = np.inf
    if exact.shape[0] == 0:
        du_deep = np.inf
        i0, exact = table.tp_c.size, np.zeros((2, 1, table.pressure_gpa.size, 3), np.float32)
    exact = exact if exact.ndim == 4 else exact[:, None]  # (Tp, water, pressure, 3)
    deep = np.ascontiguousarray(exact, dtype=np.float32)
    rough, du_rough = _rough(table, water, i0, exact.shape[1])
    fields = dict(
        onset_tp0_c=t0, onset_inv_tp_step=1.0 / TP_INDEX_STEP_K, onset_step_gpa=ONSET_STEP_GPA,
        tp_min_c=lay.tp_min_c, inv_tp_step=1.0 / lay.tp_step_k,
        inv_pressure_step=1.0 / lay.pressure_step_gpa,
        calibrated_max_gpa=model.calibrated_max_pressure_gpa, water_u=u_one,
        curve_inv_water_step=inv_du_curve, table_inv_water_step=1.0 / du_table,
        surface_solidus_c=float(model.solidus_c(0.0, 0.0)),
        gpa_per_km=float(model.pressure_gpa(1.0)), top_max_gpa=table.top_pressure_max_gpa,
        max_onset_gpa=model.max_onset_pressure_gpa, water_max_wt_pct=lay.water_max_wt_pct,
        hydrous=float(model.hydrous), tp_max_c=lay.tp_max_c, join_gpa=depth.join_gpa,
        join_km=depth.join_km, inv_node_step=1.0 / depth.node_step_gpa, deep_tp_node=float(i0),
        deep_inv_water_step=1.0 / du_deep, rough_inv_water_step=1.0 / du_rough,
        **CALL_FIELDS,
    )  # fmt: skip
    par = KernelParameters(**{name: float(v) for name, v in fields.items()})
    return par, cv, first, inv, sat, vals, zp, rough, deep


def _jump_rough(onset, floor_gpa):
    """(n_tp - 1, ...) bool: Tp intervals within two of the jump of the onset to the upper
    mantle's floor (axis 0), where H is not bilinear in Tp (see :func:`_rough`)."""
    floor = onset >= floor_gpa - 1e-9
    jump = floor[:-1] != floor[1:]
    rough = jump.copy()
    for shift in (1, 2):  # two intervals on either side
        rough[shift:] |= jump[:-shift]
        rough[:-shift] |= jump[shift:]
    return rough


def _rough(table: MeltTable, water, i0, n_deep_w):
    """((n_tp - 1, n) uint8, water step of its columns): Tp intervals the kernel leaves to the
    numpy path, for one water content (n = 1, step inf) or where water varies (the table's water
    intervals without the finer water nodes of :attr:`MeltTable.deep_values`, their number
    ``n_deep_w``, else none).

    Beyond P_c the continued solidus flattens towards the isentrope (Herzberg et al. 2000): the
    onset moves fast with Tp, then jumps to the upper mantle's floor where the isentrope no
    longer meets the solidus, and H is not smooth in Tp there. Where the kernel reads columns
    integrated at the cell's water (one water content, :meth:`MeltTable.deep_columns`) or on
    the finer water nodes (water varying, Tp nodes from ``i0`` on), only the intervals within
    two nodes of that jump are left for one water content (bilinear H erred by up to 1.8 times
    the table tolerance there, 0.5 elsewhere in the band). Where water varies, none is left:
    on the finer water nodes (81) the kernel erred by at most 0.78 times the tolerance on 2500
    hot wet cells next to that jump (Tp 1500-1700 C, water 0-0.05 wt%; with 41 nodes 1.002,
    0.82 with the jump interval left, 0.29 with one interval either side, [derived: these
    figures]); before ``i0`` no onset is beyond P_c.
    Without finer columns (an anhydrous model), every interval beyond P_c that the numpy path
    integrates directly (:meth:`MeltTable.rough`) is left.
    """
    model, floor = table.model, table.model.max_onset_pressure_gpa
    if water is not None:
        onset = onset_pressure_gpa(model, table.tp_c, float(water))
        return np.ascontiguousarray(_jump_rough(onset, floor)[:, None], np.uint8), np.inf
    u_max = table.layout.water_max_wt_pct**WATER_EXPONENT
    if i0 >= table.tp_c.size or n_deep_w < 2:  # no finer columns: the numpy path's intervals
        deep = table.beyond_intervals(table.onset_gpa)
        rough = table.rough & (deep[:, :-1] | deep[:, 1:] if deep.shape[1] > 1 else deep)
        n_c = rough.shape[1]
        return np.ascontiguousarray(rough, np.uint8), (u_max / n_c if u_max > 0 else np.inf)
    return np.zeros((table.tp_c.size - 1, 1), np.uint8), np.inf


def _check_water_steps(inv, g0, dg, us, u_nodes, t0):
    """Blank (NaN: searched) the inverse table where linear in u errs by over 1e-3 GPa.

    Checked against the exact inverse on the curves halfway between water nodes. For the Katz
    solidus the error is at most 3.6e-4 GPa (11 m) for Tp 1300-1600 C [derived: this check's
    own figures]; 1e-3 GPa (31 m) is a seventh of the 0.2 km onset tolerance of
    tests/test_table.py.
    """
    mid_u = 0.5 * (u_nodes[:-1] + u_nodes[1:])
    mid = g0 + dg * np.minimum(mid_u[:, None], us)
    n_t = inv.shape[1]
    first = _first_nodes(mid, t0, n_t)
    exact = np.stack([_inverse(c, f, t0)[:, 0] for c, f in zip(mid, first, strict=True)])
    with np.errstate(invalid="ignore"):
        bad = ~(np.abs(0.5 * (inv[:-1, :, 0] + inv[1:, :, 0]) - exact) <= 1e-3)
    bad |= np.isnan(exact) & np.isfinite(inv[:-1, :, 0])
    bad[:, :-1] |= bad[:, 1:]  # a Tp bin uses the node above it too
    inv[:-1][bad] = np.nan
    inv[1:][bad] = np.nan


def _inverse(curve, first, t0):
    """(n_t, 2): onset [GPa] at t0 + k dt and its rise to the next k; NaN where not smooth.

    Where the crossing moves by at most two curve nodes from one Tp node to the next, the onset
    is linear in Tp within 1e-5 GPa [derived: h^2 |P''| / 8 with P'' = -g''/g'^3]; elsewhere
    (near a tangency, or without a crossing) the kernel searches the curve.
    """
    targets = t0 + TP_INDEX_STEP_K * np.arange(first.size)
    i = first.astype(np.intp)
    ok = (i >= 1) & (i < curve.size) & (targets > curve[0])
    i = np.clip(i, 1, curve.size - 1)
    ga, gb = curve[i - 1], curve[i]
    with np.errstate(invalid="ignore", divide="ignore"):
        p = np.where(ok, (i - 1 + (targets - ga) / (gb - ga)) * ONSET_STEP_GPA, np.nan)
    smooth = ok[:-1] & ok[1:] & (np.diff(first) <= 2)
    rise = np.where(smooth, np.diff(p), np.nan)
    out = np.column_stack([np.where(smooth, p[:-1], np.nan), rise])
    return np.ascontiguousarray(np.vstack([out, [np.nan, np.nan]]))


_CACHE: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()
_LOCK = threading.Lock()


#: Water contents whose arrays are kept per table (each about 0.3 MB): more than the members
#: of a large ensemble, so that each member's are made once per process, not once per chunk.
_KEPT = 512


def kernel_arrays(table: MeltTable, water):
    """:func:`_arrays`, kept per table and water content (thread-safe)."""
    key = None if water is None else float(water)
    with _LOCK:
        per_table = _CACHE.setdefault(table, {})
        if key not in per_table:
            if "model" not in per_table:
                per_table["model"] = _model_arrays(table)
            if len(per_table) > _KEPT:
                per_table.clear()
                per_table["model"] = _model_arrays(table)
            per_table[key] = _arrays(table, key, per_table["model"])
        return per_table[key]
