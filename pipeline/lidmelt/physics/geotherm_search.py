"""The search for the geotherm top of melting of each cell, compiled (numba) and in numpy.

A cell (Tp, water, age) reads the critical ages s* of the four table columns about it
(:mod:`lidmelt.physics.geotherm_arrays`; bilinear in Tp and the water coordinate, as the
melting table is read) at each pressure node, linearly between nodes in pressure. Its top is
the shallowest pressure P >= P_min (the minimum top) and above its onset where s*(P) >= s, the
cell's sqrt(age / Ma): there the geotherm is at least as hot as the column
(:mod:`lidmelt.physics.geotherm`). The running maximum of s* down each column bounds the cell's
s* from above, so a binary search on it finds the first node that can qualify; the nodes from
there are read one by one (usually one or two). Where no node qualifies, or the crossing found
lies below the cell's onset (interpolated from the corners' onsets), the column meets its
geotherm nowhere below the minimum top: the top is +inf (the column does not melt).

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

__all__ = ["AVAILABLE", "search_compiled", "search_numpy"]

AVAILABLE = numba is not None
_BLOCK = 2048


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
        theta += 2.0 / (math.pi * n) * q_n * s_n
        s_prev, s_n = s_n, 2.0 * c1 * s_n - s_prev
        q_n *= q_step
        q_step *= q * q
    return theta


@_helper
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
    p_hi): regula falsi, Illinois variant, to 1e-7 GPa (3 mm)."""
    side = 0
    for _ in range(40):
        if p_hi - p_lo < 1e-7:
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


@_helper
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


@_helper
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
    # the node interval [p_lo, p_hi] about the crossing, checked and moved on the exact gap
    p_hi = p_min if k == k0 else k * dp
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
    return (top if top < _onset_at(onset, i, j, a, c, np.inf) else np.inf), True


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
def _loop(tp, water, w_stride, age, par, s_star, s_run, onset, least_tp, deficit, depth, g, top,
          amb, excess, slow):  # fmt: skip
    """Tops [GPa] of the cells and of their ambient columns, and the excess to melt [K].

    ``par``: Tp of the first node, 1/Tp step, pressure step, minimum top [GPa], deepest node
    [GPa], ambient Tp, 1/(water-coordinate step) (0: one water slice), largest water [wt%].
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
        p, done = _top(
            t, (t - t0) * inv_dt, j, c, age_ma, s_star, s_run, onset, deficit, depth, g, p_min,
            dp, p_last,
        )  # fmt: skip
        p_amb, done_amb = np.nan, True
        if ex < 0.0:
            p_amb, done_amb = _top(
                ambient, x_amb, j, c, age_ma, s_star, s_run, onset, deficit, depth, g, p_min,
                dp, p_last,
            )  # fmt: skip
        if not (done and done_amb):
            slow[n] = True
            continue
        top[n], amb[n], excess[n] = p, p_amb, ex


def _plain(values):
    """A writable C-contiguous float64 array (one compiled signature for every input)."""
    return np.require(values, float, ["C", "W"])


def search_compiled(arrays: GeothermArrays, par, tp, water, age):
    """(top, ambient top [GPa], excess [K], cells left to the caller) by the compiled loop.

    ``tp`` and ``age`` are 1-D float64 arrays, ``water`` a float or such an array.
    """
    tp, age = _plain(tp), _plain(age)
    w = np.array([float(water)]) if np.ndim(water) == 0 else _plain(water)
    out = [np.empty(tp.size) for _ in range(3)]
    slow = np.zeros(tp.size, np.bool_)
    _loop(
        tp, w, 0 if w.size == 1 and np.ndim(water) == 0 else 1, age, par, arrays.s_star,
        arrays.s_run, arrays.onset, arrays.least_tp, arrays.deficit, arrays.depth_km,
        arrays.geotherm, *out, slow,
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
    k, k_end, p_on = _first_node_numpy(arrays, par, i, a, j, c, np.sqrt(age))
    with np.errstate(invalid="ignore"):
        inside = (x >= 0.0) & (x <= n_tp - 1.0)
        deep = p_on >= p_last
    top = np.where(k == -2, p_min, np.inf)
    decided = inside & ((k == -2) | ~deep)
    todo = np.flatnonzero(inside & (k >= 0))

    def gap(p, idx):
        return _gap_numpy(arrays, p, tp[idx], age[idx], i[idx], a[idx], j[idx], c[idx], dp)

    kk = k[todo].copy()
    p_hi = np.where(kk == k0, p_min, kk * dp)
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
    kk[down] = np.maximum(kk[down], k0)
    while down.any():  # below: step down to the first node at or above the geotherm
        m = np.flatnonzero(down)
        kk[m] += 1
        beyond = kk[m] > k_end[todo[m]]
        m = m[~beyond]
        p_lo[m], g_lo[m] = p_hi[m], g_hi[m]
        p_hi[m] = kk[m] * dp
        g_hi[m] = gap(p_hi[m], todo[m])
        stop = g_hi[m] >= 0.0
        found[m[stop]] = True
        down = np.zeros(todo.size, bool)
        down[m[~stop]] = True
    root = _root_numpy(arrays, par, p_lo, g_lo, p_hi, g_hi, found, gap, todo)
    on_cell = _gather(arrays.onset, i[todo], a[todo], j[todo], c[todo])
    on_cell = np.where(np.isfinite(on_cell), on_cell, np.inf)
    res = np.where(at_min, p_min, np.where(found & (root < on_cell), root, np.inf))
    top[todo] = res
    decided[todo] |= at_min | found
    return np.where(inside, top, np.nan), decided


def _root_numpy(arrays, par, p_lo, g_lo, p_hi, g_hi, found, gap, todo):
    """:func:`_root` for the cells ``found`` (Illinois regula falsi, all at once)."""
    p_lo, g_lo, p_hi, g_hi = (v.copy() for v in (p_lo, g_lo, p_hi, g_hi))
    side = np.zeros(p_lo.size, np.int8)
    act = np.flatnonzero(found)
    for _ in range(40):
        act = act[p_hi[act] - p_lo[act] >= 1e-7]
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


def search_numpy(arrays: GeothermArrays, par, tp, water, age):
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
        p, done = _top_numpy(arrays, par, t, np.where(valid, x, np.nan), i, a, j, c, ag)
        with np.errstate(invalid="ignore"):
            amb_cells = valid & (ex < 0.0)
        x_amb = np.where(amb_cells, (par[5] - par[0]) * par[1], np.nan)
        i_amb = np.clip(np.nan_to_num(x_amb).astype(np.intp), 0, arrays.s_star.shape[0] - 2)
        p_amb, done_amb = _top_numpy(
            arrays, par, np.full(t.size, par[5]), x_amb, i_amb, x_amb - i_amb, j, c, ag
        )
        p_amb = np.where(amb_cells, p_amb, np.nan)
        done_amb = done_amb | ~amb_cells
        left = valid & ~(done & done_amb)
        slow[sl] |= left
        keep = valid & ~left
        top[sl] = np.where(keep, p, np.nan)
        amb[sl] = np.where(keep, p_amb, np.nan)
        excess[sl] = np.where(keep, ex, np.nan)
    return top, amb, excess, slow


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
