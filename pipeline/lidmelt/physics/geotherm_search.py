"""The search for the geotherm top of melting of each cell, compiled (numba) and in numpy.

A cell (Tp, water, age) reads the critical ages s* of the four table columns about it
(:mod:`lidmelt.physics.geotherm_arrays`; bilinear in Tp and the water coordinate, as the
melting table is read) at each pressure node, linearly between nodes in pressure. Its top is
the shallowest pressure P >= P_min (the minimum top) and above its onset where s*(P) >= s, the
cell's sqrt(age / Ma): there the geotherm is at least as hot as the column
(:mod:`lidmelt.physics.geotherm`). The running maximum of s* down each column bounds the cell's
s* from above, so a binary search on it finds the first node that can qualify; the nodes from
there are read one by one (usually one or two), and the crossing lies between the first node
that qualifies and the one above it. Where s* is smooth there, it is linear between them; where
it rises steeply (next to a plate's base, :data:`STEEP`), the crossing is solved on the exact
gap T_g - T_col (the column's deficit linear between the nodes, the geotherm exact), after
moving to the node interval where that gap changes sign. Where no node qualifies, or the
crossing found lies below the cell's onset (interpolated from the corners' onsets), the column
meets its geotherm nowhere below the minimum top: the top is +inf (the column does not melt).

Both paths compute the same thing: the compiled loop cell by cell, the numpy one on blocks of
cells with every node at once (the compiled one is tested against it).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from lidmelt.physics import _plate
from lidmelt.physics.geotherm_arrays import SQRT_AGE_STEP, GeothermArrays
from lidmelt.physics.table import WATER_EXPONENT

try:  # compiles the search; without it the numpy path does the same
    import numba
except ImportError:  # pragma: no cover - the numpy path is tested by forcing it
    numba = None

__all__ = ["AVAILABLE", "ambient_tops", "search_compiled", "search_numpy"]

AVAILABLE = numba is not None
_BLOCK = 2048
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
    """numba.njit without the GIL, cached on disk where numba can; the plain function without
    numba."""
    if numba is None:
        return func
    opts = {"nogil": True, "error_model": "numpy", "_nrt": False}
    try:
        return numba.njit(cache=True, **opts)(func)
    except RuntimeError:
        return numba.njit(**opts)(func)


def _helper(func):
    """numba.njit for a helper called from the loop (not inlined: inlining every helper made
    compiling take a minute), cached on disk where numba can."""
    if numba is None:
        return func
    opts = {"nogil": True, "error_model": "numpy", "_nrt": False}
    try:
        return numba.njit(cache=True, **opts)(func)
    except RuntimeError:
        return numba.njit(**opts)(func)


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
    """theta(z, t) of the cooling model (``g``: :func:`~lidmelt.physics.geotherm_arrays.
    geotherm_numbers`): erf for the half-space; the plate by its images (tau < 0.1, three
    terms) or its Fourier series (ten terms), as :mod:`lidmelt.physics._plate` sums them."""
    if not age > 0.0:
        return 1.0 if z > 0.0 else 0.0
    if g[0] == 0.0:
        return math.erf(z * g[1] / math.sqrt(age))
    zeta = z / g[2]
    if zeta >= 1.0:
        return 1.0
    if zeta <= 0.0:
        return 0.0
    tau = age * g[3]
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
def _gap(p, tp, age, i, j, a, c, deficit, depth, g, dp):
    """T_g - T_col [K] at pressure p: L linear between the cell's nodes, T_is and theta exact."""
    n_p = deficit.shape[2]
    k = min(int(p / dp), n_p - 2)
    f = p / dp - k
    lo, hi = _at(deficit, i, j, k, a, c), _at(deficit, i, j, k + 1, a, c)
    z = depth[k] + f * (depth[k + 1] - depth[k])
    t_is = (tp + 273.15) * math.exp(g[5] * p) - 273.15
    return lo + f * (hi - lo) - (t_is - g[4]) * (1.0 - _theta(z, age, g))


@_helper
def _root(p_lo, g_lo, p_hi, g_hi, tp, age, i, j, a, c, deficit, depth, g, dp):
    """The shallowest pressure with T_g >= T_col in [p_lo, p_hi] (gap < 0 at p_lo, >= 0 at
    p_hi): regula falsi, Illinois variant, to :data:`ROOT_TOLERANCE_GPA`."""
    side = 0
    for _ in range(40):
        if p_hi - p_lo < ROOT_TOLERANCE_GPA:
            break
        p = p_hi - g_hi * (p_hi - p_lo) / (g_hi - g_lo)
        if not (p > p_lo and p < p_hi):
            p = 0.5 * (p_lo + p_hi)
        gp = _gap(p, tp, age, i, j, a, c, deficit, depth, g, dp)
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
def _top(tp, x, j, c, age, s_star, s_run, onset, deficit, depth, g, p_min, dp, p_last):
    """(top [GPa] or +inf, whether decided here) of one cell (see the module doc)."""
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
    if k == k0:
        return p_min, True
    on_cell = _onset_at(onset, i, j, a, c, np.inf)
    # s* between the node above (or the minimum top) and node k: linear where it is smooth
    p_lo = (k - 1) * dp if k - 1 > k0 else p_min
    s_lo = _at(s_star, i, j, k - 1, a, c)
    if k - 1 == k0:
        s_lo += (p_min / dp - k0) * (_at(s_star, i, j, k0 + 1, a, c) - s_lo)
    s_hi = _at(s_star, i, j, k, a, c)
    if FLAT * s <= s_hi - s_lo <= STEEP * s:
        top = p_lo + (s - s_lo) / (s_hi - s_lo) * (k * dp - p_lo)
        return (top if top < on_cell else np.inf), True
    # steep (next to a plate's base) or flat (near a fold): the node interval about the
    # crossing, checked and moved on the exact gap, and the crossing solved on it
    p_hi = k * dp
    g_hi = _gap(p_hi, tp, age, i, j, a, c, deficit, depth, g, dp)
    p_lo, g_lo = p_hi, g_hi
    if g_hi >= 0.0:
        while True:  # the crossing lies above: step up
            if p_hi <= p_min:
                return p_min, True
            k -= 1
            p_lo = max(k * dp, p_min)
            g_lo = _gap(p_lo, tp, age, i, j, a, c, deficit, depth, g, dp)
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
            g_hi = _gap(p_hi, tp, age, i, j, a, c, deficit, depth, g, dp)
            if g_hi >= 0.0:
                break
            p_lo, g_lo = p_hi, g_hi
    top = _root(p_lo, g_lo, p_hi, g_hi, tp, age, i, j, a, c, deficit, depth, g, dp)
    return (top if top < on_cell else np.inf), True


@_inline
def _tabled(tab, y):
    """The ambient top [GPa] at y = sqrt(age) / step of the table: linear between its nodes
    where both are finite, +inf where both are, NaN (search it) elsewhere or without a table."""
    if tab.size < 2:
        return np.nan
    m = int(y)
    if m >= tab.size - 1:
        return np.nan
    lo, hi = tab[m], tab[m + 1]
    if np.isfinite(lo) and np.isfinite(hi):
        return lo + (y - m) * (hi - lo)
    if np.isinf(lo) and np.isinf(hi):
        return np.inf
    return np.nan


@_inline
def _least(least_tp, j, c, s, inv_ds):
    """The least Tp [deg C] that melts at sqrt(age) s, linear in s and in water."""
    y = s * inv_ds
    m = min(int(y), least_tp.shape[1] - 2)
    b = y - m
    v = least_tp[j, m] + b * (least_tp[j, m + 1] - least_tp[j, m])
    if c > 0.0:
        w = least_tp[j + 1, m] + b * (least_tp[j + 1, m + 1] - least_tp[j + 1, m])
        v += c * (w - v)
    return v


@_jit
def _loop(tp, water, w_stride, age, par, s_star, s_run, onset, least_tp, deficit, depth, g,
          amb_tab, top, amb, excess, slow):  # fmt: skip
    """Tops [GPa] of the cells and of their ambient columns, and the excess to melt [K].

    ``par``: Tp of the first node, 1/Tp step, pressure step, minimum top [GPa], deepest node
    [GPa], ambient Tp, 1/(water-coordinate step) (0: one water slice), largest water [wt%],
    1/(sqrt-age step) of ``amb_tab`` (0: none; :func:`ambient_tops`).
    """
    t0, inv_dt, dp, p_min, p_last, ambient, inv_du, w_max = (
        par[0], par[1], par[2], par[3], par[4], par[5], par[6], par[7]
    )  # fmt: skip
    n_w = s_star.shape[1]
    x_amb = (ambient - t0) * inv_dt
    for n in range(tp.size):
        t, w, age_ma = tp[n], water[n * w_stride], age[n]
        top[n] = amb[n] = excess[n] = np.nan
        if not (age_ma >= 0.0 and np.isfinite(t) and w >= 0.0):
            continue  # no data or invalid input: left to the melting kernel
        if w > w_max:
            slow[n] = True
            continue
        j, c = 0, 0.0
        if inv_du > 0.0 and w > 0.0:
            y = w**WATER_EXPONENT * inv_du
            j = min(int(y), n_w - 2)
            c = y - j
        ex = _least(least_tp, j, c, math.sqrt(age_ma), 1.0 / SQRT_AGE_STEP) - ambient
        p_amb, done_amb = np.nan, True
        if ex < 0.0 or t == ambient:
            p_amb = _tabled(amb_tab, math.sqrt(age_ma) * par[8])
            if np.isnan(p_amb):
                p_amb, done_amb = _top(
                    ambient, x_amb, j, c, age_ma, s_star, s_run, onset, deficit, depth, g,
                    p_min, dp, p_last,
                )  # fmt: skip
        if t == ambient:  # the ambient column itself: the same top, so no anomaly melt
            p, done = p_amb, done_amb
        else:
            p, done = _top(
                t, (t - t0) * inv_dt, j, c, age_ma, s_star, s_run, onset, deficit, depth, g,
                p_min, dp, p_last,
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


def search_compiled(arrays: GeothermArrays, par, tp, water, age, amb_tab=None):
    """(top, ambient top [GPa], excess [K], cells left to the caller) by the compiled loop.

    ``tp`` and ``age`` are 1-D float64 arrays, ``water`` a float or such an array; ``amb_tab``
    the ambient column's tops against sqrt(age) (:func:`ambient_tops`; ``par[8]`` its 1/step).
    """
    tp, age = _plain(tp), _plain(age)
    w = np.array([float(water)]) if np.ndim(water) == 0 else _plain(water)
    out = [np.empty(tp.size) for _ in range(3)]
    slow = np.zeros(tp.size, np.bool_)
    _loop(
        tp, w, 0 if w.size == 1 and np.ndim(water) == 0 else 1, age, par, arrays.s_star,
        arrays.s_run, arrays.onset, arrays.least_tp, arrays.deficit, arrays.depth_km,
        arrays.geotherm, np.zeros(1) if amb_tab is None else _plain(amb_tab), *out, slow,
    )  # fmt: skip
    return (*out, slow)


# ------------------------------------------------------------------------------------------------
# the numpy path
# ------------------------------------------------------------------------------------------------
def _corners(arrays: GeothermArrays, par, tp, w):
    """Tp index and fraction, water index and fraction of 1-D cells (indices clipped)."""
    n_tp, n_w = arrays.s_star.shape[0], arrays.s_star.shape[1]
    x = (tp - par[0]) * par[1]
    with np.errstate(invalid="ignore"):
        i = np.clip(np.nan_to_num(x).astype(np.intp), 0, n_tp - 2)
        if par[6] > 0.0:
            y = np.maximum(w, 0.0) ** WATER_EXPONENT * par[6]
            j = np.clip(np.nan_to_num(y).astype(np.intp), 0, n_w - 2)
            c = np.where(w > 0.0, y - j, 0.0)
        else:
            j, c = np.zeros(tp.size, np.intp), np.zeros(tp.size)
    return x, i, x - i, j, c


def _gather(arr, i, a, j, c):
    """arr[cell corners] bilinear in Tp and water, for every node (cells, n_p) or one
    2-D array of corners (onset: cells)."""
    j1 = np.minimum(j + 1, arr.shape[1] - 1)
    a2 = a[:, None] if arr.ndim == 3 else a
    c2 = c[:, None] if arr.ndim == 3 else c
    lo = arr[i, j] + a2 * (arr[i + 1, j] - arr[i, j])
    hi = arr[i, j1] + a2 * (arr[i + 1, j1] - arr[i, j1])
    return lo + c2 * (hi - lo)


def _first_node_numpy(arrays: GeothermArrays, par, i, a, j, c, s):
    """:func:`_first_node` for 1-D cells with every node at once: (node, deepest node, the
    corners' deepest onset)."""
    n_p = arrays.s_star.shape[2]
    dp, p_min = par[2], par[3]
    j1 = np.minimum(j + 1, arrays.onset.shape[1] - 1)
    corners = [arrays.onset[ii, jj] for ii in (i, i + 1) for jj in (j, np.where(c > 0, j1, j))]
    p_on = np.fmax.reduce(corners)
    nodes = _gather(arrays.s_star.astype(np.float64), i, a, j, c)
    k0 = int(p_min / dp)
    at_min = nodes[:, k0] + (p_min / dp - k0) * (nodes[:, k0 + 1] - nodes[:, k0])
    k = np.arange(n_p)
    with np.errstate(invalid="ignore"):
        k_end = np.minimum(np.nan_to_num(p_on / dp).astype(np.intp) + 1, n_p - 1)
        ok = (k[None, :] > k0) & (k[None, :] <= k_end[:, None]) & (nodes >= s[:, None])
    first = np.where(ok.any(axis=1), np.argmax(ok, axis=1), -1)
    first = np.where(at_min >= s, k0, first)
    return np.where(np.isfinite(p_on), first, -2), k_end, p_on


def _theta_numpy(z, age, g):
    """:func:`_theta` in numpy (:mod:`lidmelt.physics._plate` for the plate)."""
    out = np.where(z > 0.0, 1.0, 0.0)
    young = ~(age > 0.0)
    if g[0] == 0.0:
        with np.errstate(invalid="ignore", divide="ignore"):
            hs = special.erf(z * g[1] / np.sqrt(np.where(young, 1.0, age)))
        return np.where(young, out, hs)
    zeta = z / g[2]
    inside = ~young & (zeta > 0.0) & (zeta < 1.0)
    out = np.where(~young & (zeta <= 0.0), 0.0, out)
    if inside.any():
        out[inside] = _plate.theta(zeta[inside], age[inside] * g[3])
    return out


def _gap_numpy(arrays: GeothermArrays, p, tp, age, i, a, j, c, dp):
    """:func:`_gap` in numpy."""
    d, depth, g = arrays.deficit, arrays.depth_km, arrays.geotherm
    k = np.minimum((p / dp).astype(np.intp), d.shape[2] - 2)
    f = p / dp - k
    j1 = np.minimum(j + 1, d.shape[1] - 1)

    def at(kk):
        lo = d[i, j, kk] + a * (d[i + 1, j, kk] - d[i, j, kk])
        hi = d[i, j1, kk] + a * (d[i + 1, j1, kk] - d[i, j1, kk])
        return lo + c * (hi - lo)

    lo, hi = at(k), at(k + 1)
    z = depth[k] + f * (depth[k + 1] - depth[k])
    t_is = (tp + 273.15) * np.exp(g[5] * p) - 273.15
    return lo + f * (hi - lo) - (t_is - g[4]) * (1.0 - _theta_numpy(z, age, g))


def _top_numpy(arrays: GeothermArrays, par, tp, x, i, a, j, c, age):
    """(top [GPa] or +inf, decided) of 1-D cells: :func:`_top` step by step for all at once."""
    n_tp = arrays.s_star.shape[0]
    dp, p_min, p_last = par[2], par[3], par[4]
    k0 = int(p_min / dp)
    s = np.sqrt(age)
    k, k_end, p_on = _first_node_numpy(arrays, par, i, a, j, c, s)
    with np.errstate(invalid="ignore"):
        inside = (x >= 0.0) & (x <= n_tp - 1.0)
        deep = p_on >= p_last
    top = np.where(k == -2, p_min, np.inf)
    top = np.where(k == k0, p_min, top)
    decided = inside & ((k == -2) | (k == k0) | ~deep)
    on_cell = _gather(arrays.onset, i, a, j, c)
    on_cell = np.where(np.isfinite(on_cell), on_cell, np.inf)
    # s* between the node above (or the minimum top) and node k: linear where it is smooth
    todo = np.flatnonzero(inside & (k > k0))
    kk = k[todo]
    s_lo = _nodes_at(arrays.s_star, kk - 1, i[todo], a[todo], j[todo], c[todo])
    s_next = _nodes_at(arrays.s_star, np.full(kk.size, k0 + 1), i[todo], a[todo], j[todo], c[todo])
    s_lo = np.where(kk - 1 == k0, s_lo + (p_min / dp - k0) * (s_next - s_lo), s_lo)
    s_hi = _nodes_at(arrays.s_star, kk, i[todo], a[todo], j[todo], c[todo])
    p_lo = np.where(kk - 1 > k0, (kk - 1) * dp, p_min)
    with np.errstate(invalid="ignore", divide="ignore"):
        linear = p_lo + (s[todo] - s_lo) / (s_hi - s_lo) * (kk * dp - p_lo)
    steep = ~((s_hi - s_lo >= FLAT * s[todo]) & (s_hi - s_lo <= STEEP * s[todo]))
    top[todo] = np.where(linear < on_cell[todo], linear, np.inf)
    decided[todo] = True
    ref = todo[steep]
    top[ref] = _exact_numpy(arrays, par, tp, age, i, a, j, c, k, k_end, ref, on_cell)
    return np.where(inside, top, np.nan), decided


def _nodes_at(arr, k, i, a, j, c):
    """arr at node k of each cell, bilinear in Tp and water (1-D cells)."""
    j1 = np.minimum(j + 1, arr.shape[1] - 1)
    lo = arr[i, j, k] + a * (arr[i + 1, j, k] - arr[i, j, k])
    hi = arr[i, j1, k] + a * (arr[i + 1, j1, k] - arr[i, j1, k])
    return (lo + c * (hi - lo)).astype(np.float64)


def _exact_numpy(arrays, par, tp, age, i, a, j, c, k, k_end, todo, on_cell):
    """The tops of the cells ``todo`` on the exact gap (:func:`_top`'s steep branch)."""
    dp, p_min = par[2], par[3]

    def gap(p, idx):
        return _gap_numpy(arrays, p, tp[idx], age[idx], i[idx], a[idx], j[idx], c[idx], dp)

    kk = k[todo].copy()
    p_hi = kk * dp
    g_hi = gap(p_hi, todo)
    p_lo, g_lo = p_hi.copy(), g_hi.copy()
    found = np.zeros(todo.size, bool)
    at_min = np.zeros(todo.size, bool)
    up = g_hi >= 0.0
    while up.any():  # the crossing lies above: step up
        m = np.flatnonzero(up)
        at_min[m] |= p_hi[m] <= p_min
        m = m[p_hi[m] > p_min]
        kk[m] -= 1
        p_lo[m] = np.maximum(kk[m] * dp, p_min)
        g_lo[m] = gap(p_lo[m], todo[m])
        stop = g_lo[m] < 0.0
        found[m[stop]] = True
        keep = m[~stop]
        p_hi[keep], g_hi[keep] = p_lo[keep], g_lo[keep]
        up = np.zeros(todo.size, bool)
        up[keep] = True
    down = ~(g_hi >= 0.0)
    while down.any():  # below: step down to the first node at or above the geotherm
        m = np.flatnonzero(down)
        kk[m] += 1
        m = m[kk[m] <= k_end[todo[m]]]
        p_lo[m], g_lo[m] = p_hi[m], g_hi[m]
        p_hi[m] = kk[m] * dp
        g_hi[m] = gap(p_hi[m], todo[m])
        stop = g_hi[m] >= 0.0
        found[m[stop]] = True
        down = np.zeros(todo.size, bool)
        down[m[~stop]] = True
    root = _root_numpy(arrays, par, p_lo, g_lo, p_hi, g_hi, found, gap, todo)
    res = np.where(found & (root < on_cell[todo]), root, np.inf)
    return np.where(at_min, p_min, res)


def _root_numpy(arrays, par, p_lo, g_lo, p_hi, g_hi, found, gap, todo):
    """:func:`_root` for the cells ``found`` (Illinois regula falsi, all at once)."""
    p_lo, g_lo, p_hi, g_hi = (v.copy() for v in (p_lo, g_lo, p_hi, g_hi))
    side = np.zeros(p_lo.size, np.int8)
    act = np.flatnonzero(found)
    for _ in range(40):
        act = act[p_hi[act] - p_lo[act] >= ROOT_TOLERANCE_GPA]
        if not act.size:
            break
        with np.errstate(invalid="ignore", divide="ignore"):
            p = p_hi[act] - g_hi[act] * (p_hi[act] - p_lo[act]) / (g_hi[act] - g_lo[act])
        bad = ~((p > p_lo[act]) & (p < p_hi[act]))
        p = np.where(bad, 0.5 * (p_lo[act] + p_hi[act]), p)
        gp = gap(p, todo[act])
        pos = gp >= 0.0
        g_lo[act] = np.where(pos & (side[act] == 1), 0.5 * g_lo[act], g_lo[act])
        g_hi[act] = np.where(~pos & (side[act] == -1), 0.5 * g_hi[act], g_hi[act])
        p_hi[act] = np.where(pos, p, p_hi[act])
        g_hi[act] = np.where(pos, gp, g_hi[act])
        p_lo[act] = np.where(pos, p_lo[act], p)
        g_lo[act] = np.where(pos, g_lo[act], gp)
        side[act] = np.where(pos, 1, -1)
    return p_hi


def search_numpy(arrays: GeothermArrays, par, tp, water, age, amb_tab=None):
    """:func:`search_compiled` in numpy (blocks of cells, every node at once)."""
    n = tp.size
    w = np.broadcast_to(np.asarray(water, float), (n,))
    top, amb, excess = (np.full(n, np.nan) for _ in range(3))
    slow = np.zeros(n, bool)
    for start in range(0, n, _BLOCK):
        sl = slice(start, start + _BLOCK)
        t, ww, ag = tp[sl], w[sl], age[sl]
        with np.errstate(invalid="ignore"):
            valid = (ag >= 0.0) & np.isfinite(t) & (ww >= 0.0)
            slow[sl] = valid & (ww > par[7])
            valid &= ~slow[sl]
        x, i, a, j, c = _corners(arrays, par, t, ww)
        ag = np.where(valid, ag, 0.0)
        ex = _least_numpy(arrays, j, c, np.sqrt(ag)) - par[5]
        own = t == par[5]
        with np.errstate(invalid="ignore"):
            amb_cells = valid & ((ex < 0.0) | own)
        p_amb = np.where(amb_cells, _tabled_numpy(amb_tab, np.sqrt(ag) * par[8]), np.nan)
        look = amb_cells & np.isnan(p_amb)
        x_amb = np.where(look, (par[5] - par[0]) * par[1], np.nan)
        i_amb = np.clip(np.nan_to_num(x_amb).astype(np.intp), 0, arrays.s_star.shape[0] - 2)
        found, done_amb = _top_numpy(
            arrays, par, np.full(t.size, par[5]), x_amb, i_amb, x_amb - i_amb, j, c, ag
        )
        p_amb = np.where(look, found, p_amb)
        done_amb = done_amb | ~look
        p, done = _top_numpy(arrays, par, t, np.where(valid & ~own, x, np.nan), i, a, j, c, ag)
        p, done = np.where(own, p_amb, p), np.where(own, done_amb, done)
        with np.errstate(invalid="ignore"):
            p_amb = np.where(ex < 0.0, p_amb, np.nan)
        left = valid & ~(done & done_amb)
        slow[sl] |= left
        keep = valid & ~left
        top[sl] = np.where(keep, p, np.nan)
        amb[sl] = np.where(keep, p_amb, np.nan)
        excess[sl] = np.where(keep, ex, np.nan)
    return top, amb, excess, slow


def _tabled_numpy(tab, y):
    """:func:`_tabled` in numpy."""
    if tab is None or tab.size < 2:
        return np.full(y.shape, np.nan)
    m = np.minimum(y.astype(np.intp), tab.size - 1)
    inside = m < tab.size - 1
    m1 = np.minimum(m + 1, tab.size - 1)
    lo, hi = tab[m], tab[m1]
    with np.errstate(invalid="ignore"):
        both = np.isfinite(lo) & np.isfinite(hi)
        out = np.where(both, lo + (y - m) * (hi - lo), np.nan)
        out = np.where(np.isinf(lo) & np.isinf(hi), np.inf, out)
    return np.where(inside, out, np.nan)


def ambient_tops(arrays: GeothermArrays, par, search) -> np.ndarray:
    """The ambient column's top [GPa] (+inf: none) at sqrt(age) = m :data:`AMBIENT_STEP` up to
    sqrt(400 Ma), by ``search`` (:func:`search_compiled` or :func:`search_numpy`) with no table.

    With one water content every cell's ambient column is the same function of age: read from
    this table (linear between nodes where both are finite), it costs no search (the cells
    between a finite node and an infinite one, about a fold, are searched).
    """
    s = AMBIENT_STEP * np.arange(round(20.0 / AMBIENT_STEP) + 1)
    par = par.copy()
    par[8] = 0.0
    water = float(arrays.water_u[0]) ** (1.0 / WATER_EXPONENT)  # the one water content
    return search(arrays, par, np.full(s.size, par[5]), water, s * s)[0]


def _least_numpy(arrays: GeothermArrays, j, c, s):
    """:func:`_least` in numpy."""
    lt = arrays.least_tp
    y = s / SQRT_AGE_STEP
    m = np.minimum(y.astype(np.intp), lt.shape[1] - 2)
    b = y - m
    j1 = np.minimum(j + 1, lt.shape[0] - 1)
    lo = lt[j, m] + b * (lt[j, m + 1] - lt[j, m])
    hi = lt[j1, m] + b * (lt[j1, m + 1] - lt[j1, m])
    return lo + c * (hi - lo)
