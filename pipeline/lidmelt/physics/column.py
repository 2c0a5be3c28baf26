"""The isentropic melting column beneath a lid: the direct, vectorized integrator.

Mantle at potential temperature Tp rises along its solid isentrope, crosses the (water-depressed)
solidus at the onset pressure P0 and melts by decompression, consuming latent heat, until it
meets the top of the melting column (the deeper of the lid base and a minimum depth). This module
finds the onset (:func:`onset_pressure_gpa`), integrates columns from it
(:func:`integrate_columns`, which the table also uses to tabulate them) and traces one column
(:func:`column_profile`). Turning inputs into the output variables and their validity flag is
:mod:`lidmelt.physics.evaluate`. Every function here takes arrays of any shape and broadcasts
them; no Python loop runs over cells. The definitions (Tp, depth, onset, top of melting, melt
thickness) are those of docs/physics.md, section "Definitions lidmelt fixes".

Numerical method
----------------
Above the solidus the state (P, T, F) conserves the entropy of [Katz2003]_ eq. 20,
ds = c_p dT/T - abar dP + Delta S dF = 0 with abar = (1 - F) alpha_s/rho_s + F alpha_f/rho_f
(Katz et al. 2003, eq. 20 [from memory]; the discrete form is derived in docs/physics.md,
section "Isentropic decompression melting"). Each pressure step conserves it exactly in discrete
form,

    c_p ln(T1/T0) - abar((F0 + F1)/2) (P1 - P0) + Delta S (F1 - F0) = 0,   T1 = T_model(P1, F1),

(second order in the step, the trapezoid rule for the abar term) and is solved for F1 by
bracketing; :meth:`MeltingModel.temperature_c` is explicit in F, so the hydrous law needs no
inner iteration and the kinks at the solidus and at cpx exhaustion need no derivatives. Steps
fall on a fixed pressure grid (plus one partial step from the onset and one to the top); a test
proves convergence in the step.

References
----------
.. [Katz2003] Katz, R. F., Spiegelman, M. & Langmuir, C. H. (2003). A new parameterization of
   hydrous mantle melting. Geochem. Geophys. Geosyst. 4(9), 1073, doi:10.1029/2002GC000433.
"""

from __future__ import annotations

import numpy as np

from lidmelt.physics.melting import GPA, MeltingModel, get_model

__all__ = [
    "DEFAULT_MIN_TOP_KM",
    "DEFAULT_PRESSURE_STEP_GPA",
    "column_profile",
    "integrate_columns",
    "onset_pressure_gpa",
    "refine_onset_gpa",
    "top_of_melting_km",
]

DEFAULT_PRESSURE_STEP_GPA = 0.01  # proven converged in tests/test_column.py
#: Default minimum top of melting [km]: the base of normal oceanic crust, 7.1 +- 0.8 km by
#: seismic refraction (White, McKenzie & O'Nions 1992, JGR 97, 19683; from memory).
DEFAULT_MIN_TOP_KM = 7.0
_SEARCH_STEP_GPA = 0.05
_BLOCK = 8192


# ------------------------------------------------------------------------------------------------
# onset
# ------------------------------------------------------------------------------------------------
def onset_pressure_gpa(model: MeltingModel, potential_temperature_c, water_wt_pct=0.0):
    """Shallowest pressure [GPa] where the solid isentrope meets the solidus; NaN if none.

    Searched from the surface down to ``model.max_onset_pressure_gpa`` on a 0.05 GPa grid, then
    refined by bisection to 1e-12 GPa. The search runs from the top because the Katz et al. (2003)
    solidus quadratic turns over at 13.03 GPa [derived: dT/dP = A2 + 2 A3 P = 0], so a search
    from below could find the wrong crossing (docs/physics.md, section "Where the onset is
    searched"). NaN where Tp is at or below
    the surface solidus (no crossing at all) or where the isentrope stays above the solidus down
    to the search limit.
    """
    tp, w = np.broadcast_arrays(
        np.asarray(potential_temperature_c, float), np.asarray(water_wt_pct, float)
    )
    out = np.full(tp.shape, np.nan)
    flat_tp, flat_w, flat_out = tp.ravel(), w.ravel(), out.reshape(-1)
    grid = np.arange(0.0, model.max_onset_pressure_gpa + 1e-9, _SEARCH_STEP_GPA)
    for start in range(0, flat_tp.size, _BLOCK // 4):
        sl = slice(start, start + _BLOCK // 4)
        t, ww = flat_tp[sl, None], flat_w[sl, None]
        excess = model.solid_adiabat_c(t, grid[None, :]) - model.solidus_c(grid[None, :], ww)
        below = excess <= 0.0
        below[:, 0] = False
        has = below.any(axis=1) & (excess[:, 0] > 0.0)
        k = np.argmax(below, axis=1)
        lo = grid[np.maximum(k - 1, 0)]
        hi = grid[k]
        tt, wv = t[:, 0], ww[:, 0]
        for _ in range(42):
            mid = 0.5 * (lo + hi)
            melted = model.solid_adiabat_c(tt, mid) - model.solidus_c(mid, wv) > 0.0
            lo = np.where(melted, mid, lo)
            hi = np.where(melted, hi, mid)
        flat_out[sl] = np.where(has, 0.5 * (lo + hi), np.nan)
    return out


def refine_onset_gpa(
    model: MeltingModel, potential_temperature_c, water_wt_pct, guess_gpa, *, iterations: int = 2
):
    """Newton steps on isentrope minus solidus from a close guess of the onset pressure [GPa].

    Used by the table path to make interpolated onsets exact where the water content varies;
    the derivative is a forward difference over 1e-6 GPa. Callers keep the guess only where it
    is close (away from the tangency of isentrope and solidus, where Newton is ill-conditioned).
    """
    p = np.asarray(guess_gpa, float)
    delta = 1e-6

    def gap(pp):
        return model.solid_adiabat_c(potential_temperature_c, pp) - model.solidus_c(
            pp, water_wt_pct
        )

    for _ in range(iterations):
        g0 = gap(p)
        slope = (gap(p + delta) - g0) / delta
        with np.errstate(invalid="ignore", divide="ignore"):
            p = np.where(slope < 0, p - g0 / slope, p)
    return p


# ------------------------------------------------------------------------------------------------
# one entropy-conserving step and the integrator
# ------------------------------------------------------------------------------------------------
def _step(model, p0, t0_k, f0, p1, water):
    """Advance (p0, t0_k, f0) to pressure p1 along the isentrope; return (t1_k, f1).

    Solves h(F) = c_p ln(T(p1, F)/t0) - abar((f0 + F)/2)(p1 - p0) + dS (F - f0) = 0, which
    increases with F, by the Illinois variant of regula falsi on a bracket in [0, 1].
    """
    cp = model.specific_heat_j_kg_k
    ds = model.entropy_of_melting_j_kg_k
    a_s = model.solid_expansivity_k / model.solid_density_kg_m3
    a_f = model.melt_expansivity_k / model.melt_density_kg_m3
    dp_pa = (p1 - p0) * GPA
    terms = model.pressure_terms(p1, water)

    def h(f):
        t1 = model.temperature_from_terms(terms, f) + 273.15
        fm = 0.5 * (f0 + f)
        abar = (1.0 - fm) * a_s + fm * a_f
        return cp * np.log(t1 / t0_k) - abar * dp_pa + ds * (f - f0)

    lo = np.maximum(f0 - 0.02, 0.0)
    hi = np.minimum(f0 + 0.05, 1.0)
    h_lo, h_hi = h(lo), h(hi)
    widen = ~((h_lo <= 0.0) & (h_hi >= 0.0))
    if widen.any():
        lo = np.where(widen, 0.0, lo)
        hi = np.where(widen, 1.0, hi)
        h_lo = np.where(widen, h(lo), h_lo)
        h_hi = np.where(widen, h(hi), h_hi)
    solid = h_lo > 0.0  # even F = 0 is hotter than the isentrope: the column is subsolidus
    molten = h_hi < 0.0
    side = np.zeros(lo.shape, dtype=np.int8)
    f = lo
    for _ in range(60):
        denom = h_hi - h_lo
        with np.errstate(invalid="ignore", divide="ignore"):
            f = np.where(denom > 0.0, hi - h_hi * (hi - lo) / denom, 0.5 * (lo + hi))
        f = np.clip(f, lo, hi)
        hf = h(f)
        pos = hf > 0.0
        # Illinois: halve the retained end's value when the same end is kept twice.
        h_lo = np.where(~pos & (side == -1), 0.5 * h_lo, h_lo)
        h_hi = np.where(pos & (side == 1), 0.5 * h_hi, h_hi)
        hi = np.where(pos, f, hi)
        h_hi = np.where(pos, hf, h_hi)
        lo = np.where(pos, lo, f)
        h_lo = np.where(pos, h_lo, hf)
        side = np.where(pos, 1, -1).astype(np.int8)
        if np.all((hi - lo) < 1e-13) or np.nanmax(np.abs(hf), initial=0.0) < 1e-9:
            break
    f = np.where(solid, 0.0, np.where(molten, 1.0, f))
    t1 = model.temperature_from_terms(terms, f) + 273.15
    if solid.any():
        fm = 0.5 * f0
        abar = (1.0 - fm) * a_s + fm * a_f
        t_solid = t0_k * np.exp((abar * dp_pa + ds * f0) / cp)
        t1 = np.where(solid, t_solid, t1)
    return t1, f


_NODE_KEYS = (
    "node_melt_thickness_km",
    "node_melt_fraction",
    "node_int_p_df_gpa",
    "node_temperature_c",
)


def integrate_columns(
    model,
    potential_temperature_c,
    water_wt_pct,
    p_onset,
    p_top,
    *,
    step_gpa=DEFAULT_PRESSURE_STEP_GPA,
    record_nodes=None,
):
    """Integrate 1-D arrays of columns from their onset ``p_onset`` up to ``p_top`` [GPa].

    Steps fall on the nodes k * ``step_gpa`` below each onset (one partial step from the onset
    and one to ``p_top``). Columns with NaN onset or ``p_onset <= p_top`` stay unmelted.

    Parameters
    ----------
    record_nodes : int, optional
        If given, also return the state at every pressure node ``j * step_gpa`` for
        j < ``record_nodes`` (zeros below the onset), as arrays of shape (n, record_nodes).

    Returns
    -------
    dict
        ``melt_thickness_km``, ``max_melt_fraction`` (F at the top), ``temperature_c`` at the top,
        ``int_p_df_gpa`` (integral of P dF), and with ``record_nodes`` the recorded
        ``node_melt_thickness_km``, ``node_melt_fraction``, ``node_int_p_df_gpa``,
        ``node_temperature_c``.
    """
    tp, water, p_on, p_top = (
        a.ravel()
        for a in np.broadcast_arrays(
            *(np.asarray(v, float) for v in (potential_temperature_c, water_wt_pct, p_onset, p_top))
        )
    )
    melts = np.isfinite(p_on) & (p_on > p_top)
    t_k = model.solid_adiabat_c(tp, np.where(melts, p_on, p_top)) + 273.15
    f = np.zeros(tp.shape)
    h_km = np.zeros(tp.shape)
    g = np.zeros(tp.shape)
    rec = None
    if record_nodes is not None:
        rec = {k: np.zeros((tp.size, record_nodes)) for k in _NODE_KEYS}
    if melts.any():
        idx = np.flatnonzero(melts)
        t_k[idx], f[idx], h_km[idx], g[idx] = _march(
            model, p_on[idx], p_top[idx], water[idx], t_k[idx], step_gpa, rows=idx, rec=rec
        )
    out = {
        "melt_thickness_km": h_km,
        "max_melt_fraction": f,
        "temperature_c": t_k - 273.15,
        "int_p_df_gpa": g,
    }
    if rec is not None:
        out.update(rec)
    return out


def _march(model, p_on, p_top, water, t_k, step_gpa, *, rows, rec):
    """Step melting columns (1-D, ``p_on > p_top``) from the onset temperature ``t_k`` to the top.

    Returns (T [K], F, H [km], integral of P dF [GPa]) at ``p_top``. With ``rec``, the state at
    every pressure node is written into it at the global ``rows`` (see :func:`_record_nodes`).
    """
    km_per_gpa = float(model.depth_km(1.0))
    # the first node strictly shallower than the onset
    first = np.ceil(p_on / step_gpa - 1.0 - 1e-9)
    nsteps = int(np.max(first - np.floor(p_top / step_gpa)) + 2)
    p, t_k = p_on.copy(), t_k.copy()
    f, h_km, g = np.zeros(p.shape), np.zeros(p.shape), np.zeros(p.shape)
    for k in range(nsteps):
        p_next = np.maximum((first - k) * step_gpa, p_top)
        sub = np.flatnonzero(p > p_top)
        if sub.size == 0:
            break
        t1, f1 = _step(model, p[sub], t_k[sub], f[sub], p_next[sub], water[sub])
        h_km[sub] += 0.5 * (f[sub] + f1) * (p[sub] - p_next[sub]) * km_per_gpa
        g[sub] += 0.5 * (p[sub] + p_next[sub]) * (f1 - f[sub])
        p[sub], t_k[sub], f[sub] = p_next[sub], t1, f1
        if rec is not None:
            _record_nodes(rec, rows[sub], p[sub], h_km[sub], f[sub], g[sub], t_k[sub], step_gpa)
    return t_k, f, h_km, g


def _record_nodes(rec, rows, p, h_km, f, g, t_k, step_gpa):
    """Store the state of the columns ``rows`` whose pressure ``p`` lies on a recorded node."""
    j = np.rint(p / step_gpa).astype(int)
    on_node = (np.abs(p - j * step_gpa) < 1e-9) & (j < rec["node_melt_fraction"].shape[1])
    rows, cols = rows[on_node], j[on_node]
    rec["node_melt_thickness_km"][rows, cols] = h_km[on_node]
    rec["node_melt_fraction"][rows, cols] = f[on_node]
    rec["node_int_p_df_gpa"][rows, cols] = g[on_node]
    rec["node_temperature_c"][rows, cols] = t_k[on_node] - 273.15


# ------------------------------------------------------------------------------------------------
# the top of melting and one column's profile
# ------------------------------------------------------------------------------------------------
def top_of_melting_km(lid_depth_km, min_top_km=DEFAULT_MIN_TOP_KM):
    """The top of the melting column [km]: the deeper of the lid base and ``min_top_km``."""
    return np.maximum(np.asarray(lid_depth_km, float), float(min_top_km))


def column_profile(
    potential_temperature_c: float,
    lid_depth_km: float,
    water_wt_pct: float = 0.0,
    *,
    model: str | MeltingModel = "katz2003",
    min_top_km: float = DEFAULT_MIN_TOP_KM,
    step_gpa: float = DEFAULT_PRESSURE_STEP_GPA,
    below_onset_km: float = 30.0,
):
    """Depth, pressure, temperature and melt fraction along one column, deepest first.

    The profile starts ``below_onset_km`` below the onset on the solid isentrope (or at twice the
    top depth when the column does not melt) and ends at the top of melting.

    Returns
    -------
    dict of numpy.ndarray
        ``depth_km``, ``pressure_gpa``, ``temperature_c``, ``melt_fraction``.
    """
    model = get_model(model)
    tp, w = float(potential_temperature_c), float(water_wt_pct)
    top_km = float(top_of_melting_km(lid_depth_km, min_top_km))
    top_p = float(model.pressure_gpa(top_km))
    p_on = float(onset_pressure_gpa(model, tp, w))
    base_p = (p_on if np.isfinite(p_on) else top_p) + float(model.pressure_gpa(below_onset_km))
    base_p = max(base_p, 2.0 * top_p)
    nodes = int(np.ceil(base_p / step_gpa)) + 1
    pressures = np.linspace(base_p, top_p, max(nodes - int(top_p / step_gpa), 2))
    if np.isfinite(p_on) and p_on > top_p:
        solid_p = pressures[pressures > p_on]
        melt_p = np.concatenate([[p_on], pressures[pressures < p_on]])
        temps, fracs = [], []
        t_k, f = model.solid_adiabat_c(tp, p_on) + 273.15, 0.0
        prev = p_on
        for pn in melt_p:
            if pn < prev:
                t_arr, f_arr = _step(
                    model,
                    np.array([prev]),
                    np.array([t_k]),
                    np.array([f]),
                    np.array([pn]),
                    np.array([w]),
                )
                t_k, f = float(t_arr[0]), float(f_arr[0])
            temps.append(t_k - 273.15)
            fracs.append(f)
            prev = pn
        p_all = np.concatenate([solid_p, melt_p])
        t_all = np.concatenate([model.solid_adiabat_c(tp, solid_p), temps])
        f_all = np.concatenate([np.zeros(solid_p.size), fracs])
    else:
        p_all = pressures
        t_all = model.solid_adiabat_c(tp, p_all)
        f_all = np.zeros(p_all.size)
    return {
        "depth_km": model.depth_km(p_all),
        "pressure_gpa": p_all,
        "temperature_c": t_all,
        "melt_fraction": f_all,
    }
