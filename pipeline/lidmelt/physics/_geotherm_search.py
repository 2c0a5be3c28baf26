"""The search for the geotherm top of melting of each cell, compiled (numba) and in numpy.

A cell (Tp, water, age) reads the critical ages s* of the four table columns about it
(:mod:`lidmelt.physics._geotherm_arrays`; bilinear in Tp and the water coordinate, as the
melting table is read) at each pressure node, linearly between nodes in pressure. Its top is
the shallowest pressure P >= P_min (the minimum top) and above its onset where s*(P) >= s, the
cell's sqrt(age / Ma): there the geotherm is at least as hot as the column
(:mod:`lidmelt.physics._geotherm`). The running maximum of s* down each column bounds the cell's
s* from above, so a binary search on it finds the first node that can qualify; the nodes from
there are read one by one (usually one or two), and the crossing lies between the first node
that qualifies and the one above it. Where s* is smooth there, it is linear between them; where
it rises steeply (next to a plate's base) or barely (near a fold; :data:`STEEP`, :data:`FLAT`),
the crossing is solved on the exact gap T_g - T_col (the column's deficit linear between the
nodes, the geotherm exact), after moving to the node interval where that gap changes sign.
Where no node qualifies, or the crossing found lies below the cell's onset (interpolated from
the corners' onsets), the column meets its geotherm nowhere below the minimum top: the top is
+inf (the column does not melt).

Beneath a water load (rock-equivalent depth Z(P_w) > 0) the cell's nodes lie Z(P_w) shallower
in the plate than the tabulated s* assume, and its minimum top is the pressure at Z(P_w) + the
minimum top: the tabulated s* then bound the cell's from above (and find a node at or above its
crossing), the minimum top is tested on the exact gap, and the crossing is always solved on the
exact gap, with the geotherm at z = Z(P) - Z(P_w).

Both paths compute the same thing: the compiled loop here, cell by cell, and the numpy one
(:mod:`lidmelt.physics._geotherm_numpy`) on blocks of cells with every node at once (the compiled
one is tested against it).
"""

from __future__ import annotations

import math

import numpy as np

from lidmelt.physics._geotherm_arrays import (
    LOAD_STEP_KM,
    SQRT_AGE_STEP,
    GeothermArrays,
    least_tp_for,
)
from lidmelt.physics._jitcache import njit
from lidmelt.physics._table import WATER_EXPONENT

try:  # compiles the search; without it the numpy path does the same
    import numba
except ImportError:  # pragma: no cover - the numpy path is tested by forcing it
    numba = None

AVAILABLE = numba is not None
#: Across the node interval of the crossing, s* is taken as linear where it rises by between
#: FLAT and STEEP of the cell's sqrt(age) (about 2 % per node on the half-space's rising
#: branch [derived from the tables]); where it rises faster (next to a plate's base, where s*
#: grows without bound: the node below lies on the mantle side at every age) or slower (near a
#: fold, where a small error in s* moves the crossing far), the crossing is solved on the exact
#: geotherm (a choice, checked against direct integration in tests/test_geotherm.py).
STEEP = 0.05
FLAT = 0.01
#: Step [sqrt(Ma)] of the ambient column's tops against sqrt(age) (:func:`ambient_tops`): the
#: top rises about 15 km per sqrt(Ma) near the ridge, so a kink between nodes errs by at most
#: 0.01 km [derived].
AMBIENT_STEP = 0.0025
#: Width [GPa] to which the crossing is solved on the exact gap: 1e-5 GPa is 0.3 m of depth.
ROOT_TOLERANCE_GPA = 1e-5


def _jit(func):
    """numba.njit without the GIL, cached on disk where numba can (else in a private temporary
    folder, :mod:`lidmelt.physics._jitcache`); the plain function without numba. Also for the
    helpers called from the loop (not inlined: inlining every helper made compiling take a
    minute)."""
    if numba is None:
        return func
    return njit(func, nogil=True, error_model="numpy", _nrt=False)


_helper = _jit


def _inline(func):
    """numba.njit inlined into its caller (the per-node reads are tiny)."""
    if numba is None:
        return func
    return numba.njit(inline="always", _nrt=False, error_model="numpy")(func)


@_inline
def _at(arr, i, j, k, a, c):
    """arr at node k, bilinear in (Tp: i, a) and (water: j, c)."""
    v = arr[i, j, k] + a * (arr[i + 1, j, k] - arr[i, j, k])
    if c > 0.0:
        w = arr[i, j + 1, k] + a * (arr[i + 1, j + 1, k] - arr[i, j + 1, k])
        v += c * (w - v)
    return v


@_inline
def _onset_bound(onset, i, j, c):
    """The deepest onset [GPa] of the corner columns (NaN if none has one)."""
    best = np.nan
    for ii in (i, i + 1):
        for jj in (j, j + 1 if c > 0.0 else j):
            v = onset[ii, jj]
            if np.isfinite(v) and not best >= v:
                best = v
    return best


@_inline
def _onset_at(onset, i, j, a, c, bound):
    """The cell's onset [GPa], bilinear in the corners' (their deepest where one has none)."""
    lo = onset[i, j] + a * (onset[i + 1, j] - onset[i, j])
    if c > 0.0:
        lo += c * (onset[i, j + 1] + a * (onset[i + 1, j + 1] - onset[i, j + 1]) - lo)
    return lo if np.isfinite(lo) else bound


@_helper
def _theta(z, age, g):
    """theta(z, t) of the cooling model (``g``: :func:`~lidmelt.physics._geotherm_arrays.
    geotherm_numbers`): erf for the half-space; the plate by its images (tau < 0.1, three
    terms) or its Fourier series (ten terms), as :mod:`lidmelt.physics._plate` sums them."""
    if not z > 0.0:
        return 0.0  # at or above the seafloor: the surface temperature
    if not age > 0.0:
        return 1.0
    if g.plate == 0.0:
        return math.erf(z * g.inv_two_sqrt_kappa / math.sqrt(age))
    zeta = z / g.plate_thickness_km
    if zeta >= 1.0:
        return 1.0
    if zeta <= 0.0:
        return 0.0
    tau = age * g.tau_per_ma
    if tau < 0.1:
        inv = 0.5 / math.sqrt(tau)
        u = 0.0
        for k in range(3):
            u += math.erfc((2 * k + zeta) * inv) - math.erfc((2 * k + 2 - zeta) * inv)
        return 1.0 - u
    q = math.exp(-math.pi * math.pi * tau)
    c1 = math.cos(math.pi * zeta)
    s_prev, s_n = 0.0, math.sin(math.pi * zeta)
    q_n, q_step = q, q * q * q  # q^(n^2) and q^(2n + 1) for n = 1
    theta = zeta
    for n in range(1, 11):  # sin(n x) by the Chebyshev recurrence
        if q_n < 1e-17:  # the rest of the series is below double precision
            break
        theta += 2.0 / (math.pi * n) * q_n * s_n
        s_prev, s_n = s_n, 2.0 * c1 * s_n - s_prev
        q_n *= q_step
        q_step *= q * q
    return theta


@_inline
def _gap(p, tp, age, i, j, a, c, deficit, depth, g, dp, zw):
    """T_g - T_col [K] at pressure p: L linear between the cell's nodes, T_is and theta exact
    (theta at z = Z(P) - ``zw``, the depth below a seafloor loaded by ``zw`` [km])."""
    n_p = deficit.shape[2]
    k = min(int(p / dp), n_p - 2)
    f = p / dp - k
    lo, hi = _at(deficit, i, j, k, a, c), _at(deficit, i, j, k + 1, a, c)
    z = depth[k] + f * (depth[k + 1] - depth[k]) - zw
    t_is = (tp + 273.15) * math.exp(g.adiabat_per_gpa * p) - 273.15
    return lo + f * (hi - lo) - (t_is - g.surface_c) * (1.0 - _theta(z, age, g))


@_helper
def _root(p_lo, g_lo, p_hi, g_hi, tp, age, i, j, a, c, deficit, depth, g, dp, zw):
    """The shallowest pressure with T_g >= T_col in [p_lo, p_hi] (gap < 0 at p_lo, >= 0 at
    p_hi): regula falsi, Illinois variant, to :data:`ROOT_TOLERANCE_GPA`."""
    side = 0
    for _ in range(40):
        if p_hi - p_lo < ROOT_TOLERANCE_GPA:
            break
        p = p_hi - g_hi * (p_hi - p_lo) / (g_hi - g_lo)
        if not (p > p_lo and p < p_hi):
            p = 0.5 * (p_lo + p_hi)
        gp = _gap(p, tp, age, i, j, a, c, deficit, depth, g, dp, zw)
        if gp >= 0.0:
            p_hi, g_hi = p, gp
            if side == 1:
                g_lo *= 0.5
            side = 1
        else:
            p_lo, g_lo = p, gp
            if side == -1:
                g_hi *= 0.5
            side = -1
    return p_hi


@_inline
def _first_node(x, j, c, s, arrays_s, arrays_run, onset, p_min, dp):
    """(i, a, node) of the first node (below the minimum top) whose interpolated s* >= s, the
    index of the minimum top's node interval where the minimum top itself qualifies, -1 where
    none does down to the onset; -2 where the cell has no onset; and that deepest node."""
    n_tp, n_p = arrays_s.shape[0], arrays_s.shape[2]
    i = min(int(x), n_tp - 2)
    a = x - i
    p_on = _onset_bound(onset, i, j, c)
    if not np.isfinite(p_on):
        return i, a, -2, 0
    k0 = int(p_min / dp)
    k_end = min(int(p_on / dp) + 1, n_p - 1)
    s0 = _at(arrays_s, i, j, k0, a, c)
    if s0 + (p_min / dp - k0) * (_at(arrays_s, i, j, k0 + 1, a, c) - s0) >= s:
        return i, a, k0, k_end
    if _at(arrays_run, i, j, k_end, a, c) < s:
        return i, a, -1, k_end
    lo, hi = k0 + 1, k_end
    while lo < hi:  # the first node whose bound reaches s
        mid = (lo + hi) // 2
        if _at(arrays_run, i, j, mid, a, c) >= s:
            hi = mid
        else:
            lo = mid + 1
    for k in range(lo, k_end + 1):
        if _at(arrays_s, i, j, k, a, c) >= s:
            return i, a, k, k_end
    return i, a, -1, k_end


@_inline
def _top(tp, x, j, c, age, s_star, s_run, onset, deficit, depth, g, p_min, dp, p_last, zw):
    """(top [GPa] or +inf, whether decided here) of one cell (see the module doc); ``p_min``
    its minimum top [GPa], ``zw`` its water load [km]."""
    if not (x >= 0.0 and x <= s_star.shape[0] - 1.0):
        return np.nan, False
    s = math.sqrt(age)
    i, a, k, k_end = _first_node(x, j, c, s, s_star, s_run, onset, p_min, dp)
    if k == -2:
        return p_min, True  # no onset: the melting kernel flags the cell
    deep = _onset_bound(onset, i, j, c) >= p_last
    if k == -1:
        return np.inf, not deep
    k0 = int(p_min / dp)
    loaded = zw > 0.0
    if loaded:  # the tabulated s* bound the cell's: the minimum top on the exact gap
        if _gap(p_min, tp, age, i, j, a, c, deficit, depth, g, dp, zw) >= 0.0:
            return p_min, True
        k = max(k, k0 + 1)
    elif k == k0:
        return p_min, True
    on_cell = _onset_at(onset, i, j, a, c, np.inf)
    if not loaded:  # s* between the node above (or the minimum top) and node k: linear
        p_lo = (k - 1) * dp if k - 1 > k0 else p_min
        s_lo = _at(s_star, i, j, k - 1, a, c)
        if k - 1 == k0:
            s_lo += (p_min / dp - k0) * (_at(s_star, i, j, k0 + 1, a, c) - s_lo)
        s_hi = _at(s_star, i, j, k, a, c)
        if FLAT * s <= s_hi - s_lo <= STEEP * s:  # where it is smooth
            top = p_lo + (s - s_lo) / (s_hi - s_lo) * (k * dp - p_lo)
            return (top if top < on_cell else np.inf), True
    # steep (next to a plate's base), flat (near a fold) or beneath a load: the node interval
    # about the crossing, checked and moved on the exact gap, and the crossing solved on it
    p_hi = k * dp
    g_hi = _gap(p_hi, tp, age, i, j, a, c, deficit, depth, g, dp, zw)
    p_lo, g_lo = p_hi, g_hi
    if g_hi >= 0.0:
        while True:  # the crossing lies above: step up
            if p_hi <= p_min:
                return p_min, True
            k -= 1
            p_lo = max(k * dp, p_min)
            g_lo = _gap(p_lo, tp, age, i, j, a, c, deficit, depth, g, dp, zw)
            if g_lo < 0.0:
                break
            p_hi, g_hi = p_lo, g_lo
    else:
        k = max(k, k0)
        while True:  # below: step down to the first node at or above the geotherm
            k += 1
            if k > k_end:
                return np.inf, not deep
            p_hi = k * dp
            g_hi = _gap(p_hi, tp, age, i, j, a, c, deficit, depth, g, dp, zw)
            if g_hi >= 0.0:
                break
            p_lo, g_lo = p_hi, g_hi
    top = _root(p_lo, g_lo, p_hi, g_hi, tp, age, i, j, a, c, deficit, depth, g, dp, zw)
    return (top if top < on_cell else np.inf), True


@_inline
def _tabled(tab, y, yl):
    """The ambient top [GPa] at y = sqrt(age) / step and yl = load / load step of the table
    (rows: load nodes): bilinear where the nodes it weighs are finite, +inf where they all are,
    NaN (search it) elsewhere or without a table."""
    if tab.shape[1] < 2:
        return np.nan
    m = int(y)
    l0 = int(yl)
    if m >= tab.shape[1] - 1 or l0 >= tab.shape[0]:
        return np.nan
    e = yl - l0
    rows = 1 if e == 0.0 else 2
    if l0 + rows > tab.shape[0]:
        return np.nan
    n_inf = 0
    v = 0.0
    for r in range(rows):
        lo, hi = tab[l0 + r, m], tab[l0 + r, m + 1]
        if np.isinf(lo) and np.isinf(hi):
            n_inf += 1
        elif np.isfinite(lo) and np.isfinite(hi):
            w = 1.0 - e if r == 0 else e
            v += w * (lo + (y - m) * (hi - lo))
        else:
            return np.nan
    if n_inf == rows:
        return np.inf
    return v if n_inf == 0 else np.nan


@_inline
def _least(least_tp, j, c, s, inv_ds, yl):
    """The least Tp [deg C] that melts at sqrt(age) s beneath the load at yl = load / load step,
    bilinear in s and the load, linear in water (``least_tp``: (n_w, n_loads, n_s))."""
    y = s * inv_ds
    m = min(int(y), least_tp.shape[2] - 2)
    b = y - m
    l0 = min(int(yl), least_tp.shape[1] - 1)
    e = yl - l0 if l0 + 1 < least_tp.shape[1] else 0.0
    l1 = min(l0 + 1, least_tp.shape[1] - 1)
    v = 0.0
    for jj, wj in ((j, 1.0 - c), (j + 1, c)):
        if wj == 0.0:
            continue
        lo = least_tp[jj, l0, m] + b * (least_tp[jj, l0, m + 1] - least_tp[jj, l0, m])
        if e > 0.0:
            hi = least_tp[jj, l1, m] + b * (least_tp[jj, l1, m + 1] - least_tp[jj, l1, m])
            lo += e * (hi - lo)
        v += wj * lo
    return v


@_jit
def _loop(tp, water, w_stride, age, load, z_stride, p_min_of, par, s_star, s_run, onset,
          least_tp, deficit, depth, g, amb_tab, top, amb, excess, slow):  # fmt: skip
    """Tops [GPa] of the cells and of their ambient columns, and the excess to melt [K].

    ``load`` and ``p_min_of`` (stride ``z_stride``): each cell's water load [km] and minimum top
    [GPa]. ``par``: :class:`~lidmelt.physics._geotherm_arrays.SearchParameters` (its
    ``inv_ambient_step`` that of ``amb_tab``, 0 for none; :func:`ambient_tops`); ``g``:
    :class:`~lidmelt.physics._geotherm_arrays.GeothermNumbers`.
    """
    t0, inv_dt, dp, p_last = par.tp_min_c, par.inv_tp_step, par.pressure_step_gpa, par.top_max_gpa
    ambient, inv_du, w_max = par.ambient_c, par.inv_water_step, par.water_max_wt_pct
    inv_dl, load_max = par.inv_load_step, par.load_max_km
    n_w = s_star.shape[1]
    x_amb = (ambient - t0) * inv_dt
    for n in range(tp.size):
        t, w, age_ma = tp[n], water[n * w_stride], age[n]
        zw, p_min = load[n * z_stride], p_min_of[n * z_stride]
        top[n] = amb[n] = excess[n] = np.nan
        if not (age_ma >= 0.0 and np.isfinite(t) and w >= 0.0 and zw >= 0.0):
            continue  # no data or invalid input: left to the melting kernel
        if w > w_max or zw > load_max or p_min >= p_last - dp:
            slow[n] = True  # beyond the water or load held, or a minimum top beyond the nodes
            continue
        j, c = 0, 0.0
        if inv_du > 0.0 and w > 0.0:
            y = w**WATER_EXPONENT * inv_du
            j = min(int(y), n_w - 2)
            c = y - j
        sa = math.sqrt(age_ma)
        ex = _least(least_tp, j, c, sa, 1.0 / SQRT_AGE_STEP, zw * inv_dl) - ambient
        p_amb, done_amb = np.nan, True
        if ex < 0.0 or t == ambient:
            p_amb = _tabled(amb_tab, sa * par.inv_ambient_step, zw * inv_dl)
            if np.isnan(p_amb):
                p_amb, done_amb = _top(
                    ambient, x_amb, j, c, age_ma, s_star, s_run, onset, deficit, depth, g,
                    p_min, dp, p_last, zw,
                )  # fmt: skip
        if t == ambient:  # the ambient column itself: the same top, so no anomaly melt
            p, done = p_amb, done_amb
        else:
            p, done = _top(
                t, (t - t0) * inv_dt, j, c, age_ma, s_star, s_run, onset, deficit, depth, g,
                p_min, dp, p_last, zw,
            )  # fmt: skip
        if not ex < 0.0:
            p_amb = np.nan
        if not (done and done_amb):
            slow[n] = True
            continue
        top[n], amb[n], excess[n] = p, p_amb, ex


def _plain(values):
    """A writable C-contiguous float64 array (one compiled signature for every input)."""
    return np.require(values, float, ["C", "W"])


def _per_cell(values, n):
    """(array, stride): one value for every cell (stride 0) or one per cell."""
    if np.ndim(values) == 0 or np.size(values) == 1:
        return np.array([float(np.ravel(values)[0])]), 0
    return _plain(np.broadcast_to(np.asarray(values, float), (n,))), 1


def search_compiled(arrays: GeothermArrays, par, tp, water, age, load, p_min, amb_tab=None):
    """(top, ambient top [GPa], excess [K], cells left to the caller) by the compiled loop.

    ``tp`` and ``age`` are 1-D float64 arrays, ``water`` a float or such an array, ``load``
    (water load [km]) and ``p_min`` (minimum top [GPa]) floats or such arrays (both the same);
    ``amb_tab`` the ambient column's tops against load and sqrt(age) (:func:`ambient_tops`;
    ``par.inv_ambient_step`` its 1/step in sqrt(age)). The least melting Tp beneath the loads
    comes from :func:`lidmelt.physics._geotherm_arrays.least_tp_for`.
    """
    tp, age = _plain(tp), _plain(age)
    w = np.array([float(water)]) if np.ndim(water) == 0 else _plain(water)
    zw, stride = _per_cell(load, tp.size)
    pm = np.array([float(np.ravel(p_min)[0])])
    if stride:
        pm = _plain(np.broadcast_to(np.asarray(p_min, float), (tp.size,)))
    out = [np.empty(tp.size) for _ in range(3)]
    slow = np.zeros(tp.size, np.bool_)
    least = least_tp_for(arrays, zw)
    _loop(
        tp, w, 0 if w.size == 1 and np.ndim(water) == 0 else 1, age, zw, stride, pm, par,
        arrays.s_star, arrays.s_run, arrays.onset, least, arrays.deficit, arrays.depth_km,
        arrays.geotherm, np.zeros((1, 1)) if amb_tab is None else _plain(amb_tab), *out, slow,
    )  # fmt: skip
    return (*out, slow)


def ambient_tops(arrays: GeothermArrays, par, search, n_loads: int = 1) -> np.ndarray:
    """The ambient column's top [GPa] (+inf: none) beneath loads m :data:`LOAD_STEP_KM` (rows,
    m < ``n_loads``) at sqrt(age) = k :data:`AMBIENT_STEP` up to sqrt(400 Ma) (columns), by
    ``search`` (:func:`search_compiled` or :func:`search_numpy`) with no table.

    With one water content every cell's ambient column is the same function of age and load:
    read from this table (bilinear between nodes where they are finite), it costs no search
    (the cells next to an infinite node, about a fold, are searched).
    """
    s = AMBIENT_STEP * np.arange(round(20.0 / AMBIENT_STEP) + 1)
    par = par._replace(inv_ambient_step=0.0)
    water = float(arrays.water_u[0]) ** (1.0 / WATER_EXPONENT)  # the one water content
    rows = []
    for m in range(max(int(n_loads), 1)):
        load = m * LOAD_STEP_KM
        p_min = float(arrays.model.pressure_gpa(arrays.min_top_km, load))
        tp = np.full(s.size, par.ambient_c)
        rows.append(search(arrays, par, tp, water, s * s, load, p_min)[0])
    return np.stack(rows)
