"""Outputs of the melting column and their validity flag, by the table or by direct integration.

:func:`melt_column` is the one entry point: it checks the inputs (:func:`input_flags`), finds
the onset and integrates the column (:mod:`lidmelt.physics._column`) or interpolates the
precomputed table (:mod:`lidmelt.physics._table`), and assembles every output variable and the
bit flag (:func:`finish_outputs`). :func:`excess_to_melt_k` inverts the onset condition at the
top of melting. :func:`lidmelt.physics._cells.evaluate_cells` computes every output variable of
a run from the cell inputs (the column outputs, the melt the anomaly adds, the regime, crust
and melt production); :data:`EXTRACTION_MIN_MELT_FRACTION` is its least extracted melt fraction.

Definitions (docs/physics.md, section "Definitions lidmelt fixes"):

* Tp is the P = 0 intercept of the solid isentrope T = Tp exp(alpha_s P / (rho_s c_p)), T in K.
* Depth is below the seafloor with P = rho g z (the model's ``lithostatic_density_kg_m3`` and
  ``gravity_m_s2``).
* The onset is the shallowest P at which the isentrope meets the solidus, searched from the
  surface down to ``model.max_onset_pressure_gpa``.
* Melt thickness H = integral of F dz from the top of melting to the onset [km]; 0 where the
  onset is shallower than the top. Max melt fraction is F at the top; mean melt pressure is
  integral of P dF / F_top, onset depth and pressure are given where H > 0 (NaN where no melt);
  the solidus crossing depth is the onset's depth whatever the lid.
* Water is batch-partitioned and stays in the column.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lidmelt._errors import ModelError
from lidmelt.physics._column import (
    DEFAULT_MIN_TOP_KM,
    DEFAULT_PRESSURE_STEP_GPA,
    integrate_columns,
    onset_pressure_gpa,
    refine_onset_gpa,
    top_of_melting_km,
)
from lidmelt.physics._deepshare import (
    deep_melt_share,
    direct_at_calibration,
    onset_depth,
    table_at_calibration,
    top_pressure,
)
from lidmelt.physics._flags import (
    FLAG_INVALID_INPUT,
    FLAG_NO_ONSET,
    FLAG_WATER_SATURATED,
    beyond_flags,
    input_flags,
    saturation_onset_gpa,
)
from lidmelt.physics._kernel import compiled_cells, use_compiled
from lidmelt.physics._kernel_records import Cells, KernelCall
from lidmelt.physics._melting import MeltingModel, get_model
from lidmelt.physics._table import FALLBACK_STEP_GPA, MeltTable, get_table

_BLOCK = 1 << 16

#: The least melt fraction at the top of melting for which a column counts as melting (regime,
#: ensemble probability, screening); below it the melt stays in the matrix. Geochemical models
#: of ridge melting have melt separate from the matrix at porosities of order 0.1 % (Faul 2001,
#: Nature 410, 920, abstract [verified]); U-series disequilibria give 0.1-0.2 % of melt beneath
#: a ridge (Lundstrom, Gill, Williams & Perfit 1995, Science 270, 1958, abstract [verified]) and
#: a residual porosity of "a few parts per thousand" (Bourdon & Elliott 2010, in Timescales of
#: Magmatic Processes, Wiley, abstract [verified]); near-fractional melting needs porosities
#: below 1 % (Kelemen, Hirth, Shimizu, Spiegelman & Dick 1997, Phil. Trans. R. Soc. A 355, 283,
#: abstract [verified; journal from memory]). lidmelt takes 0.5 %, "a few parts per thousand" at
#: its upper end, so that a column counted as melting has made more melt than any of these
#: estimates leaves behind (a choice). F is a mass fraction and porosity a volume fraction
#: (about F rho_s / rho_f, 14 % more [derived]), well inside the spread of the estimates.
EXTRACTION_MIN_MELT_FRACTION = 0.005

COLUMN_OUTPUTS = (
    "melt_thickness_km",
    "onset_depth_km",
    "onset_pressure_gpa",
    "melting_top_km",
    "max_melt_fraction",
    "mean_melt_pressure_gpa",
    "deep_melt_share",
    "solidus_crossing_depth_km",
)


@dataclass(frozen=True)
class ColumnResult:
    """Outputs of :func:`melt_column`, each an array of the broadcast input shape.

    Parameters
    ----------
    melt_thickness_km : numpy.ndarray
        Melt thickness H [km]: the column integral of melt fraction.
    onset_depth_km, onset_pressure_gpa : numpy.ndarray
        Where melting begins [km below the seafloor, GPa]; NaN where H = 0.
    melting_top_km : numpy.ndarray
        The top of the melting column used [km].
    max_melt_fraction : numpy.ndarray
        The melt fraction at the top of the column.
    mean_melt_pressure_gpa : numpy.ndarray
        The melt-weighted mean pressure of melting [GPa]; NaN where H = 0.
    deep_melt_share : numpy.ndarray
        The share of H made beyond the calibrated pressure (7 GPa).
    solidus_crossing_depth_km : numpy.ndarray
        Where the isentrope crosses the solidus whatever the lid [km] (defined where H = 0).
    flag : numpy.ndarray of uint8
        Bit flags (``FLAG_MEANINGS``); 0 where the cell is valid and calibrated.
    model : MeltingModel
        The model (with every parameter) that produced the result.

    Notes
    -----
    Units and long names of every output: :mod:`lidmelt._variables`.
    """

    melt_thickness_km: np.ndarray
    onset_depth_km: np.ndarray
    onset_pressure_gpa: np.ndarray
    melting_top_km: np.ndarray
    max_melt_fraction: np.ndarray
    mean_melt_pressure_gpa: np.ndarray
    deep_melt_share: np.ndarray
    solidus_crossing_depth_km: np.ndarray
    flag: np.ndarray
    model: MeltingModel

    def as_dict(self) -> dict[str, np.ndarray]:
        """The output arrays and the flag by name."""
        out = {name: getattr(self, name) for name in COLUMN_OUTPUTS}
        out["flag"] = self.flag
        return out


@dataclass(frozen=True)
class ColumnIntegrals:
    """The integrals of columns from their onset to their top: H [km], F at the top and the
    integral of P dF [GPa] (the keys of :func:`lidmelt.physics._column.integrate_columns`)."""

    melt_thickness_km: np.ndarray
    max_melt_fraction: np.ndarray
    int_p_df_gpa: np.ndarray


def finish_outputs(model, cells: Cells, p_on, integrals: ColumnIntegrals, flag, *, deep):
    """Assemble a ColumnResult from onset and integrals; set the derived flags and NaNs.

    ``cells``: Tp, water and water load (its rock-equivalent depth [km]) of the cells, with
    ``lid_depth_km`` their top of melting [km]; ``deep``: (H, F) of the columns with their
    top at the calibrated pressure (:mod:`lidmelt.physics._deepshare`).
    """
    w, top_km, load_km = cells.water_wt_pct, cells.lid_depth_km, cells.water_load_km
    melt_thickness_km, f_top = integrals.melt_thickness_km, integrals.max_melt_fraction
    int_p_df = integrals.int_p_df_gpa
    with np.errstate(invalid="ignore", divide="ignore"):
        top_p = model.pressure_gpa(top_km, load_km)
        invalid = (flag & FLAG_INVALID_INPUT) > 0
        p_on = np.where(invalid, np.nan, p_on)  # an invalid cell has no onset to flag
        no_onset = ~invalid & ~np.isfinite(p_on)
        flag = flag | np.where(no_onset, FLAG_NO_ONSET, 0).astype(np.uint8)
        # an infinite top (the column meets its geotherm nowhere) rests on no phase boundary
        flag = flag | beyond_flags(model, p_on, np.where(invalid | np.isinf(top_p), np.nan, top_p))
        saturated = np.isfinite(p_on) & (w > model.water_saturated_bulk_wt_pct(p_on))
        flag = flag | np.where(saturated, FLAG_WATER_SATURATED, 0).astype(np.uint8)
        bad = invalid | no_onset | saturated
        melting = ~bad & (p_on > top_p)
        h = np.where(bad, np.nan, np.where(melting, melt_thickness_km, 0.0))
        f = np.where(bad, np.nan, np.where(melting, f_top, 0.0))
        mean_p = np.where(melting & (f > 0), int_p_df / np.where(f > 0, f, 1.0), np.nan)
        p_on = np.where(bad, np.nan, p_on)
        share = deep_melt_share(model, h, p_on, top_p, *deep)
        p_melt = np.where(h > 0, p_on, np.nan)  # the onset where the column melts
    return ColumnResult(
        melt_thickness_km=h,
        onset_depth_km=model.depth_km(p_melt, load_km),
        onset_pressure_gpa=p_melt,
        melting_top_km=np.where(invalid | np.isinf(top_km), np.nan, top_km),
        max_melt_fraction=f,
        mean_melt_pressure_gpa=mean_p,
        deep_melt_share=share,
        solidus_crossing_depth_km=model.depth_km(p_on, load_km),
        flag=flag,
        model=model,
    )


def melt_column(
    potential_temperature_c,
    lid_depth_km,
    water_wt_pct=0.0,
    *,
    model: str | MeltingModel = "katz2003",
    method: str = "table",
    min_top_km: float = DEFAULT_MIN_TOP_KM,
    step_gpa: float = DEFAULT_PRESSURE_STEP_GPA,
    table: MeltTable | None = None,
    compiled: bool | None = None,
    water_load_km=0.0,
) -> ColumnResult:
    """Melt production of upwelling mantle beneath a lid, for arrays of cells.

    Parameters
    ----------
    potential_temperature_c : array_like
        Potential temperature Tp of the mantle [deg C] (ambient plus thermal anomaly).
    lid_depth_km : array_like
        Depth of the lid base (lithosphere) below the seafloor [km], >= 0 (+inf: the column
        meets its geotherm nowhere and does not melt, :mod:`lidmelt.physics._geotherm`).
    water_wt_pct : array_like, optional
        Water in the bulk source [wt%] (0.01 wt% = 100 ppm). Default 0 (dry).
    model : str or MeltingModel, optional
        A registry name or model object (see :func:`lidmelt.physics._melting.get_model`).
    method : {"table", "direct"}
        ``"table"`` interpolates a precomputed table (fast; its error is bounded in the tests),
        falling back to direct integration outside the table. ``"direct"`` integrates every
        column.
    min_top_km : float, optional
        Melting stops at max(lid, min_top_km) [km]; default 7 km, the base of normal oceanic
        crust (White, McKenzie & O'Nions 1992, from memory).
    step_gpa : float, optional
        Pressure step of the direct integration [GPa].
    table : MeltTable, optional
        A table to use (default: the cached table of the model).
    compiled : bool, optional
        The table path by the compiled kernel (:mod:`lidmelt.physics._kernel`; True), or by
        numpy (False). Default: compiled where numba imports.
    water_load_km : array_like, optional
        The water above the seafloor as its rock-equivalent depth Z(P_w) [km]
        (:func:`lidmelt.physics._pressure.water_load_km`); default 0 (no water load).

    Returns
    -------
    ColumnResult
        Arrays of the broadcast input shape and a ``flag`` array (see ``FLAG_*``). Invalid or
        unmeltable cells are NaN and flagged, never clipped. The table path returns float32
        arrays where the compiled kernel serves it or one water content applies to every cell
        (single precision is far finer than the table's error, and halves the memory traffic);
        otherwise float64.
    """
    model = get_model(model)
    tp, lid, w, load = np.broadcast_arrays(
        np.asarray(potential_temperature_c, float),
        np.asarray(lid_depth_km, float),
        np.asarray(water_wt_pct, float),
        np.asarray(water_load_km, float),
    )
    if method == "table":
        tab = table if table is not None else get_table(model)
        if use_compiled(compiled):
            call = KernelCall(ambient_c=np.nan, min_top_km=min_top_km, crust_ratio=1.0)
            res = compiled_cells(
                tab, Cells(tp, lid, w, water_load_km=water_load_km), call,
                numpy_path=lambda sub: _table_columns(
                    tab, sub.potential_temperature_c,
                    *np.broadcast_arrays(sub.lid_depth_km, sub.water_wt_pct, sub.water_load_km),
                    min_top_km=min_top_km,
                ).as_dict(),
            )  # fmt: skip
            if res is not None:
                out = res[0]
                return ColumnResult(**{k: out[k] for k in (*COLUMN_OUTPUTS, "flag")}, model=model)
        return _table_columns(tab, tp, lid, w, load, min_top_km=min_top_km)
    if method != "direct":
        msg = f"unknown method {method!r}; use 'table' (fast) or 'direct' (integrates each column)."
        raise ModelError(msg)
    return _direct(model, tp, lid, w, min_top_km=min_top_km, step_gpa=step_gpa, load_km=load)


def _direct(model, tp, lid, w, *, min_top_km, step_gpa, load_km):
    """Direct integration of every cell (broadcast arrays of one shape)."""
    flag = input_flags(model, tp, lid, w)
    ok = flag == 0
    top_km = top_of_melting_km(np.where(ok, lid, 0.0), min_top_km)
    p_on = np.full(tp.shape, np.nan)
    p_on[ok] = onset_pressure_gpa(model, tp[ok], w[ok])
    top_p = model.pressure_gpa(np.where(np.isinf(top_km), np.nan, top_km), load_km)
    t_ok, w_ok = np.where(ok, tp, 1300.0), np.where(ok, w, 0.0)
    res = integrate_columns(model, t_ok, w_ok, p_on, top_p, step_gpa=step_gpa)
    deep = direct_at_calibration(model, t_ok, w_ok, p_on, top_p, step_gpa)
    integrals = ColumnIntegrals(
        *(res[k].reshape(tp.shape) for k in ("melt_thickness_km", "max_melt_fraction",
                                             "int_p_df_gpa"))
    )  # fmt: skip
    cells = Cells(tp, top_km, w, water_load_km=load_km)
    return finish_outputs(model, cells, p_on, integrals, flag, deep=deep)


def excess_to_melt_k(
    lid_depth_km,
    water_wt_pct=0.0,
    *,
    ambient_potential_temperature_c=1350.0,
    model: str | MeltingModel = "katz2003",
    min_top_km: float = DEFAULT_MIN_TOP_KM,
    water_load_km=0.0,
):
    """Thermal anomaly [K] above ambient Tp at which melting would just begin beneath the lid.

    Melting begins when the onset reaches the top of melting z_top = max(lid, min_top_km), that
    is when the solid isentrope passes through the solidus at P_top:
    Tp* = T_sol(P_top, water) exp(-alpha_s P_top / (rho_s c_p)) (temperatures in K) [derived from
    the solid isentrope; docs/physics.md, section "Definitions lidmelt fixes"].

    Parameters
    ----------
    lid_depth_km : array_like
        Depth of the lid base below the seafloor [km], >= 0.
    water_wt_pct : array_like, optional
        Water in the bulk source [wt%]; default 0 (dry).
    ambient_potential_temperature_c : float, optional
        The ambient mantle's potential temperature [deg C]; default 1350.
    model : str or MeltingModel, optional
        A registry name or model object (see :func:`get_model`).
    min_top_km : float, optional
        Melting stops at max(lid, min_top_km) [km]; default 7 km (the crust's base).
    water_load_km : array_like, optional
        The water above the seafloor as its rock-equivalent depth [km]; default 0.

    Returns
    -------
    numpy.ndarray
        Tp* - ambient [K], of the broadcast input shape: negative where ambient mantle already
        melts beneath this lid; NaN for invalid inputs and beyond the model's search range
        (where the solidus-isentrope crossing at P_top would not be the shallowest one).

    Examples
    --------
    >>> bool(excess_to_melt_k(0.0) < 0)  # ambient mantle melts beneath a ridge
    True
    """
    model = get_model(model)
    lid, w = np.broadcast_arrays(np.asarray(lid_depth_km, float), np.asarray(water_wt_pct, float))
    with np.errstate(invalid="ignore"):
        top_p = model.pressure_gpa(top_of_melting_km(lid, min_top_km), water_load_km)
        tp_k = (model.solidus_c(top_p, w) + 273.15) * np.exp(
            -model.adiabat_coefficient_per_gpa * top_p
        )
        bad = (
            ~np.isfinite(lid)
            | (lid < 0)
            | ~np.isfinite(w)
            | (w < 0)
            | (top_p > model.max_onset_pressure_gpa)
        )
    return np.where(bad, np.nan, tp_k - 273.15 - float(ambient_potential_temperature_c))


# ------------------------------------------------------------------------------------------------
# the table path
# ------------------------------------------------------------------------------------------------
def _table_columns(table, tp, lid, w, load, *, min_top_km):
    """Table evaluation of broadcast arrays (same outputs as :func:`_direct`).

    Cells the table cannot do (invalid inputs, outside its nodes, rough intervals, no onset
    nearby, saturated water) are integrated directly at ``FALLBACK_STEP_GPA``.
    """
    model = table.model
    shape = tp.shape
    tp, lid, w, load = tp.ravel(), lid.ravel(), w.ravel(), load.ravel()
    w0 = float(w[0]) if w.size else 0.0
    if w.size and np.all(w == w0) and table.in_range(np.array(table.layout.tp_min_c), w0):
        out = {name: np.empty(tp.size, np.float32) for name in COLUMN_OUTPUTS}
        out["flag"] = np.empty(tp.size, np.uint8)
        direct = _table_one_water(table, tp, lid, w0, float(min_top_km), out, load)
    else:
        out, direct = _table_any_water(table, tp, lid, w, min_top_km, load)
    if direct.any():
        exact = _direct(
            model,
            tp[direct],
            lid[direct],
            w[direct],
            min_top_km=min_top_km,
            step_gpa=FALLBACK_STEP_GPA,
            load_km=load[direct],
        )
        for name, arr in exact.as_dict().items():
            out[name][direct] = arr
    out = {name: arr.reshape(shape) for name, arr in out.items()}
    return ColumnResult(**out, model=model)


def _table_one_water(table, tp, lid, water, min_top_km, out, load):
    """One-water evaluation into ``out`` (dict of 1-D arrays); return cells it cannot do.

    The cells it returns (invalid inputs, outside the table, rough or without onset,
    saturated water) are left for :func:`_direct`, which is exact.
    """
    model, lay = table.model, table.layout
    packed, no_onset_from = table.water_slice(water)
    n_tp, n_p = table.tp_c.size, table.pressure_gpa.size
    gpa_per_km = float(model.pressure_gpa(1.0))
    km_per_gpa = 1.0 / gpa_per_km
    sol0 = float(model.solidus_c(0.0, 0.0))
    tp_lo = max(lay.tp_min_c, np.nextafter(sol0, np.inf))
    p_sat = saturation_onset_gpa(model, water)
    top_max = table.top_pressure_max_gpa
    special = np.zeros(tp.size, bool)
    x_hi = n_tp - 1.0
    inv_dtp, inv_dp = 1.0 / lay.tp_step_k, 1.0 / lay.pressure_step_gpa
    x_lo = (tp_lo - lay.tp_min_c) * inv_dtp
    for start in range(0, tp.size, _BLOCK):
        sl = slice(start, start + _BLOCK)
        lb = lid[sl]
        x = (tp[sl] - lay.tp_min_c) * inv_dtp
        top_km = np.maximum(lb, min_top_km)
        top_p = top_pressure(model, top_km, load[sl], gpa_per_km)
        y = top_p * inv_dp
        with np.errstate(invalid="ignore"):  # NaN cells are sent to _direct below
            # the last node belongs to the interval below it (a or b = 1 there)
            i = np.minimum(x.astype(np.intp), n_tp - 2)
            k = np.minimum(y.astype(np.intp), n_p - 2)
        a = (x - i).astype(np.float32)[:, None]
        b = (y - k).astype(np.float32)[:, None]
        # indices of invalid cells may be garbage: mode="clip" keeps the gather in bounds
        v = np.take(packed, i * (n_p - 1) + k, axis=0, mode="clip")
        v0 = v[:, 0:4] + b * (v[:, 4:8] - v[:, 0:4])
        r = v0 + a * (v[:, 8:12] + b * (v[:, 12:16] - v[:, 8:12]) - v0)
        p_on = r[:, 3]
        with np.errstate(invalid="ignore", divide="ignore"):
            no_onset = tp[sl] >= no_onset_from
            inside = (x >= x_lo) & (x <= x_hi) & (lb >= 0) & (top_p <= top_max)
            special[sl] = ~(inside & ((p_on >= p_sat) | no_onset))
            melting = p_on > top_p
            h = np.where(melting, r[:, 0], np.where(no_onset, np.nan, 0.0))
            f = np.where(melting, r[:, 1], np.where(no_onset, np.nan, 0.0))
            # the mean pressure of melting lies between the top and the onset [derived]
            mean_p = np.clip(r[:, 2] / f, top_p, p_on)
            out["mean_melt_pressure_gpa"][sl] = np.where(f > 0, mean_p, np.nan)
        out["melt_thickness_km"][sl] = h
        out["max_melt_fraction"][sl] = f
        z_on = onset_depth(model, p_on, load[sl], km_per_gpa)
        out["solidus_crossing_depth_km"][sl] = z_on
        melts = h > 0  # the onset where the column melts
        out["onset_pressure_gpa"][sl] = np.where(melts, p_on, np.nan)
        out["onset_depth_km"][sl] = np.where(melts, z_on, np.nan)
        out["melting_top_km"][sl] = top_km
        out["flag"][sl] = np.where(no_onset, FLAG_NO_ONSET, beyond_flags(model, p_on, top_p))
        deep = table_at_calibration(table, tp[sl], water, p_on, top_p)
        out["deep_melt_share"][sl] = deep_melt_share(model, h, p_on, top_p, *deep)
    return special


def _table_any_water(table, tp, lid, w, min_top_km, load):
    """Evaluation where the water content varies: trilinear, onsets refined by Newton."""
    model, lay = table.model, table.layout
    n_tp, n_w, n_p = table.tp_c.size, table.water_u.size, table.pressure_gpa.size
    flag = input_flags(model, tp, lid, w)
    top_km = top_of_melting_km(lid, min_top_km)
    top_p = model.pressure_gpa(top_km, load)
    with np.errstate(invalid="ignore"):
        good = (flag == 0) & table.in_range(tp, w) & (top_p <= table.top_pressure_max_gpa)
    t = np.where(good, tp, lay.tp_min_c)
    ww = np.where(good, w, 0.0)
    x = (t - lay.tp_min_c) / lay.tp_step_k
    i = np.clip(x.astype(np.intp), 0, n_tp - 2)
    a = (x - i)[:, None]
    y = np.where(good, top_p, 0.0) / lay.pressure_step_gpa
    k = np.clip(y.astype(np.intp), 0, n_p - 2)
    b = (y - k)[:, None]
    j, c = table.water_index(ww)
    j1 = np.minimum(j + 1, n_w - 1)
    flat = table.values.reshape(-1, 3)
    vals = 0.0
    for jj, wgt in ((j, 1 - c[:, None]), (j1, c[:, None])):
        q = (i * n_w + jj) * n_p + k
        v00, v01 = flat[q], flat[q + 1]
        v10, v11 = flat[q + n_w * n_p], flat[q + n_w * n_p + 1]
        vals = vals + wgt * ((v00 + b * (v01 - v00)) * (1 - a) + (v10 + b * (v11 - v10)) * a)
    on, a1 = table.onset_gpa, a[:, 0]
    p_on = (on[i, j] * (1 - a1) + on[i + 1, j] * a1) * (1 - c) + (
        on[i, j1] * (1 - a1) + on[i + 1, j1] * a1
    ) * c
    rough = table.rough[i, np.minimum(j, table.rough.shape[1] - 1)]
    wet = good & ~rough & (ww > 0)
    if wet.any():  # the onset is not linear in water: make it exact by Newton steps
        p_on[wet] = refine_onset_gpa(model, t[wet], ww[wet], p_on[wet])
    deep = table_at_calibration(table, t, ww, np.where(good, p_on, np.nan), top_p)
    integrals = ColumnIntegrals(vals[:, 0], vals[:, 1], vals[:, 2])
    res = finish_outputs(
        model, Cells(tp, top_km, w, water_load_km=load), p_on, integrals, flag, deep=deep
    )
    out = res.as_dict()
    with np.errstate(invalid="ignore"):
        out["mean_melt_pressure_gpa"] = np.clip(out["mean_melt_pressure_gpa"], top_p, p_on)
    return out, (flag == 0) & (~good | rough)
