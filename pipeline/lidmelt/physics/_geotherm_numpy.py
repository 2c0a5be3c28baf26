"""The numpy path of the geotherm search (:mod:`lidmelt.physics._geotherm_search`).

The same steps as the compiled loop, on blocks of cells with every pressure node at once: the
first node whose interpolated critical age reaches the cell's sqrt(age), the crossing linear
between it and the node above where the critical age is smooth, else (and always beneath a
water load) solved on the exact gap T_g - T_col after moving to the node interval where that
gap changes sign. Used where numba does not import (and in the tests, against the compiled
loop).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from scipy import special

from lidmelt.physics import _plate
from lidmelt.physics._geotherm_arrays import SQRT_AGE_STEP, GeothermArrays, least_tp_for
from lidmelt.physics._geotherm_search import FLAT, ROOT_TOLERANCE_GPA, STEEP
from lidmelt.physics._table import WATER_EXPONENT

_BLOCK = 2048


class _Cells(NamedTuple):
    """1-D cells of a block: Tp [deg C], age [Ma], Tp index and fraction, water index and
    fraction (:func:`_corners`), minimum top [GPa] and water load [km]."""

    tp: np.ndarray
    age: np.ndarray
    i: np.ndarray
    a: np.ndarray
    j: np.ndarray
    c: np.ndarray
    p_min: np.ndarray
    zw: np.ndarray

    def take(self, idx) -> _Cells:
        """The cells ``idx`` (an index array or mask)."""
        return _Cells(*(v[idx] for v in self))


def _corners(arrays: GeothermArrays, par, tp, w):
    """Tp index and fraction, water index and fraction of 1-D cells (indices clipped)."""
    n_tp, n_w = arrays.s_star.shape[0], arrays.s_star.shape[1]
    x = (tp - par.tp_min_c) * par.inv_tp_step
    with np.errstate(invalid="ignore"):
        i = np.clip(np.nan_to_num(x).astype(np.intp), 0, n_tp - 2)
        if par.inv_water_step > 0.0:
            y = np.maximum(w, 0.0) ** WATER_EXPONENT * par.inv_water_step
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


def _first_node_numpy(arrays: GeothermArrays, par, cells: _Cells, s):
    """:func:`_first_node` for 1-D cells with every node at once: (node, deepest node, the
    corners' deepest onset, the node of the minimum top)."""
    i, a, j, c, p_min = cells.i, cells.a, cells.j, cells.c, cells.p_min
    n_p = arrays.s_star.shape[2]
    dp = par.pressure_step_gpa
    j1 = np.minimum(j + 1, arrays.onset.shape[1] - 1)
    corners = [arrays.onset[ii, jj] for ii in (i, i + 1) for jj in (j, np.where(c > 0, j1, j))]
    p_on = np.fmax.reduce(corners)
    nodes = _gather(arrays.s_star.astype(np.float64), i, a, j, c)
    rows = np.arange(i.size)
    k0 = np.minimum((p_min / dp).astype(np.intp), n_p - 2)
    at_min = nodes[rows, k0] + (p_min / dp - k0) * (nodes[rows, k0 + 1] - nodes[rows, k0])
    k = np.arange(n_p)
    with np.errstate(invalid="ignore"):
        k_end = np.minimum(np.nan_to_num(p_on / dp).astype(np.intp) + 1, n_p - 1)
        ok = (k[None, :] > k0[:, None]) & (k[None, :] <= k_end[:, None]) & (nodes >= s[:, None])
    first = np.where(ok.any(axis=1), np.argmax(ok, axis=1), -1)
    first = np.where(at_min >= s, k0, first)
    return np.where(np.isfinite(p_on), first, -2), k_end, p_on, k0


def _theta_numpy(z, age, g):
    """:func:`_theta` in numpy (:mod:`lidmelt.physics._plate` for the plate)."""
    out = np.where(z > 0.0, 1.0, 0.0)
    young = ~(age > 0.0)
    if g.plate == 0.0:
        with np.errstate(invalid="ignore", divide="ignore"):
            hs = special.erf(
                np.maximum(z, 0.0) * g.inv_two_sqrt_kappa / np.sqrt(np.where(young, 1.0, age))
            )
        return np.where(young, out, hs)
    zeta = z / g.plate_thickness_km
    inside = ~young & (zeta > 0.0) & (zeta < 1.0)
    out = np.where(~young & (zeta <= 0.0), 0.0, out)
    if inside.any():
        out[inside] = _plate.theta(zeta[inside], age[inside] * g.tau_per_ma)
    return out


def _gap_numpy(arrays: GeothermArrays, p, cells: _Cells, dp):
    """:func:`_gap` in numpy (at the pressures ``p`` of ``cells``)."""
    tp, age, i, a, j, c, _, zw = cells
    d, depth, g = arrays.deficit, arrays.depth_km, arrays.geotherm
    k = np.minimum((p / dp).astype(np.intp), d.shape[2] - 2)
    f = p / dp - k
    j1 = np.minimum(j + 1, d.shape[1] - 1)

    def at(kk):
        lo = d[i, j, kk] + a * (d[i + 1, j, kk] - d[i, j, kk])
        hi = d[i, j1, kk] + a * (d[i + 1, j1, kk] - d[i, j1, kk])
        return lo + c * (hi - lo)

    lo, hi = at(k), at(k + 1)
    z = depth[k] + f * (depth[k + 1] - depth[k]) - zw
    t_is = (tp + 273.15) * np.exp(g.adiabat_per_gpa * p) - 273.15
    return lo + f * (hi - lo) - (t_is - g.surface_c) * (1.0 - _theta_numpy(z, age, g))


def _top_numpy(arrays: GeothermArrays, par, x, cells: _Cells):
    """(top [GPa] or +inf, decided) of 1-D cells: :func:`_top` step by step for all at once;
    ``x`` the cells' Tp coordinate (NaN: not searched)."""
    i, a, j, c, p_min, zw = cells.i, cells.a, cells.j, cells.c, cells.p_min, cells.zw
    n_tp = arrays.s_star.shape[0]
    dp, p_last = par.pressure_step_gpa, par.top_max_gpa
    s = np.sqrt(cells.age)
    k, k_end, p_on, k0 = _first_node_numpy(arrays, par, cells, s)
    loaded = zw > 0.0
    with np.errstate(invalid="ignore"):
        inside = (x >= 0.0) & (x <= n_tp - 1.0)
        deep = p_on >= p_last
    top = np.where(k == -2, p_min, np.inf)
    top = np.where((k == k0) & ~loaded, p_min, top)
    decided = inside & ((k == -2) | ((k == k0) & ~loaded) | ~deep)
    on_cell = _gather(arrays.onset, i, a, j, c)
    on_cell = np.where(np.isfinite(on_cell), on_cell, np.inf)
    # beneath a load the tabulated s* bound the cell's: the minimum top on the exact gap
    lm = np.flatnonzero(inside & loaded & (k >= k0))
    g_min = _gap_numpy(arrays, p_min[lm], cells.take(lm), dp)
    top[lm[g_min >= 0.0]] = p_min[lm[g_min >= 0.0]]
    decided[lm] = True
    rest = lm[~(g_min >= 0.0)]
    k[rest] = np.maximum(k[rest], k0[rest] + 1)
    # s* between the node above (or the minimum top) and node k: linear where it is smooth
    todo = np.flatnonzero(inside & ~loaded & (k > k0))
    kk, kz = k[todo], k0[todo]
    s_lo = _nodes_at(arrays.s_star, kk - 1, i[todo], a[todo], j[todo], c[todo])
    s_next = _nodes_at(arrays.s_star, kz + 1, i[todo], a[todo], j[todo], c[todo])
    pz = p_min[todo]
    s_lo = np.where(kk - 1 == kz, s_lo + (pz / dp - kz) * (s_next - s_lo), s_lo)
    s_hi = _nodes_at(arrays.s_star, kk, i[todo], a[todo], j[todo], c[todo])
    p_lo = np.where(kk - 1 > kz, (kk - 1) * dp, pz)
    with np.errstate(invalid="ignore", divide="ignore"):
        linear = p_lo + (s[todo] - s_lo) / (s_hi - s_lo) * (kk * dp - p_lo)
    steep = ~((s_hi - s_lo >= FLAT * s[todo]) & (s_hi - s_lo <= STEEP * s[todo]))
    top[todo] = np.where(linear < on_cell[todo], linear, np.inf)
    decided[todo] = True
    ref = np.concatenate([todo[steep], rest])
    top[ref] = _exact_numpy(arrays, par, cells, (k, k_end), ref, on_cell)
    return np.where(inside, top, np.nan), decided


def _nodes_at(arr, k, i, a, j, c):
    """arr at node k of each cell, bilinear in Tp and water (1-D cells)."""
    j1 = np.minimum(j + 1, arr.shape[1] - 1)
    lo = arr[i, j, k] + a * (arr[i + 1, j, k] - arr[i, j, k])
    hi = arr[i, j1, k] + a * (arr[i + 1, j1, k] - arr[i, j1, k])
    return (lo + c * (hi - lo)).astype(np.float64)


def _exact_numpy(arrays, par, cells: _Cells, nodes, todo, on_cell):
    """The tops of the cells ``todo`` (of ``cells``) on the exact gap (:func:`_top`'s exact
    branch); ``nodes``: (first node, deepest node) of every cell."""
    dp = par.pressure_step_gpa
    k, k_end = nodes

    def gap(p, idx):
        return _gap_numpy(arrays, p, cells.take(idx), dp)

    pm = cells.p_min[todo]
    kk = k[todo].copy()
    p_hi = kk * dp
    g_hi = gap(p_hi, todo)
    p_lo, g_lo = p_hi.copy(), g_hi.copy()
    found = np.zeros(todo.size, bool)
    at_min = np.zeros(todo.size, bool)
    up = g_hi >= 0.0
    while up.any():  # the crossing lies above: step up
        m = np.flatnonzero(up)
        at_min[m] |= p_hi[m] <= pm[m]
        m = m[p_hi[m] > pm[m]]
        kk[m] -= 1
        p_lo[m] = np.maximum(kk[m] * dp, pm[m])
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
    root = _root_numpy(p_lo, g_lo, p_hi, g_hi, found, gap, todo)
    res = np.where(found & (root < on_cell[todo]), root, np.inf)
    return np.where(at_min, pm, res)


def _root_numpy(p_lo, g_lo, p_hi, g_hi, found, gap, todo):
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


def search_numpy(arrays: GeothermArrays, par, tp, water, age, load, p_min, amb_tab=None):
    """:func:`search_compiled` in numpy (blocks of cells, every node at once)."""
    n = tp.size
    w = np.broadcast_to(np.asarray(water, float), (n,))
    zw_all = np.broadcast_to(np.asarray(load, float), (n,))
    pm_all = np.broadcast_to(np.asarray(p_min, float), (n,))
    least = least_tp_for(arrays, zw_all)
    top, amb, excess = (np.full(n, np.nan) for _ in range(3))
    slow = np.zeros(n, bool)
    for start in range(0, n, _BLOCK):
        sl = slice(start, start + _BLOCK)
        t, ww, ag, zw, pm = tp[sl], w[sl], age[sl], zw_all[sl], pm_all[sl]
        with np.errstate(invalid="ignore"):
            valid = (ag >= 0.0) & np.isfinite(t) & (ww >= 0.0) & (zw >= 0.0)
            slow[sl] = valid & (
                (ww > par.water_max_wt_pct)
                | (zw > par.load_max_km)
                | (pm >= par.top_max_gpa - par.pressure_step_gpa)
            )
            valid &= ~slow[sl]
        x, i, a, j, c = _corners(arrays, par, t, ww)
        ag = np.where(valid, ag, 0.0)
        zw = np.where(valid, zw, 0.0)
        pm = np.where(valid, pm, 0.0)
        yl = zw * par.inv_load_step
        ex = _least_numpy(least, j, c, np.sqrt(ag), yl) - par.ambient_c
        own = t == par.ambient_c
        with np.errstate(invalid="ignore"):
            amb_cells = valid & ((ex < 0.0) | own)
        p_amb = np.where(
            amb_cells, _tabled_numpy(amb_tab, np.sqrt(ag) * par.inv_ambient_step, yl), np.nan
        )
        look = amb_cells & np.isnan(p_amb)
        x_amb = np.where(look, (par.ambient_c - par.tp_min_c) * par.inv_tp_step, np.nan)
        i_amb = np.clip(np.nan_to_num(x_amb).astype(np.intp), 0, arrays.s_star.shape[0] - 2)
        found, done_amb = _top_numpy(
            arrays, par, x_amb,
            _Cells(np.full(t.size, par.ambient_c), ag, i_amb, x_amb - i_amb, j, c, pm, zw),
        )  # fmt: skip
        p_amb = np.where(look, found, p_amb)
        done_amb = done_amb | ~look
        x_own = np.where(valid & ~own, x, np.nan)
        p, done = _top_numpy(arrays, par, x_own, _Cells(t, ag, i, a, j, c, pm, zw))
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


def _tabled_numpy(tab, y, yl):
    """:func:`_tabled` in numpy (rows of ``tab``: load nodes)."""
    if tab is None or tab.shape[1] < 2:
        return np.full(y.shape, np.nan)
    n_l, n_m = tab.shape
    m = np.minimum(y.astype(np.intp), n_m - 1)
    l0 = yl.astype(np.intp)
    e = yl - l0
    one = e == 0.0
    inside = (m < n_m - 1) & (l0 < n_l) & (one | (l0 + 1 < n_l))
    m, m1 = np.minimum(m, n_m - 2), np.minimum(m + 1, n_m - 1)
    l0c = np.minimum(l0, n_l - 1)
    l1 = np.where(one, l0c, np.minimum(l0 + 1, n_l - 1))
    parts = []
    for row in (l0c, l1):
        lo, hi = tab[row, m], tab[row, m1]
        with np.errstate(invalid="ignore"):
            parts.append((lo + (y - m) * (hi - lo), np.isfinite(lo) & np.isfinite(hi),
                          np.isinf(lo) & np.isinf(hi)))  # fmt: skip
    (v0, f0, i0), (v1, f1, i1) = parts
    with np.errstate(invalid="ignore"):
        out = np.where(f0 & f1, (1.0 - e) * v0 + e * v1, np.nan)
        out = np.where(i0 & i1, np.inf, out)
    return np.where(inside, out, np.nan)


def _least_numpy(lt, j, c, s, yl):
    """:func:`_least` in numpy (``lt``: (n_w, n_loads, n_s))."""
    y = s / SQRT_AGE_STEP
    m = np.minimum(y.astype(np.intp), lt.shape[2] - 2)
    b = y - m
    l0 = np.minimum(yl.astype(np.intp), lt.shape[1] - 1)
    has = l0 + 1 < lt.shape[1]
    e = np.where(has, yl - l0, 0.0)
    l1 = np.minimum(l0 + 1, lt.shape[1] - 1)

    def row(jj):
        lo = lt[jj, l0, m] + b * (lt[jj, l0, m + 1] - lt[jj, l0, m])
        hi = lt[jj, l1, m] + b * (lt[jj, l1, m + 1] - lt[jj, l1, m])
        return np.where(e > 0.0, lo + e * (hi - lo), lo)

    j1 = np.minimum(j + 1, lt.shape[0] - 1)
    lo = row(j)
    with np.errstate(invalid="ignore"):
        return np.where(c > 0.0, lo + c * (row(j1) - lo), lo)
