"""The isentropic melting column beneath a lid: the direct, vectorized integrator.

Mantle at potential temperature Tp rises along its solid isentrope, crosses the (water-depressed)
solidus at the onset pressure P0 and melts by decompression, consuming latent heat, until it
meets the top of the melting column (the deeper of the lid base and a minimum depth). This module
finds the onset (:func:`onset_pressure_gpa`), integrates columns from it
(:func:`integrate_columns`, which the table also uses to tabulate them) and traces one column
(:func:`column_profile`). Turning inputs into the output variables and their validity flag is
:mod:`lidmelt.physics._evaluate`. Every function here takes arrays of any shape and broadcasts
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
fall on a fixed pressure grid (plus one partial step from the onset and one to the top, the
interval to a top within one step of the surface in four substeps); a test proves convergence in
the step. All columns step together, node by node (:func:`integrate_columns`).

.. [Katz2003] Katz, R. F., Spiegelman, M. & Langmuir, C. H. (2003), G-cubed 4(9), 1073,
   doi:10.1029/2002GC000433.
"""

from __future__ import annotations

import numpy as np

from lidmelt.physics._melting import GPA, MeltingModel, get_model

DEFAULT_PRESSURE_STEP_GPA = 0.01  # proven converged in tests/test_column.py
#: Default minimum top of melting [km]: the base of normal oceanic crust, 7.1 +- 0.8 km by
#: seismic refraction (White, McKenzie & O'Nions 1992, JGR 97, 19683; from memory).
DEFAULT_MIN_TOP_KM = 7.0
_SEARCH_STEP_GPA = 0.05
_BLOCK = 8192
_START_STEPS = 3  # steps from the onset taken for all columns together (see _march)
_SURFACE_SUBSTEPS = 4  # steps in the interval from the first node to the surface (see _march)
_SCAN_BELOW = 16  # columns left in a root solve from which their brackets are scanned (_step)


# --- onset ---
def onset_pressure_gpa(model: MeltingModel, potential_temperature_c, water_wt_pct=0.0):
    """Shallowest pressure [GPa] where the solid isentrope meets the solidus, else the floor.

    Searched from the surface down to the upper mantle's floor ``model.max_onset_pressure_gpa``
    on a 0.05 GPa grid, then bisected to 1e-12 GPa; from the top, because a hot isentrope comes
    close to the flattening continued solidus again deeper down (docs/physics.md, "Where the
    onset is searched"). NaN where Tp is at or below the surface solidus; the floor where the
    isentrope stays above the solidus down to it (docs/physics.md, "The upper mantle's floor").
    """
    tp, w = np.broadcast_arrays(
        np.asarray(potential_temperature_c, float), np.asarray(water_wt_pct, float)
    )
    out = np.full(tp.shape, np.nan)
    flat_tp, flat_w, flat_out = tp.ravel(), w.ravel(), out.reshape(-1)
    floor = float(model.max_onset_pressure_gpa)
    grid = np.arange(0.0, floor + 1e-9, _SEARCH_STEP_GPA)
    if grid[-1] < floor:
        grid = np.append(grid, floor)
    for start in range(0, flat_tp.size, _BLOCK // 4):
        sl = slice(start, start + _BLOCK // 4)
        t, ww = flat_tp[sl, None], flat_w[sl, None]
        # the solidus on the grid depends on the water only: once per distinct water content
        waters, which = np.unique(ww[:, 0], return_inverse=True)
        solidus = model.solidus_c(grid[None, :], waters[:, None])[which]
        excess = model.solid_adiabat_c(t, grid[None, :]) - solidus
        below = excess <= 0.0
        below[:, 0] = False
        hot = excess[:, 0] > 0.0
        has = below.any(axis=1) & hot
        at_floor = hot & ~below.any(axis=1)  # above the solidus down to the floor
        k = np.argmax(below, axis=1)
        lo = grid[np.maximum(k - 1, 0)]
        hi = grid[k]
        tt, wv = t[:, 0], ww[:, 0]
        for _ in range(42):
            mid = 0.5 * (lo + hi)
            melted = model.solid_adiabat_c(tt, mid) - model.solidus_c(mid, wv) > 0.0
            lo = np.where(melted, mid, lo)
            hi = np.where(melted, hi, mid)
        flat_out[sl] = np.where(has, 0.5 * (lo + hi), np.where(at_floor, floor, np.nan))
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


# --- one entropy-conserving step and the integrator ---
class _Balance:
    """The discrete entropy balance h(F) of one step, for a set of columns (see :func:`_step`)."""

    def __init__(self, model, p0, t0_k, f0, p1, water):
        self.model = model
        self.cp = model.specific_heat_j_kg_k
        self.ds = model.entropy_of_melting_j_kg_k
        self.a_s = model.solid_expansivity_k / model.solid_density_kg_m3
        self.a_f = model.melt_expansivity_k / model.melt_density_kg_m3
        self.shape = np.shape(p1)
        self.terms = model.pressure_terms(p1, water)
        self.t0_k, self.f0, self.dp_pa = t0_k, f0, (p1 - p0) * GPA

    def take(self, idx):
        """The balance of the columns ``idx`` only (the terms of other columns are dropped)."""
        sub = object.__new__(_Balance)
        sub.__dict__.update(self.__dict__)
        sub.terms = tuple(
            x[idx] if isinstance(x, np.ndarray) and x.shape == self.shape else x for x in self.terms
        )
        sub.t0_k, sub.f0, sub.dp_pa = self.t0_k[idx], self.f0[idx], self.dp_pa[idx]
        sub.shape = sub.f0.shape
        return sub

    def __call__(self, f):
        """(h(F) [J kg^-1 K^-1], T(p1, F) [K]); h increases with F."""
        t1 = self.model.temperature_from_terms(self.terms, f) + 273.15
        fm = 0.5 * (self.f0 + f)
        abar = (1.0 - fm) * self.a_s + fm * self.a_f
        return self.cp * np.log(t1 / self.t0_k) - abar * self.dp_pa + self.ds * (f - self.f0), t1


def _bracket(bal, guess, slope):
    """A bracket [lo, hi] of the root of h, with h at its ends.

    Where a ``guess`` and the slope of h at the previous step are given, the bracket is the
    guess and a Newton step from it with that slope, overshot by 10 %: near the root the two
    values of h nearly always differ in sign. Where they do not, the bracket grows away from the
    end nearer the root (h increases with F), by factors of 8. Where there is no guess, or
    growing fails, the bracket is [f0 - 0.02, f0 + 0.05], then [0, 1], each only for the
    columns the previous one did not bracket.
    """
    f0 = bal.f0
    lo, hi = np.maximum(f0 - 0.02, 0.0), np.minimum(f0 + 0.05, 1.0)
    if guess is None:
        guess = slope = lo
    has = np.isfinite(guess * slope) & (slope > 0)
    x_a = np.where(has, guess, lo).clip(0.0, 1.0)
    h_a = bal(x_a)[0]
    with np.errstate(invalid="ignore", divide="ignore"):
        x_b = np.where(has, x_a - 1.1 * h_a / slope, hi).clip(0.0, 1.0)
    h_b = bal(x_b)[0]
    swap = x_b < x_a
    lo, hi = np.where(swap, x_b, x_a), np.where(swap, x_a, x_b)
    h_lo, h_hi = np.where(swap, h_b, h_a), np.where(swap, h_a, h_b)
    width = np.maximum(hi - lo, 1e-7)
    for _ in range(6):
        miss = np.flatnonzero(has & ~((h_lo <= 0.0) & (h_hi >= 0.0)) & (width < 0.05))
        if miss.size == 0:
            break
        up = h_hi[miss] < 0.0  # the root lies above hi, else below lo (h increases with F)
        width[miss] *= 8.0
        near = np.where(up, hi[miss], lo[miss])
        h_near = np.where(up, h_hi[miss], h_lo[miss])
        far = np.where(up, near + width[miss], near - width[miss]).clip(0.0, 1.0)
        h_far = bal.take(miss)(far)[0]
        lo[miss], h_lo[miss] = np.where(up, near, far), np.where(up, h_near, h_far)
        hi[miss], h_hi[miss] = np.where(up, far, near), np.where(up, h_far, h_near)
    for level in (1, 2):
        miss = np.flatnonzero(~((h_lo <= 0.0) & (h_hi >= 0.0)))
        if miss.size == 0:
            break
        if level == 1:
            lo[miss], hi[miss] = np.maximum(f0[miss] - 0.02, 0.0), np.minimum(f0[miss] + 0.05, 1.0)
        else:
            lo[miss], hi[miss] = 0.0, 1.0
        sub = bal.take(miss)
        h_lo[miss], h_hi[miss] = sub(lo[miss])[0], sub(hi[miss])[0]
    return lo, hi, h_lo, h_hi


def _scan(bal, lo, hi, h_lo, h_hi, points=32):
    """h at ``points`` equally spaced inside each bracket, in one call.

    Returns the sub-bracket that holds the root (h increases with F) with h at its ends, and
    the scanned point of least |h| with h and T there.
    """
    n = lo.size
    x = lo[:, None] + (hi - lo)[:, None] * (np.arange(1, points + 1) / (points + 1))
    h, t = bal.take(np.repeat(np.arange(n), points))(x.ravel())
    h, t = h.reshape(n, points), t.reshape(n, points)
    rows = np.arange(n)
    above = h > 0.0
    k = np.where(above.any(axis=1), above.argmax(axis=1), points)  # first point above the root
    below, first = np.maximum(k - 1, 0), np.minimum(k, points - 1)
    new_lo = np.where(k > 0, x[rows, below], lo)
    new_h_lo = np.where(k > 0, h[rows, below], h_lo)
    new_hi = np.where(k < points, x[rows, first], hi)
    new_h_hi = np.where(k < points, h[rows, first], h_hi)
    best = np.argmin(np.abs(h), axis=1)
    return new_lo, new_hi, new_h_lo, new_h_hi, x[rows, best], h[rows, best], t[rows, best]


def _step(model, p0, t0_k, f0, p1, water, guess=None, slope=None):
    """Advance (p0, t0_k, f0) to pressure p1 along the isentrope; return (t1_k, f1, slope).

    Solves h(F) = c_p ln(T(p1, F)/t0) - abar((f0 + F)/2)(p1 - p0) + dS (F - f0) = 0, which
    increases with F, by the Anderson-Bjorck variant of regula falsi on a bracket in [0, 1]
    (:func:`_bracket`; ``guess`` and the ``slope`` dh/dF of the previous step, NaN where none,
    start it; when few columns are left, their brackets are narrowed by :func:`_scan`). Each
    column iterates until |h| < 1e-9 J kg^-1 K^-1 or its bracket is narrower than 1e-13,
    whatever the starting bracket. The ``slope`` returned is the secant of h over
    the last two iterates (NaN where the column did not iterate), for the next step.
    """
    bal = _Balance(model, p0, t0_k, f0, p1, water)
    lo, hi, h_lo, h_hi = _bracket(bal, guess, slope)
    solid = h_lo > 0.0  # even F = 0 is hotter than the isentrope: the column is subsolidus
    molten = h_hi < 0.0
    f = lo.copy()
    t1 = np.empty(f.shape)
    dhdf = np.full(f.shape, np.nan)
    act = np.flatnonzero(~(solid | molten))
    sub = bal.take(act)
    lo, hi, h_lo, h_hi = lo[act], hi[act], h_lo[act], h_hi[act]
    last, h_last = lo, h_lo
    was_pos = was_neg = np.zeros(act.shape, bool)  # which end the last iterate replaced
    for it in range(60):
        if act.size == 0:
            break
        if it in (2, 4) and act.size <= _SCAN_BELOW:
            # at the 3rd and 5th iterate, the few columns left (a kink of the melting law in
            # the bracket slows regula falsi down) get one call that scans their brackets,
            # instead of several calls one after the other
            lo, hi, h_lo, h_hi, fa, hf, tf = _scan(sub, lo, hi, h_lo, h_hi)
            with np.errstate(invalid="ignore", divide="ignore"):
                dhdf[act] = (h_hi - h_lo) / (hi - lo)
            was_pos = was_neg = np.zeros(act.shape, bool)
            last, h_last = fa, hf
        else:
            denom = h_hi - h_lo
            with np.errstate(invalid="ignore", divide="ignore"):
                fa = np.where(denom > 0.0, hi - h_hi * (hi - lo) / denom, 0.5 * (lo + hi))
            fa = np.minimum(np.maximum(fa, lo), hi)
            hf, tf = sub(fa)
            pos = hf > 0.0
            # Anderson-Bjorck: when the same end is replaced twice running, scale the value at
            # the end kept by m = 1 - h(new)/h(replaced end), or by 1/2 where m <= 0
            with np.errstate(invalid="ignore", divide="ignore"):
                m = 1.0 - hf / np.where(pos, h_hi, h_lo)
                dhdf[act] = (hf - h_last) / (fa - last)
            m = np.where(m > 0.0, m, 0.5)
            neg = ~pos
            h_lo = np.where(pos & was_pos, m * h_lo, h_lo)
            h_hi = np.where(neg & was_neg, m * h_hi, h_hi)
            hi, h_hi = np.where(pos, fa, hi), np.where(pos, hf, h_hi)
            lo, h_lo = np.where(pos, lo, fa), np.where(pos, h_lo, hf)
            last, h_last, was_pos, was_neg = fa, hf, pos, neg
        f[act], t1[act] = fa, tf
        going = ((hi - lo) >= 1e-13) & (np.abs(hf) >= 1e-9)  # NaN (no melting law) stops too
        if not going.all():
            act, lo, hi, h_lo, h_hi, last, h_last, was_pos, was_neg = (
                a[going] for a in (act, lo, hi, h_lo, h_hi, last, h_last, was_pos, was_neg)
            )
            sub = sub.take(going)
    if molten.any():
        f[molten] = 1.0
        t1[molten] = bal.take(molten)(f[molten])[1]
    if solid.any():
        f[solid] = 0.0
        fm = 0.5 * f0[solid]
        abar = (1.0 - fm) * bal.a_s + fm * bal.a_f
        t1[solid] = t0_k[solid] * np.exp((abar * bal.dp_pa[solid] + bal.ds * f0[solid]) / bal.cp)
    return t1, f, dhdf


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
    deep_step_gpa=None,
):
    """Integrate 1-D arrays of columns from their onset ``p_onset`` up to ``p_top`` [GPa].

    Steps fall on the nodes k * ``step_gpa`` below each onset (one partial step from the onset
    and one to ``p_top``). Columns with NaN onset or ``p_onset <= p_top`` stay unmelted.

    Parameters
    ----------
    record_nodes : int, optional
        If given, also return the state at every pressure node ``j * step_gpa`` for
        j < ``record_nodes`` (zeros below the onset), as arrays of shape (n, record_nodes).
    deep_step_gpa : float, optional
        With ``record_nodes``: below the deepest recorded node, the nodes (and steps) are
        ``deep_step_gpa`` apart instead of ``step_gpa``.

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
        # node-major while stepping: the columns of one loop share a node, so each write is a row
        rec = {k: np.zeros((record_nodes, tp.size)) for k in _NODE_KEYS}
    if melts.any():
        idx = np.flatnonzero(melts)
        t_start, f_start = _at_floor_in_equilibrium(model, p_on[idx], t_k[idx], water[idx])
        t_k[idx], f[idx], h_km[idx], g[idx] = _march(
            model,
            p_on[idx],
            p_top[idx],
            water[idx],
            t_start,
            _Nodes(step_gpa, deep_step_gpa, None if record_nodes is None else record_nodes - 1),
            rows=idx,
            rec=rec,
            f_start=f_start,
        )
    out = {
        "melt_thickness_km": h_km,
        "max_melt_fraction": f,
        "temperature_c": t_k - 273.15,
        "int_p_df_gpa": g,
    }
    if rec is not None:
        out.update((k, v.T) for k, v in rec.items())
    return out


def _advance(model, now, p_next, water, km_per_gpa, substeps=1):
    """Step the columns ``now`` (P, T, F, H, int P dF, -dF/dP, dh/dF) to ``p_next``.

    In ``substeps`` equal steps; the first starts from F extrapolated from the last step. H
    grows by the mean F times the step's depth (:meth:`DepthPressure.step_km`).
    """
    p_start = now[0]
    join = model.depth_pressure.join_gpa
    for k in range(1, substeps + 1):
        p, t, f, h_km, g, dfdp, dhdf = now
        p1 = p_next if k == substeps else p_start + (p_next - p_start) * (k / substeps)
        dp = p - p1
        t1, f1, dhdf = _step(model, p, t, f, p1, water, f + dfdp * dp, dhdf)
        if np.any(p > join):  # below the join of the depth-pressure relation
            h_km = h_km + 0.5 * (f + f1) * model.depth_pressure.step_km(p, p1, km_per_gpa)
        else:
            h_km = h_km + 0.5 * (f + f1) * dp * km_per_gpa
        g = g + 0.5 * (p + p1) * (f1 - f)
        now = [p1, t1, f1, h_km, g, (f1 - f) / dp, dhdf]
    return now


class _Nodes:
    """Pressure nodes j * ``step`` [GPa]; beyond node ``deep_from``, ``deep_step`` apart."""

    def __init__(self, step, deep_step=None, deep_from=None):
        self.step = step
        self.deep_step = step if deep_step is None or deep_from is None else deep_step
        self.deep_from = np.iinfo(np.int64).max // 4 if deep_from is None else int(deep_from)
        self.deep_p = self.deep_from * step

    def pressure(self, j):
        """Pressure [GPa] of node(s) ``j``."""
        if np.ndim(j) == 0 and j <= self.deep_from:
            return j * self.step
        return np.where(
            j <= self.deep_from, j * self.step, self.deep_p + (j - self.deep_from) * self.deep_step
        )

    def first_above(self, p):
        """Index of the first node strictly shallower than ``p`` [GPa]."""
        first = np.ceil(p / self.step - 1.0 - 1e-9).astype(np.int64)
        deep = first > self.deep_from
        if deep.any():
            extra = np.ceil((p[deep] - self.deep_p) / self.deep_step - 1.0 - 1e-9)
            first[deep] = self.deep_from + extra.astype(np.int64)
        return first


def _at_floor_in_equilibrium(model, p_on, t_k, water):
    """(T [K], F) at the start: the isentrope at the onset; at the floor (isentrope above the
    solidus) the equilibrium of the same entropy, a zero-length :func:`_step`."""
    f = np.zeros(p_on.shape)
    floor = p_on >= model.max_onset_pressure_gpa - 1e-9
    if floor.any():
        t_k = t_k.copy()
        sel = np.flatnonzero(floor)
        t_k[sel], f[sel], _ = _step(model, p_on[sel], t_k[sel], f[sel], p_on[sel], water[sel])
    return t_k, f


def _march(model, p_on, p_top, water, t_k, nodes, *, rows, rec, f_start=None):
    """Step melting columns (1-D, ``p_on > p_top``) from the onset temperature ``t_k`` to the top.

    Returns (T [K], F, H [km], integral of P dF [GPa]) at ``p_top``. With ``rec``, the state at
    every pressure node is written into it at the global ``rows`` (see :func:`_record_nodes`).

    The first ``_START_STEPS`` steps of every column (the partial step from the onset, then
    the steps where F grows fastest in relative terms) are taken for all columns together.
    Then the columns advance node by node from the deepest: a column joins at its node and
    leaves at its top, so every loop steps only the columns between the two, at one pressure.
    The last interval, from the first node to a top above it, is taken in
    ``_SURFACE_SUBSTEPS`` steps: near P = 0 the water saturation of the melt varies as
    P^0.6 (Katz et al. 2003), which a full step resolves poorly.
    """
    km_per_gpa = float(model.depth_km(1.0))
    # the first node strictly shallower than the onset
    first = nodes.first_above(p_on)
    step_gpa = nodes.step
    state = [p_on.copy(), t_k.copy(), *np.zeros((3, p_on.size)), *np.full((2, p_on.size), np.nan)]
    if f_start is not None:
        state[2] = f_start.copy()
    out = [t_k.copy(), *np.zeros((3, p_on.size))]
    going = np.flatnonzero(first >= 1)
    for k in range(_START_STEPS):
        going = going[first[going] - k >= 1]
        p_next = np.maximum(nodes.pressure(first[going] - k), p_top[going])
        now = _advance(model, [a[going] for a in state], p_next, water[going], km_per_gpa)
        for a, b in zip(state, now, strict=True):
            a[going] = b
        if rec is not None:
            _record_nodes(rec, rows[going], *now[:5], step_gpa)
        done = now[0] <= p_top[going]
        for a, b in zip(out, now[1:5], strict=True):
            a[going[done]] = b[done]
        state[0][going[done]] = -np.inf  # marks the columns done
        going = going[~done]
    nxt = np.maximum(first - _START_STEPS, 0)
    order = np.flatnonzero(state[0] > -np.inf)
    order = order[np.argsort(-nxt[order], kind="stable")]
    live = np.zeros(0, np.int64)  # the columns stepping now, and their state
    now = [np.zeros(0) for _ in state]
    joined = 0
    j = int(nxt[order[0]]) if order.size else -1
    while j >= 0 and (joined < order.size or live.size):
        start = joined
        while joined < order.size and nxt[order[joined]] >= j:
            joined += 1
        if joined > start:
            new = order[start:joined]
            live = np.concatenate([live, new])
            now = [np.concatenate([a, b[new]]) for a, b in zip(now, state, strict=True)]
        p_next = np.maximum(nodes.pressure(j), p_top[live])
        sub = _SURFACE_SUBSTEPS if j == 0 else 1
        now = _advance(model, now, p_next, water[live], km_per_gpa, sub)
        if rec is not None:
            _record_nodes(rec, rows[live], *now[:5], step_gpa)
        done = now[0] <= p_top[live]
        if done.any():
            for a, b in zip(out, now[1:5], strict=True):
                a[live[done]] = b[done]
            live = live[~done]
            now = [a[~done] for a in now]
        j -= 1
    return tuple(out)


def _record_nodes(rec, rows, p, t_k, f, h_km, g, step_gpa):
    """Store the state of the columns ``rows`` whose pressure ``p`` lies on a recorded node."""
    j = np.rint(p / step_gpa).astype(int)
    on_node = (np.abs(p - j * step_gpa) < 1e-9) & (j < rec["node_melt_fraction"].shape[0])
    rows, cols = rows[on_node], j[on_node]
    rec["node_melt_thickness_km"][cols, rows] = h_km[on_node]
    rec["node_melt_fraction"][cols, rows] = f[on_node]
    rec["node_int_p_df_gpa"][cols, rows] = g[on_node]
    rec["node_temperature_c"][cols, rows] = t_k[on_node] - 273.15


# --- the top of melting and one column's profile ---
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
    water_load_km: float = 0.0,
):
    """Depth, pressure, temperature and melt fraction along one column, deepest first.

    It starts ``below_onset_km`` below the onset on the solid isentrope (at twice the top depth
    when the column does not melt) and ends at the top of melting.

    Parameters
    ----------
    potential_temperature_c, lid_depth_km, water_wt_pct : float
        Potential temperature [deg C], depth of the lid base below the seafloor [km] and water
        in the bulk source [wt%] (default 0, dry).
    model : str or MeltingModel, optional
        A registry name or model object (see :func:`get_model`).
    min_top_km, step_gpa, below_onset_km, water_load_km : float, optional
        The least top of melting [km] (default 7 km, the crust's base), the integration's
        pressure step [GPa], how far below the onset the profile starts [km], and the water
        above the seafloor as its rock-equivalent depth [km] (default 0; depths are below the
        seafloor it loads, :func:`lidmelt.physics._pressure.water_load_km`).

    Returns
    -------
    dict of numpy.ndarray
        ``depth_km``, ``pressure_gpa``, ``temperature_c``, ``melt_fraction``.
    """
    model = get_model(model)
    tp, w = float(potential_temperature_c), float(water_wt_pct)
    top_km = float(top_of_melting_km(lid_depth_km, min_top_km))
    top_p = float(model.pressure_gpa(top_km, water_load_km))
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
                t_arr, f_arr, _ = _step(
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
        "depth_km": model.depth_km(p_all, water_load_km),
        "pressure_gpa": p_all,
        "temperature_c": t_all,
        "melt_fraction": f_all,
    }
