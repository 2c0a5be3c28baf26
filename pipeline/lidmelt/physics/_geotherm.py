"""One mantle beneath the lid: the top of melting where the column meets its plate's geotherm.

The isotherm rule (``top_of_melting = "isotherm"``) stops melting at the depth of one isotherm
of a cooling model, with the column's isentrope assumed right beneath it: the cooling model's
own mantle (its T_m: 1300, 1450 or 1350 deg C) and the melting model's mantle (the isentrope of
Tp) are two mantles, and which plate model is chosen decides whether old seafloor melts
(docs/physics.md, "One mantle beneath the lid"). The geotherm rule (``"geotherm"``) uses one:

* The plate's conductive geotherm at the cell's age t has the column's own isentrope as its
  mantle side: T_g(z, t) = T0 + (T_is(z; Tp) - T0) theta(z, t), with theta = (T - T0)/(T_m - T0)
  the cooling model's dimensionless temperature (erf(z / 2 sqrt(kappa t)) for the half-space,
  the plate series for GDH1 and PS77, 1 below a plate; :mod:`lidmelt.physics._cooling`) and
  T_is the solid isentrope of the melting model. The cooling model's T_m then does not enter;
  only kappa and, for a plate, its thickness a do.
* The column rises on its isentrope and melts from its onset, cooled by latent heat (its path
  T_col(z), :mod:`lidmelt.physics._column`); melting stops where it meets the geotherm: the top
  of melting is the shallowest depth z >= the minimum top (crust base) and <= the onset with
  T_g(z) >= T_col(z). Where there is none (the geotherm is colder than the column all the way
  from the onset up: the onset lies inside the lid) the column does not melt.

At age 0 theta = 1 below the surface, so the top is the minimum top: the ridge column is the
isotherm rule's. A lid given as a grid is the user's cap and keeps the isotherm rule's top
(the deeper of that lid and the minimum top). These are lidmelt's definitions (docs/physics.md).

Depth z is below the seafloor and pressure comes from :mod:`lidmelt.physics._pressure`: a cell
beneath water (its load's rock-equivalent depth Z(P_w), ``water_load_km``) has its column at
the pressures P and its geotherm at z = Z(P) - Z(P_w); its minimum top is at Z(P_w) + the
minimum top. Tops are returned as depths below the seafloor.

:func:`geotherm_tops` gives the top of each cell, the top of its ambient column and the excess to
melt (the least anomaly above ambient for which the column melts at this age and water) from
the melting table (fast; :mod:`lidmelt.physics._geotherm_arrays` and
:mod:`lidmelt.physics._geotherm_search`); :func:`direct_top_km` integrates each column and
evaluates the cooling model exactly (the reference, and the path for cells outside the table).
"""

from __future__ import annotations

import threading
import weakref
from typing import NamedTuple

import numpy as np

from lidmelt._errors import ModelError
from lidmelt.physics._column import DEFAULT_MIN_TOP_KM, integrate_columns, onset_pressure_gpa
from lidmelt.physics._cooling import check_model, temperature_c
from lidmelt.physics._cooling_model import CoolingModel
from lidmelt.physics._geotherm_arrays import (
    LOAD_MAX_KM,
    LOAD_STEP_KM,
    SearchParameters,
    geotherm_arrays,
    node_depths_km,
)
from lidmelt.physics._geotherm_numpy import search_numpy
from lidmelt.physics._geotherm_search import (
    AMBIENT_STEP,
    AVAILABLE,
    ambient_tops,
    search_compiled,
)
from lidmelt.physics._melting import MeltingModel
from lidmelt.physics._table import FALLBACK_STEP_GPA, MeltTable

GEOTHERM, ISOTHERM = "geotherm", "isotherm"
#: The rules for the top of melting of a lid from plate age.
TOP_OF_MELTING_RULES = (GEOTHERM, ISOTHERM)
#: lidmelt's default: the geotherm rule gives the same ambient melt beneath old seafloor with
#: every cooling model (docs/physics.md, "One mantle beneath the lid", where the comparison is).
DEFAULT_TOP_OF_MELTING = GEOTHERM
#: Pressure step [GPa] of :func:`direct_top_km`'s integration and geotherm comparison.
DIRECT_STEP_GPA = 0.005
_EXCESS_STEPS = 24  # bisections of the direct excess: 2^-24 of a 1000 K bracket, 6e-5 K


def check_rule(rule: str) -> str:
    """``rule`` if it is one of :data:`TOP_OF_MELTING_RULES`, else a ModelError saying so."""
    if rule not in TOP_OF_MELTING_RULES:
        msg = (
            f"top of melting {rule!r} is not known; use 'geotherm' (the column meets its plate's "
            "conductive geotherm) or 'isotherm' (the lid is an isotherm of the cooling model)."
        )
        raise ModelError(msg)
    return rule


def geotherm_tops(
    table: MeltTable, cooling: CoolingModel, potential_temperature_c, water_wt_pct, age_ma, *,
    ambient_c: float, min_top_km: float = DEFAULT_MIN_TOP_KM, compiled: bool | None = None,
    water_load_km=0.0,
):  # fmt: skip
    """Tops of melting under the geotherm rule, by the melting table.

    Parameters
    ----------
    table : MeltTable
        The melting table (its model gives T_is, the columns' paths and the depth of pressure).
    cooling : CoolingModel
        The cooling model whose theta(z, t) shapes the geotherm (kappa and plate thickness).
    potential_temperature_c, water_wt_pct, age_ma : array_like
        The cells' Tp [deg C], water [wt%] and plate age [Ma] (water may stay a scalar).
    ambient_c : float
        Ambient Tp [deg C]: the top of each cell's ambient column, and the excess above it.
    min_top_km : float
        The minimum top (crust base) [km].
    compiled : bool, optional
        The compiled search where numba imports (default), or numpy (False).
    water_load_km : array_like, optional
        The water above the seafloor as its rock-equivalent depth Z(P_w) [km]
        (:func:`lidmelt.physics._pressure.water_load_km`); default 0 (no water load).

    Returns
    -------
    (top_km, ambient_top_km, excess_k) : numpy.ndarray
        Arrays of the broadcast shape (depths below the seafloor). ``top_km`` is +inf where
        the column meets its geotherm nowhere below the minimum top (it does not melt) and NaN
        where an input is NaN or the age negative. ``ambient_top_km`` is the ambient column's,
        given where the excess is negative (ambient mantle melts) and NaN elsewhere.
        ``excess_k`` is the least anomaly above ambient for which the column melts (H > 0) at
        this age, water and water load: negative where ambient mantle melts.
        Cells outside the table are done by :func:`direct_top_km` and :func:`direct_excess_k`.
    """
    check_model(cooling)
    model = table.model
    tp, age = np.broadcast_arrays(
        np.asarray(potential_temperature_c, float), np.asarray(age_ma, float)
    )
    shape = np.broadcast_shapes(tp.shape, np.shape(water_wt_pct), np.shape(water_load_km))
    tp, age = (np.ascontiguousarray(np.broadcast_to(a, shape)).ravel() for a in (tp, age))
    one = np.ndim(water_wt_pct) == 0 or np.ptp(np.asarray(water_wt_pct, float)) == 0.0
    w_one = float(np.ravel(water_wt_pct)[0]) if np.size(water_wt_pct) else 0.0
    water = w_one if one else np.ascontiguousarray(np.broadcast_to(water_wt_pct, shape)).ravel()
    load, p_min = _loads(model, water_load_km, min_top_km, shape)
    lay = table.layout
    in_table = one and 0.0 <= w_one <= lay.water_max_wt_pct
    arrays = geotherm_arrays(table, cooling, min_top_km, w_one if in_table else None)
    n_w = arrays.s_star.shape[1]
    values = (
        lay.tp_min_c, 1.0 / lay.tp_step_k, table.pressure_gpa[1] - table.pressure_gpa[0],
        table.top_pressure_max_gpa, float(ambient_c),
        0.0 if n_w == 1 else 1.0 / (table.water_u[1] - table.water_u[0]),
        lay.water_max_wt_pct if not one or in_table else -1.0, 0.0, 1.0 / LOAD_STEP_KM,
        LOAD_MAX_KM,
    )  # fmt: skip
    par = SearchParameters(*(float(v) for v in values))
    search = search_compiled if (AVAILABLE if compiled is None else compiled) else search_numpy
    amb_tab = None
    if in_table and n_w == 1:  # one water content: the ambient column's tops against age
        amb_tab = _ambient_table(arrays, par, search, _load_rows(load))
        par = par._replace(inv_ambient_step=1.0 / AMBIENT_STEP)
    top, amb, excess, slow = search(arrays, par, tp, water, age, load, p_min, amb_tab)
    if slow.any():
        w_all = np.broadcast_to(np.asarray(water, float), tp.shape)
        z_all = np.broadcast_to(load, tp.shape)
        _direct_cells(
            model, cooling, _Columns(tp, w_all, age, z_all), slow, ambient_c=ambient_c,
            min_top_km=min_top_km, out=(top, amb, excess),
        )  # fmt: skip
    return (
        model.depth_km(top, load).reshape(shape),
        model.depth_km(amb, load).reshape(shape),
        excess.reshape(shape),
    )


def _loads(model, water_load_km, min_top_km, shape):
    """(load [km], minimum top [GPa]) of the cells: floats where one load applies to all,
    else 1-D arrays of the cells."""
    load = np.asarray(water_load_km, float)
    if load.ndim and load.size and np.ptp(load) == 0.0:
        load = load.ravel()[0]
    if np.ndim(load):
        load = np.ascontiguousarray(np.broadcast_to(load, shape)).ravel()
        return load, np.asarray(model.pressure_gpa(min_top_km, load), float)
    return float(load), float(model.pressure_gpa(min_top_km, float(load)))


def _load_rows(load) -> int:
    """Load nodes of the ambient table that the cells' loads need (one without a load)."""
    with np.errstate(invalid="ignore"):
        top = float(np.nanmax(np.minimum(load, LOAD_MAX_KM), initial=0.0))
    return int(np.ceil(top / LOAD_STEP_KM)) + 1


_AMBIENT_TABLES: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()
_LOCK = threading.Lock()


def _ambient_table(arrays, par, search, n_loads: int):
    """:func:`lidmelt.physics._geotherm_search.ambient_tops`, kept per arrays and ambient Tp
    (made again with more load rows when a call needs them)."""
    key = (float(par.ambient_c), search.__name__)
    with _LOCK:
        kept = _AMBIENT_TABLES.setdefault(arrays, {})
        if key not in kept or kept[key].shape[0] < n_loads:
            kept[key] = ambient_tops(arrays, par, search, n_loads)
        return kept[key]


def geotherm_tops_direct(
    model: MeltingModel,
    cooling: CoolingModel,
    potential_temperature_c,
    water_wt_pct,
    age_ma,
    *,
    ambient_c: float,
    min_top_km: float = DEFAULT_MIN_TOP_KM,
    water_load_km=0.0,
):
    """:func:`geotherm_tops` by direct integration of every column (no table; slow)."""
    check_model(cooling)
    arrays = np.broadcast_arrays(
        *(np.asarray(v, float) for v in (potential_temperature_c, water_wt_pct, age_ma,
                                         water_load_km))
    )  # fmt: skip
    shape = arrays[0].shape
    tp, water, age, load = (np.ascontiguousarray(a).ravel() for a in arrays)
    out = tuple(np.full(tp.size, np.nan) for _ in range(3))
    with np.errstate(invalid="ignore"):
        valid = (age >= 0.0) & np.isfinite(tp) & (water >= 0.0) & (load >= 0.0)
    if valid.any():
        _direct_cells(
            model, cooling, _Columns(tp, water, age, load), valid, ambient_c=ambient_c,
            min_top_km=min_top_km, out=out,
        )  # fmt: skip
    return (
        model.depth_km(out[0], load).reshape(shape),
        model.depth_km(out[1], load).reshape(shape),
        out[2].reshape(shape),
    )


class _Columns(NamedTuple):
    """1-D cells: Tp [deg C], water [wt%], plate age [Ma] and water load [km]."""

    tp: np.ndarray
    water: np.ndarray
    age: np.ndarray
    load: np.ndarray


def _direct_cells(model, cooling, cells: _Columns, slow, *, ambient_c, min_top_km, out):
    """The cells ``slow`` of ``cells`` by direct integration, into ``out`` (top, ambient top
    [GPa], excess)."""
    tp, water, age, load = cells
    top, amb, excess = out
    idx = np.flatnonzero(slow)
    w, ag, zw = water[idx], age[idx], load[idx]
    kw = {"min_top_km": min_top_km, "step_gpa": FALLBACK_STEP_GPA}
    top[idx] = _direct_top_gpa(model, cooling, tp[idx], w, ag, zw, **kw)
    excess[idx] = direct_excess_k(
        model, cooling, w, ag, ambient_c=ambient_c, min_top_km=min_top_km, water_load_km=zw
    )
    melts = excess[idx] < 0.0
    amb[idx] = np.nan
    if melts.any():
        sel = idx[melts]
        amb[sel] = _direct_top_gpa(
            model, cooling, np.full(sel.size, float(ambient_c)), water[sel], age[sel],
            load[sel], **kw,
        )  # fmt: skip


def direct_top_km(
    model: MeltingModel,
    cooling: CoolingModel,
    potential_temperature_c,
    water_wt_pct,
    age_ma,
    *,
    min_top_km: float = DEFAULT_MIN_TOP_KM,
    step_gpa: float = DIRECT_STEP_GPA,
    water_load_km=0.0,
):
    """The geotherm top [km below the seafloor] of each column by direct integration and the
    exact geotherm.

    Each column is integrated from its onset to the surface (:func:`integrate_columns`,
    recording its temperature every ``step_gpa``); T_g comes from
    :func:`lidmelt.physics._cooling.temperature_c` at the nodes' depths below the seafloor
    (beneath the water load ``water_load_km``, z = Z(P) - Z(P_w)), scaled to the column's
    isentrope. The top is the shallowest depth at or below the minimum top and above the onset
    where T_g >= T_col, linear between the recorded nodes (the minimum top itself from T_col
    interpolated there). Returns +inf where there is none and NaN for NaN inputs or a negative
    age; a column with no onset gets the minimum top (the melting column flags it).
    """
    vals = np.broadcast_arrays(
        *(np.asarray(v, float) for v in (potential_temperature_c, water_wt_pct, age_ma,
                                         water_load_km))
    )  # fmt: skip
    tp, w, age, load = (a.ravel().astype(float) for a in vals)
    p = _direct_top_gpa(model, cooling, tp, w, age, load, min_top_km=min_top_km, step_gpa=step_gpa)
    return model.depth_km(p, load).reshape(vals[0].shape)


def _direct_top_gpa(model, cooling, tp, w, age, load, *, min_top_km, step_gpa):
    """:func:`direct_top_km` of 1-D cells as a pressure [GPa] (+inf: none; NaN: invalid)."""
    out = np.full(tp.size, np.nan)
    with np.errstate(invalid="ignore"):
        ok = np.isfinite(tp) & np.isfinite(w) & (w >= 0) & (age >= 0) & (load >= 0)
    if not ok.any():
        return out
    zw = load[ok][:, None]
    p_on = onset_pressure_gpa(model, tp[ok], w[ok])
    p_min = np.asarray(model.pressure_gpa(min_top_km, load[ok]), float)
    deepest = np.nanmax(np.concatenate([p_on, p_min]))
    nodes = int(np.ceil(deepest / step_gpa)) + 2
    rec = integrate_columns(model, tp[ok], w[ok], p_on, 0.0, step_gpa=step_gpa, record_nodes=nodes)
    p = step_gpa * np.arange(nodes)
    t_col = rec["node_temperature_c"]
    t_is = model.solid_adiabat_c(tp[ok][:, None], p[None, :])
    with np.errstate(invalid="ignore"):
        t_col = np.where(p[None, :] < p_on[:, None], t_col, t_is)
    z = np.maximum(node_depths_km(model, p)[None, :] - zw, 0.0)  # below the seafloor
    theta = _theta(cooling, z, age[ok][:, None])
    t0 = cooling.surface_temperature_c
    gap = t0 + (t_is - t0) * theta - t_col  # T_g - T_col
    out[ok] = _first_crossing(gap, p, p_min, p_on)
    return out


def _theta(cooling: CoolingModel, depth_km, age_ma):
    """theta(z, t) of the cooling model (1 below the surface at age 0)."""
    dt = cooling.mantle_temperature_c - cooling.surface_temperature_c
    return (temperature_c(depth_km, age_ma, model=cooling) - cooling.surface_temperature_c) / dt


def _first_crossing(gap, p, p_min, p_on):
    """The shallowest pressure in [p_min, p_on] where ``gap`` >= 0 (rows: columns; ``p_min``
    one per row), linear between nodes; +inf where none, p_min where the column has no onset."""
    dp = p[1] - p[0]
    rows = np.arange(gap.shape[0])
    k0 = (p_min / dp).astype(np.intp)
    at_min = gap[rows, k0] + (p_min / dp - k0) * (gap[rows, k0 + 1] - gap[rows, k0])
    with np.errstate(invalid="ignore"):
        ok = (p[None, :] > p_min[:, None]) & (p[None, :] < p_on[:, None]) & (gap >= 0.0)
    has = ok.any(axis=1)
    first = np.argmax(ok, axis=1)
    prev = first - 1
    g_prev = np.where(prev > k0, gap[rows, prev], at_min)
    p_prev = np.where(prev > k0, p[prev], p_min)
    g1 = gap[rows, first]
    with np.errstate(invalid="ignore", divide="ignore"):
        found = p_prev + (0.0 - g_prev) / (g1 - g_prev) * (p[first] - p_prev)
        top = np.where(has, found, np.inf)
        top = np.where((at_min >= 0.0) & (p_on > p_min), p_min, top)
    return np.where(np.isfinite(p_on), top, p_min)


def direct_excess_k(
    model: MeltingModel,
    cooling: CoolingModel,
    water_wt_pct,
    age_ma,
    *,
    ambient_c: float,
    min_top_km: float = DEFAULT_MIN_TOP_KM,
    tp_max_c: float = 2100.0,
    water_load_km=0.0,
):
    """The excess to melt [K] under the geotherm rule by bisection on Tp with
    :func:`direct_top_km` (the path for cells outside the melting table; slow).

    The least Tp whose column melts (its geotherm top lies above its onset) at this age, water
    and water load, minus ``ambient_c``. No column colder than Tp* = T_sol(P_min)
    exp(-alpha_s P_min / (rho_s c_p)) melts (its onset is shallower than the minimum top
    P_min; the isotherm rule's excess at that top), so the search starts there; NaN where no
    Tp up to ``tp_max_c`` melts.
    """
    vals = np.broadcast_arrays(
        *(np.asarray(v, float) for v in (water_wt_pct, age_ma, water_load_km))
    )
    w, age, load = (a.ravel() for a in vals)
    p_min = np.asarray(model.pressure_gpa(min_top_km, load), float)
    lo = (model.solidus_c(p_min, w) + 273.15) * np.exp(
        -model.adiabat_coefficient_per_gpa * p_min
    ) - 273.15
    hi = np.full(w.size, tp_max_c)
    kw = {"min_top_km": min_top_km, "step_gpa": FALLBACK_STEP_GPA}

    def melts(tp):
        top = _direct_top_gpa(model, cooling, tp, w, age, load, **kw)
        return top < onset_pressure_gpa(model, tp, w)

    at_lo = melts(lo + 1e-6)
    ok = at_lo | melts(hi)
    for _ in range(_EXCESS_STEPS):
        mid = 0.5 * (lo + hi)
        m = melts(mid)
        hi, lo = np.where(m, mid, hi), np.where(m, lo, mid)
    least = np.where(at_lo, lo, hi)
    out = np.where(ok, least - float(ambient_c), np.nan)
    return out.reshape(vals[0].shape)
