"""The arrays of the geotherm top of melting: critical ages of every table node, made once.

For a column (Tp, water) and a pressure node P of the melting table, the column's temperature
T_col lies at or below the plate's geotherm T_g exactly when the plate is young enough:
T_g >= T_col  <=>  theta(z, t) >= theta* = 1 - L / (T_is - T0), with L = T_is - T_col the
column's latent-heat deficit (the table's ``deficit_k``), T_is its solid isentrope and theta the
cooling model's dimensionless temperature [derived from the definition in
:mod:`lidmelt.physics._geotherm`]. theta falls with age at every depth (a plate cooling from a
uniform mantle temperature with fixed boundary temperatures only cools: the maximum principle
of the heat equation, from memory), so the condition holds for every age up to a critical one.
:func:`critical_sqrt_age` gives it as s* = sqrt(t* / Ma); :func:`geotherm_arrays` tabulates s*
at every node of every column of a table for one cooling model, with its running maximum down
the column (a bound that lets the search skip nodes) and the least Tp that melts at each age
(for the excess to melt). The search itself is :mod:`lidmelt.physics._geotherm_search`.

Depth is below the seafloor: a cell beneath water has the load's rock-equivalent depth Z(P_w)
above its seafloor (:mod:`lidmelt.physics._pressure`), so its node P lies at z = Z(P) - Z(P_w)
in the plate while its column (a function of P) is the same. The tabulated s* are those of no
load (z = Z(P)); beneath a load theta is smaller at every node (theta grows with depth), so they
bound the cell's s* from above and the search refines the crossing on the exact geotherm. The
least melting Tp depends on the load: :func:`least_tp_of_loads` holds it on load nodes
:data:`LOAD_STEP_KM` apart (linear between them).
"""

from __future__ import annotations

import functools
import math
import threading
import weakref
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np
from scipy import special

from lidmelt.physics import _plate
from lidmelt.physics._column import onset_pressure_gpa
from lidmelt.physics._cooling import SECONDS_PER_MA
from lidmelt.physics._cooling_model import CoolingModel
from lidmelt.physics._table import WATER_EXPONENT, MeltTable

#: s* [sqrt(Ma)] of a node that stays on the mantle side of the geotherm at every age (beneath
#: a plate's base, theta = 1); larger than the square root of any accepted age (400 Ma).
SQRT_AGE_CAP = 1.0e3
#: Step [sqrt(Ma)] of the least-melting Tp against sqrt(age), and the largest sqrt(age) held.
SQRT_AGE_STEP = 0.01
_SQRT_AGE_MAX = 20.0  # sqrt(400 Ma), the oldest accepted plate age
#: Nodes of the plate's temperature against sqrt(age) that the plate's s* is interpolated on.
#: The inverse errs by about step^2 / s [derived from the interpolation remainder of
#: erf(c / s)]: 2e-4 sqrt(Ma) at 0.5 sqrt(Ma), far below what moves a top by 10 m.
_PLATE_NODES = 2001
#: Step [km] of the water load's rock-equivalent depth Z(P_w) on which the least melting Tp is
#: held (linear between nodes; checked against direct integration in tests/test_geotherm.py),
#: and the largest load held: 4 km, beyond the 3.75 km of the deepest water a bathymetry may
#: give (12 km, lidmelt.grids._lidref). Deeper loads are done by direct integration.
LOAD_STEP_KM = 0.25
LOAD_MAX_KM = 4.0


def node_depths_km(model, pressure_gpa, load_km=0.0) -> np.ndarray:
    """Depth below the seafloor [km] of pressure nodes beneath a water load of rock-equivalent
    depth ``load_km``: Z(P) - Z(P_w) by the model's depth-pressure relation (constant rho g,
    PREM below the join; :mod:`lidmelt.physics._pressure`)."""
    return np.asarray(model.depth_km(np.asarray(pressure_gpa, float), load_km), float)


def _km_per_sqrt_ma(cooling: CoolingModel) -> float:
    """sqrt(kappa x 1 Ma) [km]: the half-space's diffusion length of 1 Ma."""
    return math.sqrt(cooling.diffusivity_m2_s * SECONDS_PER_MA) * 1e-3


@functools.lru_cache(maxsize=32)
def _plate_theta(cooling: CoolingModel, depths: tuple[float, ...]):
    """theta of the plate at ``depths`` [km] (rows) on sqrt(age) nodes (columns), and the nodes."""
    s = np.linspace(0.0, _SQRT_AGE_MAX, _PLATE_NODES)
    zeta = np.asarray(depths) / cooling.plate_thickness_km
    a_m = cooling.plate_thickness_km * 1e3
    tau = (s[1:] ** 2) * cooling.diffusivity_m2_s * SECONDS_PER_MA / (a_m * a_m)
    theta = np.ones((zeta.size, s.size))
    inside = np.flatnonzero((zeta > 0.0) & (zeta < 1.0))
    zz, tt = np.meshgrid(zeta[inside], tau, indexing="ij")
    theta[inside, 1:] = _plate.theta(zz.ravel(), tt.ravel()).reshape(zz.shape)
    theta[zeta <= 0.0, 1:] = 0.0
    return s, theta


def critical_sqrt_age(cooling: CoolingModel, depth_km, theta_star) -> np.ndarray:
    """s* = sqrt(t*/Ma): theta(z, t) >= theta* holds for t <= t* (broadcast arrays).

    Half-space (theta = erf(z / 2 sqrt(kappa t)), Turcotte & Schubert 2002, section 4.15, from
    memory): s* = z / (2 sqrt(kappa Ma) erfinv(theta*)) [derived]. Plate: the root in sqrt(age)
    of the plate's theta (Fourier and image series, :mod:`lidmelt.physics._plate`), interpolated
    on :data:`_PLATE_NODES` nodes. theta* <= 0, or a plate node at or below its base (theta = 1),
    or a plate node whose steady geotherm keeps theta >= theta* (theta* <= z/a), gives
    :data:`SQRT_AGE_CAP`; theta* >= 1 gives 0 (the condition holds only at the ridge, t = 0).
    """
    z, th = np.broadcast_arrays(np.asarray(depth_km, float), np.asarray(theta_star, float))
    out = np.zeros(z.shape)
    with np.errstate(invalid="ignore", divide="ignore"):
        cap = th <= 0.0
        mid = ~cap & (th < 1.0) & (z > 0.0)
    out[cap] = SQRT_AGE_CAP
    if cooling.kind == "half-space":
        out[mid] = z[mid] / (2.0 * _km_per_sqrt_ma(cooling) * special.erfinv(th[mid]))
        return out
    depths = np.unique(z[mid])
    s, theta = _plate_theta(cooling, tuple(depths.tolist()))
    row = np.searchsorted(depths, z[mid])
    out[mid] = _invert_rows(theta, s, row, th[mid])
    return out


def _invert_rows(theta, s, row, target):
    """sqrt(age) where theta[row] (decreasing along s) falls to ``target``; the cap where it
    never does within the nodes."""
    out = np.empty(target.shape)
    order = np.argsort(row, kind="stable")
    bounds = np.searchsorted(row[order], np.arange(theta.shape[0] + 1))
    for r in range(theta.shape[0]):
        sel = order[bounds[r] : bounds[r + 1]]
        if sel.size:
            out[sel] = np.interp(target[sel], theta[r, ::-1], s[::-1], left=SQRT_AGE_CAP)
    return out


@dataclass(frozen=True, eq=False)
class GeothermArrays:
    """The tabulated critical ages of one table, cooling model, minimum top and water slice.

    ``s_star`` (n_tp, n_w, n_p) float32: s* of each column at each pressure node without a
    water load (0 at and below the onset); ``s_run`` its running maximum from the surface
    down; ``onset`` (n_tp, n_w) the columns' onsets [GPa]; ``least_tp`` (n_w, 1, n_s) the least
    Tp [deg C] whose column melts (H > 0) at sqrt(age) = m :data:`SQRT_AGE_STEP` without a
    load (:func:`least_tp_of_loads` gives it on load nodes); ``water_u`` the water coordinates
    of the slices (one for a single water content); ``min_top_km`` the minimum top (crust
    base) [km] below the seafloor. For the exact refinement of a top between two nodes:
    ``deficit`` (like ``s_star``) the columns' latent-heat deficit L [K] (0 below the onset),
    ``depth_km`` (n_p) the nodes' rock-equivalent depths Z(P), ``geotherm`` the cooling model's
    numbers (:func:`geotherm_numbers`). ``model``, ``cooling``, ``tp_c`` and ``pressure_gpa``:
    the melting and cooling models and the table's Tp and pressure nodes.
    """

    s_star: np.ndarray
    s_run: np.ndarray
    onset: np.ndarray
    least_tp: np.ndarray
    water_u: np.ndarray
    min_top_km: float
    deficit: np.ndarray
    depth_km: np.ndarray
    geotherm: GeothermNumbers
    model: object
    cooling: CoolingModel
    tp_c: np.ndarray
    pressure_gpa: np.ndarray
    loads: dict = field(default_factory=dict, repr=False)


def _slices(table: MeltTable, water):
    """(deficit (n_tp, n_w, n_p), onset (n_tp, n_w), water coordinates) of ``water``: every
    water node (None) or one content, the deficit linear in u between nodes as in the table and
    0 below the content's own onset (computed exactly, as the melting table's slices are)."""
    if water is None:
        return table.deficit_k, table.onset_gpa, table.water_u
    j, c = (np.asarray(v).item() for v in table.water_index(np.array(float(water))))
    j1 = min(j + 1, table.water_u.size - 1)
    deficit = (1.0 - c) * table.deficit_k[:, j] + c * table.deficit_k[:, j1]
    onset = onset_pressure_gpa(table.model, table.tp_c, float(water))
    with np.errstate(invalid="ignore"):  # 0 at and below this water's own onset
        deficit = np.where(table.pressure_gpa[None, :] < onset[:, None], deficit, 0.0)
    return deficit[:, None, :], onset[:, None], np.array([float(water) ** WATER_EXPONENT])


def _s_star(cooling, depth_km, deficit, theta_star):
    """s* at nodes of depth ``depth_km`` below the seafloor: 0 where the deficit is not
    positive (NaN: no onset; 0: at and below the onset), where the node is never qualified."""
    with np.errstate(invalid="ignore", divide="ignore"):
        s = critical_sqrt_age(cooling, depth_km, theta_star)
        return np.where(deficit > 0.0, s, 0.0).astype(np.float32)


def _build(table: MeltTable, cooling: CoolingModel, min_top_km: float, water) -> GeothermArrays:
    model = table.model
    deficit, onset, water_u = _slices(table, water)
    p = table.pressure_gpa
    t_is = model.solid_adiabat_c(table.tp_c[:, None, None], p[None, None, :])
    depth = node_depths_km(model, p)
    with np.errstate(invalid="ignore", divide="ignore"):
        theta_star = 1.0 - deficit / (t_is - cooling.surface_temperature_c)
    s_star = _s_star(cooling, depth[None, None, :], deficit, theta_star)
    s_run = np.maximum.accumulate(s_star, axis=2)
    p_min = float(model.pressure_gpa(min_top_km))
    least = _least_tp(table.tp_c, s_star, onset, p, p_min, model, water_u)[:, None, :]
    numbers = geotherm_numbers(cooling, model)
    deficit = np.nan_to_num(deficit, nan=0.0).astype(np.float32)
    return GeothermArrays(
        s_star, s_run, onset, least, water_u, float(min_top_km), deficit, depth, numbers, model,
        cooling, table.tp_c, p,
    )  # fmt: skip


def least_tp_of_loads(arrays: GeothermArrays, n_loads: int) -> np.ndarray:
    """(n_w, n_loads, n_s): the least melting Tp (:func:`_least_tp`) beneath water loads of
    rock-equivalent depth m :data:`LOAD_STEP_KM` (m < ``n_loads``), made once per number of
    load nodes and kept with the arrays (thread-safe).

    Beneath a load the nodes lie Z(P_w) shallower in the plate (s* from the same critical theta
    at z = Z(P) - Z(P_w)) and the minimum top deeper in pressure (P at Z(P_w) + the minimum top).
    """
    n_loads = max(int(n_loads), 1)
    with _LOCK:
        kept = arrays.loads.get("least_tp")
        if kept is not None and kept.shape[1] >= n_loads:
            return kept
    model, cooling = arrays.model, arrays.cooling
    tp, p = arrays.tp_c, arrays.pressure_gpa
    rows = [arrays.least_tp[:, 0, :]]
    deficit = arrays.deficit.astype(np.float64)
    t_is = model.solid_adiabat_c(tp[:, None, None], p[None, None, :])
    theta_star = 1.0 - deficit / (t_is - cooling.surface_temperature_c)
    for m in range(1, n_loads):
        load = m * LOAD_STEP_KM
        depth = node_depths_km(model, p, load)
        s = _s_star(cooling, depth[None, None, :], deficit, theta_star)
        p_min = float(model.pressure_gpa(arrays.min_top_km, load))
        rows.append(_least_tp(tp, s, arrays.onset, p, p_min, model, arrays.water_u))
    out = np.stack(rows, axis=1)
    with _LOCK:
        arrays.loads["least_tp"] = out
    return out


class GeothermNumbers(NamedTuple):
    """What the exact geotherm needs, read by name (every field a float: a named tuple of
    floats, which numba passes by value, as :class:`lidmelt.physics._kernel_records.
    KernelParameters`)."""

    plate: float  #: 0.0 for the half-space, 1.0 for a plate
    inv_two_sqrt_kappa: float  #: 1 / (2 sqrt(kappa Ma)) [1/km]
    plate_thickness_km: float  #: the plate thickness a [km] (0 for the half-space)
    tau_per_ma: float  #: kappa Ma / a^2 (0 for the half-space)
    surface_c: float  #: the surface temperature T0 [deg C]
    adiabat_per_gpa: float  #: the melting model's solid isentrope alpha_s / (rho_s c_p) [1/GPa]


class SearchParameters(NamedTuple):
    """The scalars of the geotherm search (:mod:`lidmelt.physics._geotherm_search`), read by
    name (every field a float, as in :class:`GeothermNumbers`)."""

    tp_min_c: float  #: Tp of the table's first node [deg C]
    inv_tp_step: float  #: 1 / the table's Tp step [1/K]
    pressure_step_gpa: float  #: the table's pressure step [GPa]
    top_max_gpa: float  #: the deepest top node [GPa]
    ambient_c: float  #: ambient Tp [deg C]
    inv_water_step: float  #: 1 / the water-coordinate step (0: one water slice)
    water_max_wt_pct: float  #: the largest water held [wt%] (-1: none; the cells go direct)
    inv_ambient_step: float  #: 1 / the sqrt(age) step of the ambient table (0: no table)
    inv_load_step: float  #: 1 / :data:`LOAD_STEP_KM`
    load_max_km: float  #: the largest water load held [km] (beyond it the cell goes direct)


def geotherm_numbers(cooling: CoolingModel, model) -> GeothermNumbers:
    """What the exact geotherm needs (:class:`GeothermNumbers`)."""
    plate = cooling.kind != "half-space"
    a_km = cooling.plate_thickness_km if plate else 0.0
    tau = cooling.diffusivity_m2_s * SECONDS_PER_MA / (a_km * 1e3) ** 2 if plate else 0.0
    values = (plate, 0.5 / _km_per_sqrt_ma(cooling), a_km, tau, cooling.surface_temperature_c,
              model.adiabat_coefficient_per_gpa)  # fmt: skip
    return GeothermNumbers(*(float(v) for v in values))


def _least_tp(tp, s_star, onset, p, p_min, model, water_u):
    """(n_w, n_s): the least Tp whose column melts at each sqrt(age) node (NaN: none).

    A column melts at sqrt(age) s when s*(P) >= s somewhere between the minimum top and its
    onset; its largest s* there is s_max(Tp). The least Tp with s_max >= s is found on the Tp
    nodes (a running maximum in Tp makes it the first) and linearly between them. It is never
    less than the Tp whose onset lies at the minimum top (the isotherm rule's Tp* at that top,
    Tp* = T_sol(P_min) exp(-alpha_s P_min / (rho_s c_p)), docs/physics.md): a column whose
    onset is shallower than the minimum top does not melt at any age.
    """
    dp = p[1] - p[0]
    k0 = int(p_min / dp)
    if k0 + 1 >= p.size:  # a minimum top beyond the table's nodes: its cells go direct
        return np.full((s_star.shape[1], round(_SQRT_AGE_MAX / SQRT_AGE_STEP) + 1), np.nan)
    b0 = p_min / dp - k0
    at_min = s_star[:, :, k0] + b0 * (s_star[:, :, k0 + 1] - s_star[:, :, k0])
    s_max = np.maximum(at_min, s_star[:, :, k0 + 1 :].max(axis=2))
    with np.errstate(invalid="ignore"):
        s_max = np.where(onset > p_min, s_max, -1.0)
    grid = SQRT_AGE_STEP * np.arange(round(_SQRT_AGE_MAX / SQRT_AGE_STEP) + 1)
    out = np.full((s_star.shape[1], grid.size), np.nan)
    for j in range(s_star.shape[1]):
        col = s_max[:, j]
        run = np.maximum.accumulate(col)
        i = np.searchsorted(run, grid, side="left")
        ok = i < tp.size
        i1 = np.clip(i, 1, tp.size - 1)
        lo, hi = col[i1 - 1], col[i1]
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = np.where(lo >= 0.0, (grid - lo) / (hi - lo), 0.0)
        # i == 0: even the coldest node melts; the isotherm rule's Tp* below is the least Tp
        t = np.where(i == 0, -np.inf, tp[i1 - 1] + np.clip(frac, 0.0, 1.0) * (tp[i1] - tp[i1 - 1]))
        w = water_u[j] ** (1.0 / WATER_EXPONENT) if water_u[j] > 0 else 0.0
        t_iso = (model.solidus_c(p_min, w) + 273.15) * np.exp(
            -model.adiabat_coefficient_per_gpa * p_min
        ) - 273.15
        out[j] = np.where(ok, np.maximum(t, t_iso), np.nan)
    return out


def least_tp_for(arrays: GeothermArrays, load) -> np.ndarray:
    """The least melting Tp (n_w, n_loads, n_s) on enough load nodes for the loads ``load``
    [km] (up to :data:`LOAD_MAX_KM`; the arrays' own, one node, where every load is 0)."""
    with np.errstate(invalid="ignore"):
        top = float(np.nanmax(load, initial=0.0))
    n = math.ceil(min(top, LOAD_MAX_KM) / LOAD_STEP_KM) + 1
    return arrays.least_tp if n <= 1 else least_tp_of_loads(arrays, n)


_CACHE: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()
_LOCK = threading.Lock()
_KEPT = 64  # (cooling model, minimum top, water) entries kept per table


def geotherm_arrays(
    table: MeltTable, cooling: CoolingModel, min_top_km: float, water
) -> GeothermArrays:
    """:class:`GeothermArrays` of ``table`` for a cooling model, minimum top [km] and one water
    content [wt%] (a float) or every water node (None); made once and kept (thread-safe)."""
    key = (cooling, float(min_top_km), None if water is None else float(water))
    with _LOCK:
        per_table = _CACHE.setdefault(table, {})
        if key not in per_table:
            if len(per_table) >= _KEPT:
                per_table.clear()
            per_table[key] = _build(table, cooling, float(min_top_km), key[2])
        return per_table[key]
