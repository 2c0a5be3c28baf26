"""The compiled melting kernel: every output of a cell from the table in one pass (numba).

:func:`evaluate_compiled` does what :func:`lidmelt.physics._evaluate.evaluate_cells` does on its
table path, cell by cell in compiled code that releases the GIL (the engine runs it in dask
threads). It returns None where it cannot serve the call (numba missing, a model whose solidus
does not have the form below, constants outside the table), and the caller then takes the numpy
table path; single cells it cannot do are marked for that path too (outside the table, or on
the edge of a flag that interpolation cannot decide).

The onset without a search
--------------------------
The solid isentrope of Tp is above the solidus at P exactly when Tp > Tp*(P), with
Tp*(P) = (T_sol(P, w) + 273.15) exp(-alpha_s P / (rho_s c_p)) - 273.15 [derived from the solid
isentrope, docs/physics.md, "Definitions lidmelt fixes"; the same curve gives
:func:`~lidmelt.physics._evaluate.excess_to_melt_k`]. So the onset, the shallowest crossing
searched from the surface (:func:`lidmelt.physics._column.onset_pressure_gpa`), is the first P at
which Tp*(P) reaches Tp. The curve is tabulated on a fine pressure grid (:data:`ONSET_STEP_GPA`)
once per water content, with the index of the first node its running maximum reaches for every
Tp on a fine Tp grid; a cell reads that index, steps to the first node at or above its Tp
and interpolates linearly between the two nodes about the crossing. No interval is rough: near
a tangency the crossing is still the first node at or above Tp.

Where water varies cell by cell, the curve is Tp*(P, u) = g0(P) + d(P) min(u, u_sat(P)) with
u = water^0.75: below saturation the Katz et al. (2003) solidus depression K (X/D)^gamma is
linear in u (gamma = 0.75, Table 2), and at saturation it stops growing. The form is checked
against the model's solidus when the arrays are made (else this kernel is not used). The
curves at a few water nodes bound the cell's curve from above (more water, lower solidus), so
the node below the cell's water gives where its step starts.

H, F and the integral of P dF come from the table (bilinear in Tp and top pressure, linear in u
between water nodes), as on the numpy path.

Compiling takes 5-20 s on the 2-core development machine (``bench_column.py`` prints it); numba
keeps the result on disk (beside this module, in ``$NUMBA_CACHE_DIR`` or under HOME, else in
a private temporary folder), and a warm cache loads in about 1 s. Where none is writable, every
process compiles once.
"""

from __future__ import annotations

import time

import numpy as np

from lidmelt._errors import ModelError
from lidmelt.physics._flags import (
    FLAG_BEYOND_CALIBRATION,
    FLAG_INVALID_INPUT,
    FLAG_NO_ONSET,
    FLAG_UPPER_MANTLE_FLOOR,
    FLAG_WATER_SATURATED,
)
from lidmelt.physics._jitcache import njit
from lidmelt.physics._kernel_arrays import kernel_arrays
from lidmelt.physics._kernel_records import Cells, KernelCall, KernelTimings
from lidmelt.physics._regime import (
    LEAST_ANOMALY_MELT_KM,
    REGIME_AMBIENT_AND_ANOMALY,
    REGIME_AMBIENT_ONLY,
    REGIME_ANOMALY_ONLY,
    REGIME_NO_MELTING,
)
from lidmelt.physics._table import WATER_EXPONENT

try:  # numba compiles the kernel; without it the numpy table path is used
    import numba
except ImportError:  # pragma: no cover - the numpy path is tested by forcing it
    numba = None

AVAILABLE = numba is not None
#: Relative band about the saturation limit in which the cell goes to the numpy path, where the
#: linear interpolation of the saturation limit might decide the flag differently (a choice).
_SATURATION_BAND = 0.02
#: Output rows of the kernel, in order.
ROWS = (
    "melt_thickness_km",
    "onset_depth_km",
    "onset_pressure_gpa",
    "melting_top_km",
    "max_melt_fraction",
    "mean_melt_pressure_gpa",
    "excess_to_melt_k",
    "anomaly_melt_thickness_km",
    "melting_regime",
    "crustal_thickness_km",
    "deep_melt_share",
    "solidus_crossing_depth_km",
    "melt_production_mm_yr",
)


def _jit(func=None, *, inline="never", refcount=True):
    """numba.njit without the GIL, cached on disk where numba finds a writable place.

    In a read-only install and HOME without ``NUMBA_CACHE_DIR``, numba has no cache location;
    :func:`lidmelt.physics._jitcache.njit` then caches in a private temporary folder, or
    compiles in memory once per process, with a one-line note. The helpers of one
    cell are inlined (``inline="always"``): called, they cost three times the work they do.
    ``refcount=False`` compiles without numba's reference counting of arrays (its ``_nrt``
    option) for a function that allocates nothing: inlined helpers that take arrays otherwise
    count references on every call, atomically, which made the cell loop ten times slower
    (``benchmarks/bench_column.py``: 46 against 470 M onsets/s).
    """
    if func is None:
        return lambda f: _jit(f, inline=inline, refcount=refcount)
    if numba is None:
        return func
    opts = {"nogil": True, "inline": inline, "error_model": "numpy"}
    if not refcount:
        opts["_nrt"] = False
    return njit(func, **opts)


# ------------------------------------------------------------------------------------------------
# compiled helpers (one cell)
# ------------------------------------------------------------------------------------------------
@_jit(inline="always")
def _curve_at(cv, i, u):
    """Tp*(P_i) [deg C] at water coordinate u (``cv`` rows: g0, d, u_sat; see module doc)."""
    return cv[i, 0] + cv[i, 1] * min(u, cv[i, 2])


@_jit(inline="always")
def _curve_interp(cv, p, inv_step, u):
    """Tp*(p) [deg C]: g0, d and u_sat each linear between the curve's nodes.

    Interpolating u_sat rather than the curve keeps the kink where water saturates exact.
    """
    x = p * inv_step
    i = min(int(x), cv.shape[0] - 2)
    a = x - i
    base = cv[i, 0] + a * (cv[i + 1, 0] - cv[i, 0])
    slope = cv[i, 1] + a * (cv[i + 1, 1] - cv[i, 1])
    return base + slope * min(u, cv[i, 2] + a * (cv[i + 1, 2] - cv[i, 2]))


@_jit
def _onset(tp, u, j, cv, first, t0, inv_dt, p_step):
    """Onset pressure [GPa] of Tp at water coordinate u; NaN without a crossing.

    ``first[j, k]`` is the first node at which the running maximum of the curve of water node
    j (at or below u) reaches t0 + k dt; no node before it reaches a Tp >= that on a wetter
    curve either.
    """
    if tp <= _curve_at(cv, 0, u):
        return np.nan
    k = int((tp - t0) * inv_dt)
    k = min(max(k, 0), first.shape[1] - 1)
    i = max(first[j, k], 1)
    n = cv.shape[0]
    gi = 0.0
    while i < n:
        gi = _curve_at(cv, i, u)
        if gi >= tp:
            break
        i += 1
    if i >= n:
        return np.nan
    ga = _curve_at(cv, i - 1, u)
    return (i - 1 + (tp - ga) / (gi - ga)) * p_step


@_jit(inline="always")
def _bilinear(vals, i, j, k, q, a, b):
    """Component q of the table at water node j, bilinear in (Tp, top pressure)."""
    v0 = vals[i, j, k, q] + b * (vals[i, j, k + 1, q] - vals[i, j, k, q])
    v1 = vals[i + 1, j, k, q] + b * (vals[i + 1, j, k + 1, q] - vals[i + 1, j, k, q])
    return v0 + a * (v1 - v0)


@_jit(inline="always")
def _lookup(vals, x, y, j, c):
    """H, F and integral of P dF: bilinear in (Tp, top pressure), linear in water (j, c)."""
    i = min(int(x), vals.shape[0] - 2)
    k = min(int(y), vals.shape[2] - 2)
    a, b = x - i, y - k
    h = _bilinear(vals, i, j, k, 0, a, b)
    f = _bilinear(vals, i, j, k, 1, a, b)
    g = _bilinear(vals, i, j, k, 2, a, b)
    if c > 0.0:
        j1 = min(j + 1, vals.shape[1] - 1)
        h += c * (_bilinear(vals, i, j1, k, 0, a, b) - h)
        f += c * (_bilinear(vals, i, j1, k, 1, a, b) - f)
        g += c * (_bilinear(vals, i, j1, k, 2, a, b) - g)
    return h, f, g


@_jit(inline="always")
def _lookup_at(vals, deep, par, x, y, j, c, u):
    """:func:`_lookup`, from the deep columns where they are (Tp nodes from
    ``par.deep_tp_node`` on): integrated at exactly this water content
    (:meth:`MeltTable.deep_columns`), or where water varies on the finer water nodes
    (:attr:`MeltTable.deep_values`, linear in u between them, water step 1 /
    ``par.deep_inv_water_step``)."""
    i0 = par.deep_tp_node
    if x >= i0:
        xf = u * par.deep_inv_water_step
        jf = min(int(xf), deep.shape[1] - 1)
        return _lookup(deep, x - i0, y, jf, xf - jf)
    return _lookup(vals, x, y, j, c)


@_jit(inline="always")
def _saturation(sat, p, inv_step):
    """Bulk water [wt%] that saturates the solid source at p (linear between nodes)."""
    x = p * inv_step
    i = min(int(x), sat.size - 2)
    lo, hi = sat[i], sat[i + 1]
    if not (np.isfinite(lo) and np.isfinite(hi)):
        return np.inf
    return lo + (x - i) * (hi - lo)


@_jit(inline="always")
def _pressure_of_depth(z, par, zp):
    """P [GPa] at rock-equivalent depth z [km]: constant rho g above the join (``par.join_km``),
    the tabulated PREM relation below (``zp`` rows: P, Z; :mod:`lidmelt.physics._pressure`);
    +inf (a column that meets its geotherm nowhere) stays +inf."""
    if not z > par.join_km:
        return z * par.gpa_per_km
    if z == np.inf:
        return np.inf
    # PREM's rho g exceeds the constant one below the join: the node is at or after the guess
    k = min(int((z - par.join_km) * par.gpa_per_km * par.inv_node_step), zp.shape[0] - 2)
    while k + 2 < zp.shape[0] and zp[k + 1, 1] < z:
        k += 1
    a = (z - zp[k, 1]) / (zp[k + 1, 1] - zp[k, 1])
    return zp[k, 0] + a * (zp[k + 1, 0] - zp[k, 0])


@_jit(inline="always")
def _depth_of_pressure(p, par, zp):
    """Rock-equivalent depth [km] of pressure p [GPa] (the inverse of the above)."""
    if not p > par.join_gpa:
        return p / par.gpa_per_km
    x = (p - par.join_gpa) * par.inv_node_step
    k = min(int(x), zp.shape[0] - 2)
    return zp[k, 1] + (x - k) * (zp[k + 1, 1] - zp[k, 1])


@_jit(inline="always")
def _deep_share(vals, deep, x, j, c, u, h, top_p, p_on, par, zp):
    """H_deep / H (:mod:`lidmelt.physics._deepshare`): H and F at the top P_c from the table."""
    cal = par.calibrated_max_gpa
    if not h > 0.0:
        return np.nan
    if p_on <= cal:
        return 0.0
    if top_p >= cal:
        return 1.0
    h_c, f_c, _ = _lookup_at(vals, deep, par, x, cal * par.inv_pressure_step, j, c, u)
    dz = _depth_of_pressure(cal, par, zp) - _depth_of_pressure(top_p, par, zp)
    return min(max((h_c + f_c * dz) / h, 0.0), 1.0)


@_jit(inline="always")
def _column(tp, w, u, top_p, p_on, par, sat, vals, zp, rough, deep):
    """One valid cell with its onset: (flag, onset [GPa], H, F, mean melt pressure, deep melt
    share, to numpy)."""
    cal = par.calibrated_max_gpa
    if not np.isfinite(p_on):
        return FLAG_NO_ONSET, np.nan, np.nan, np.nan, np.nan, np.nan, False
    flag = FLAG_BEYOND_CALIBRATION if (p_on > cal or cal < top_p < np.inf) else 0
    if p_on >= par.max_onset_gpa - 1e-9:
        flag |= FLAG_UPPER_MANTLE_FLOOR
    s = _saturation(sat, p_on, 1.0 / par.onset_step_gpa)
    if w > 0.0 and np.isfinite(s) and abs(w - s) <= _SATURATION_BAND * s:
        return flag, p_on, np.nan, np.nan, np.nan, np.nan, True
    if w > s:
        return flag | FLAG_WATER_SATURATED, np.nan, np.nan, np.nan, np.nan, np.nan, False
    if p_on <= top_p:
        return flag, p_on, 0.0, 0.0, np.nan, np.nan, False
    x, y = (tp - par.tp_min_c) * par.inv_tp_step, top_p * par.inv_pressure_step
    xj = u * par.table_inv_water_step
    j = min(int(xj), vals.shape[1] - 1)
    jr = min(int(u * par.rough_inv_water_step), rough.shape[1] - 1)
    if rough[min(int(x), rough.shape[0] - 1), jr]:
        return flag, p_on, np.nan, np.nan, np.nan, np.nan, True
    h, f, g = _lookup_at(vals, deep, par, x, y, j, xj - j, u)
    if not (np.isfinite(h) and np.isfinite(f)):
        return flag, p_on, np.nan, np.nan, np.nan, np.nan, True
    mean = min(max(g / f, top_p), p_on) if f > 0.0 else np.nan
    share = _deep_share(vals, deep, x, j, xj - j, u, h, top_p, p_on, par, zp)
    return flag, p_on, h, f, mean, share, False


@_jit(inline="always")
def _ambient_melt(w, u, top_p, p_on, par, sat, vals, deep):
    """H [km] and F at the top of the ambient column (0 where it is flagged or does not melt),
    and whether it needs numpy.

    Looked up exactly as a cell's own H (:func:`_lookup` at the ambient Tp), so that a cell
    without anomaly gets an anomaly melt of exactly 0, not a rounding difference.
    """
    if not np.isfinite(p_on) or p_on <= top_p:
        return 0.0, 0.0, False
    if top_p > par.top_max_gpa:  # an ambient top of its own beyond the table's nodes
        return 0.0, 0.0, True
    s = _saturation(sat, p_on, 1.0 / par.onset_step_gpa)
    if w > 0.0 and np.isfinite(s) and abs(w - s) <= _SATURATION_BAND * s:
        return 0.0, 0.0, True
    if w > s:
        return 0.0, 0.0, False
    xj = u * par.table_inv_water_step
    j = min(int(xj), vals.shape[1] - 1)
    x = (par.ambient_c - par.tp_min_c) * par.inv_tp_step
    h, f, _ = _lookup_at(vals, deep, par, x, top_p * par.inv_pressure_step, j, xj - j, u)
    if not (np.isfinite(h) and np.isfinite(f)):
        return 0.0, 0.0, True
    return h, f, False


@_jit(inline="always")
def _regime(h, f, h_amb, f_amb, min_fraction, least):
    """The melting regime class (:func:`lidmelt.physics._regime.melting_regime`, one cell)."""
    if not np.isfinite(h):
        return np.nan
    if not (h > 0.0 and f >= min_fraction):
        return float(REGIME_NO_MELTING)
    if h_amb > 0.0 and f_amb >= min_fraction:
        if h - h_amb >= least:
            return float(REGIME_AMBIENT_AND_ANOMALY)
        return float(REGIME_AMBIENT_ONLY)
    return float(REGIME_ANOMALY_ONLY)


@_jit(inline="always")
def _onset_fast(tp, u, inv, t0, inv_dt, inv_du):
    """Onset [GPa] by the inverse table (linear in Tp, and in u between water curves); NaN
    where it must be searched (:func:`_onset`)."""
    x = (tp - t0) * inv_dt
    k = int(x)
    if k < 0 or k >= inv.shape[1]:
        return np.nan
    fx = x - k
    if inv.shape[0] == 1:
        return inv[0, k, 0] + fx * inv[0, k, 1]
    y = u * inv_du
    j = min(int(y), inv.shape[0] - 2)
    p0 = inv[j, k, 0] + fx * inv[j, k, 1]
    return p0 + (y - j) * (inv[j + 1, k, 0] + fx * inv[j + 1, k, 1] - p0)


@_jit(inline="always")
def _onset_any(tp, u, par, cv, first, inv):
    """Onset [GPa]: the inverse table where it is smooth, else the search of the curve."""
    t0, inv_dt, inv_du = par.onset_tp0_c, par.onset_inv_tp_step, par.curve_inv_water_step
    p_on = _onset_fast(tp, u, inv, t0, inv_dt, inv_du)
    if np.isfinite(p_on):
        return p_on
    j = min(int(u * inv_du), first.shape[0] - 1)
    p_on = _onset(tp, u, j, cv, first, t0, inv_dt, par.onset_step_gpa)
    if np.isnan(p_on) and tp > _curve_at(cv, 0, u):
        return par.max_onset_gpa  # above the solidus down to the upper mantle's floor: onset there
    return p_on


@_jit(refcount=False)
def _cells(
    tp, lid, water, w_stride, up, up_stride, given, g_stride, par, cv, first, inv, sat, vals, out,
    flag, slow, load, load_stride, zp, rough, deep,
):  # fmt: skip
    """Every output of every cell into ``out`` (rows :data:`ROWS`) and ``flag``.

    Marks in ``slow`` (all False on entry) the cells left for the numpy path (their rows are
    not written). Where ``par.nodata`` is not NaN, a cell with a non-finite Tp or water
    or a NaN lid gets NaN in every row and that flag value. A lid of +inf: the column meets its
    geotherm nowhere (it does not melt; top NaN). ``given`` (2, n) holds per cell the ambient
    column's own top [km] and the excess to melt [K] where not NaN (the geotherm rule);
    ``load`` the water load's rock-equivalent depth [km].
    """
    min_top, ambient, nodata = par.min_top_km, par.ambient_c, par.nodata
    nodata_on = np.isfinite(nodata)
    varying = par.curve_inv_water_step > 0.0
    # one water content: one ambient onset for every cell
    p_amb = np.nan
    if np.isfinite(ambient):
        p_amb = _onset_any(ambient, par.water_u, par, cv, first, inv)
    for n in range(tp.size):
        t, lid_km, w = tp[n], lid[n], water[n * w_stride]
        if nodata_on and not (np.isfinite(t) and lid_km == lid_km and np.isfinite(w)):
            for r in range(out.shape[0]):
                out[r, n] = np.nan
            flag[n] = nodata
            continue
        lid_ok = lid_km == lid_km and lid_km >= 0.0
        w_ok = np.isfinite(w) and w >= 0.0 and (par.hydrous > 0.0 or w == 0.0)
        zw = load[n * load_stride]
        top_km = max(lid_km, min_top)
        top_p = _pressure_of_depth(top_km + zw, par, zp)
        valid = lid_ok and w_ok and np.isfinite(t) and t > par.surface_solidus_c
        if (lid_ok and w_ok and w > par.water_max_wt_pct) or (
            valid and (t < par.tp_min_c or t > par.tp_max_c or par.top_max_gpa < top_p < np.inf)
        ):
            slow[n] = True
            continue
        # u = water^0.75 on the curves (one water content: its u, or 0 on its own curve)
        u_curve = (w**WATER_EXPONENT if w > 0.0 else 0.0) if varying else par.water_u
        excess = given[1, n * g_stride]
        if np.isnan(excess) and lid_ok and w_ok and top_p <= par.max_onset_gpa:
            excess = _curve_interp(cv, top_p, 1.0 / par.onset_step_gpa, u_curve) - ambient
        h = f = p_on = mean = share = np.nan
        fl = FLAG_INVALID_INPUT
        if valid:
            p_on = _onset_any(t, u_curve, par, cv, first, inv)
            fl, p_on, h, f, mean, share, to_numpy = _column(
                t, w, u_curve, top_p, p_on, par, sat, vals, zp, rough, deep
            )
            if to_numpy:
                slow[n] = True
                continue
        h_amb = f_amb = 0.0
        if excess < 0.0 and np.isfinite(h):
            if varying:
                p_amb = _onset_any(ambient, u_curve, par, cv, first, inv)
            amb_top = given[0, n * g_stride]
            amb_p = top_p
            if not np.isnan(amb_top):
                amb_p = _pressure_of_depth(max(amb_top, min_top) + zw, par, zp)
            h_amb, f_amb, to_numpy = _ambient_melt(w, u_curve, amb_p, p_amb, par, sat, vals, deep)
            if to_numpy:
                slow[n] = True
                continue
        z_on = _depth_of_pressure(p_on, par, zp) - zw
        melts = h > 0.0  # the onset where the column melts
        out[0, n] = h
        out[1, n] = z_on if melts else np.nan
        out[2, n] = p_on if melts else np.nan
        out[3, n] = top_km if valid and top_km < np.inf else np.nan
        out[4, n], out[5, n], out[6, n] = f, mean, excess
        out[7, n] = max(h - h_amb, 0.0) if np.isfinite(h) else np.nan
        out[8, n] = _regime(h, f, h_amb, f_amb, par.min_fraction, par.least_anomaly_km)
        out[9, n], out[10, n], out[11, n] = h * par.crust_ratio, share, z_on
        out[12, n] = f * up[n * up_stride]
        flag[n] = fl


# ------------------------------------------------------------------------------------------------
# the entry point
# ------------------------------------------------------------------------------------------------
def _plain(values):
    """A writable C-contiguous float64 copy or view (one compiled signature for every input)."""
    arr = np.ascontiguousarray(values, float)
    return arr if arr.flags.writeable else arr.copy()


_COMPILE = {"seconds": 0.0}


def compile_seconds() -> float:
    """Seconds the first call in this process spent compiling (or loading) the kernel."""
    return _COMPILE["seconds"]


def evaluate_compiled(table, cells: Cells, call: KernelCall, out=None):
    """Every output of 1-D cells by the compiled kernel, or None where it cannot serve them.

    ``cells`` (:class:`~lidmelt.physics._kernel_records.Cells`): Tp and lid 1-D float arrays;
    water a float (one water content) or an array like Tp; upwelling a float, an array like Tp
    or None (no production); the water load a float or an array like Tp; the ambient column's
    own top and the excess to melt None or arrays like Tp. ``call``: the settings of the call.
    ``out``, a float32 C-contiguous array (len(ROWS), n), receives the rows (else one is made).
    Returns (outputs by name as float32 arrays, flag as uint8, mask of the cells left for the
    numpy path).
    """
    if not AVAILABLE:
        return None
    lay, water = table.layout, cells.water_wt_pct
    if np.isfinite(call.ambient_c) and not lay.tp_min_c <= call.ambient_c <= lay.tp_max_c:
        return None
    one = np.ndim(water) == 0
    if one and not 0.0 <= float(water) <= lay.water_max_wt_pct:
        return None
    arrays = kernel_arrays(table, float(water) if one else None)
    if arrays is None:
        return None
    par, cv, first, inv, sat, vals, zp, rough, deep = arrays
    par = par._replace(
        min_top_km=float(call.min_top_km), ambient_c=float(call.ambient_c),
        crust_ratio=float(call.crust_ratio),
        nodata=np.nan if call.nodata is None else float(call.nodata),
        min_fraction=float(call.min_fraction), least_anomaly_km=float(LEAST_ANOMALY_MELT_KM),
    )  # fmt: skip
    tp, lid = _plain(cells.potential_temperature_c), _plain(cells.lid_depth_km)
    given = np.full((2, 1), np.nan)
    if cells.ambient_lid_depth_km is not None or cells.excess_k is not None:
        given = np.full((2, tp.size), np.nan)
        for k, arr in enumerate((cells.ambient_lid_depth_km, cells.excess_k)):
            if arr is not None:
                given[k] = arr
    w = np.array([float(water)]) if one else _plain(water)
    upwelling, load = cells.upwelling_mm_yr, cells.water_load_km
    up = np.array([np.nan if upwelling is None else float(np.ravel(upwelling)[0])])
    if upwelling is not None and np.size(upwelling) > 1:
        up = _plain(np.broadcast_to(np.asarray(upwelling, float), tp.shape))
    if out is None:
        out = np.empty((len(ROWS), tp.size), np.float32)
    if upwelling is None:  # no production: NaN also in the cells left to the numpy path
        out[-1] = np.nan
    zw = _plain(np.ravel(load)) if np.size(load) > 1 else np.array([float(np.ravel(load)[0])])
    flag = np.zeros(tp.size, np.uint8)
    first_call = _COMPILE["seconds"] == 0.0
    t = time.perf_counter()
    slow = np.zeros(tp.size, np.bool_)
    _cells(
        tp, lid, w, 0 if one else 1, up, 0 if up.size == 1 else 1, given,
        0 if given.shape[1] == 1 else 1, par, cv, first, inv, sat, vals, out, flag, slow, zw,
        0 if zw.size == 1 else 1, zp, rough, deep,
    )  # fmt: skip
    if first_call:
        _COMPILE["seconds"] = time.perf_counter() - t
    names = ROWS if upwelling is not None else ROWS[:-1]
    return {name: out[k] for k, name in enumerate(names)}, flag, slow


def use_compiled(compiled: bool | None) -> bool:
    """Whether the table path runs compiled; ``compiled=True`` without numba is an error."""
    if compiled and not AVAILABLE:
        msg = (
            "compiled=True asks for the compiled melting kernel, but numba cannot be imported "
            "here; install numba (a lidmelt dependency) or pass compiled=False (numpy path)."
        )
        raise ModelError(msg)
    return AVAILABLE if compiled is None else bool(compiled)


def _flat_cells(cells: Cells, shape) -> Cells:
    """``cells`` as 1-D C-contiguous arrays of the cells of ``shape`` (one water content or
    one water load a float; upwelling broadcast where it is an array)."""
    w = cells.water_wt_pct
    if np.ndim(w):
        w = np.ascontiguousarray(w).ravel()
        if w.size and w.min() == w.max():  # one water content (NaN never equals)
            w = float(w[0])
    up = cells.upwelling_mm_yr
    if up is not None and np.ndim(up):
        up = np.ascontiguousarray(np.broadcast_to(np.asarray(up, float), shape)).ravel()
    load = cells.water_load_km
    zw = float(np.ravel(load)[0]) if np.size(load) == 1 else load
    if np.ndim(zw):
        zw = np.ascontiguousarray(np.broadcast_to(np.asarray(zw, float), shape)).ravel()
    amb, ex = (None if a is None else np.ascontiguousarray(a, float).ravel()
               for a in (cells.ambient_lid_depth_km, cells.excess_k))  # fmt: skip
    return Cells(
        np.ascontiguousarray(cells.potential_temperature_c).ravel(),
        np.ascontiguousarray(cells.lid_depth_km).ravel(), w, up, zw, amb, ex,
    )  # fmt: skip


def compiled_cells(table, cells: Cells, call: KernelCall, *, numpy_path, out=None):
    """The compiled kernel on cells of one shape (Tp and lid broadcast arrays); the cells it
    leaves by ``numpy_path``; or None where it cannot serve them.

    ``numpy_path(cells)`` returns the outputs of 1-D :class:`Cells` by name; ``out`` is
    :func:`evaluate_compiled`'s. Returns (outputs and ``"flag"`` by name, in the cells' shape;
    :class:`~lidmelt.physics._kernel_records.KernelTimings`).
    """
    shape = np.shape(cells.potential_temperature_c)
    flat = _flat_cells(cells, shape)
    res = evaluate_compiled(table, flat, call, out=out)
    if res is None:
        return None
    out, flag, slow = res
    out["flag"] = flag
    n_slow = int(np.count_nonzero(slow))
    start = time.perf_counter()
    if n_slow:
        for name, arr in numpy_path(flat.select(slow)).items():
            out[name][slow] = arr
    n = flat.potential_temperature_c.size
    timings = KernelTimings(n, n_slow, time.perf_counter() - start)
    return {name: arr.reshape(shape) for name, arr in out.items()}, timings
