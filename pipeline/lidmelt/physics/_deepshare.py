"""How much of a column's melt is made beyond the model's calibrated pressure P_c.

``deep_melt_share`` = H_deep / H, where H_deep is the part of H = integral of F dz made at
P > P_c: every parcel above the depth z_c of P_c carries the melt fraction F(P_c) it made deeper,
so for a top of melting shallower than P_c, H_deep = H(top at P_c) + F(P_c) (z_c - z_top); for a
top at or below P_c, H_deep = H [derived from the definition of H; docs/physics.md, section
"How much is extrapolation"]. NaN where H = 0 (or NaN); 0 where the onset is not deeper than P_c.
"""

from __future__ import annotations

import numpy as np

from lidmelt.physics._column import integrate_columns


def deep_melt_share(model, melt_thickness_km, onset_gpa, top_gpa, h_c, f_c):
    """H_deep / H from H and F at the top P_c (``h_c``, ``f_c``; read only where needed)."""
    pc = model.calibrated_max_pressure_gpa
    h = np.asarray(melt_thickness_km, float)
    with np.errstate(invalid="ignore", divide="ignore"):
        dz = model.depth_km(pc) - model.depth_km(top_gpa)  # the load cancels
        part = np.where(top_gpa >= pc, 1.0, (h_c + f_c * dz) / h)
        share = np.where(onset_gpa > pc, np.clip(part, 0.0, 1.0), 0.0)
        return np.where(h > 0.0, share, np.nan)


def needs_calibration_column(model, onset_gpa, top_gpa):
    """Cells whose H_deep needs the column at P_c: onset deeper than P_c, top shallower."""
    pc = model.calibrated_max_pressure_gpa
    with np.errstate(invalid="ignore"):
        return np.isfinite(onset_gpa) & (onset_gpa > pc) & (top_gpa < pc)


def direct_at_calibration(model, tp, water, onset_gpa, top_gpa, step_gpa):
    """(H, F) of each column with its top at P_c, by direct integration (NaN where not needed)."""
    need = needs_calibration_column(model, onset_gpa, top_gpa)
    h_c, f_c = np.full(np.shape(tp), np.nan), np.full(np.shape(tp), np.nan)
    if need.any():
        res = integrate_columns(
            model, tp[need], np.broadcast_to(water, np.shape(tp))[need], onset_gpa[need],
            model.calibrated_max_pressure_gpa, step_gpa=step_gpa,
        )  # fmt: skip
        h_c[need], f_c[need] = res["melt_thickness_km"], res["max_melt_fraction"]
    return h_c, f_c


def table_at_calibration(table, tp, water, onset_gpa, top_gpa):
    """(H, F) of each column with its top at P_c from the table: bilinear in Tp and pressure,
    linear in the water coordinate, as the table's other values (NaN where not needed)."""
    model, lay = table.model, table.layout
    need = needs_calibration_column(model, onset_gpa, top_gpa)
    need &= table.in_range(tp, water)
    h_c, f_c = np.full(np.shape(tp), np.nan), np.full(np.shape(tp), np.nan)
    if not need.any():
        return h_c, f_c
    t = np.asarray(tp, float)[need]
    w = np.broadcast_to(np.asarray(water, float), np.shape(tp))[need]
    n_tp, n_p = table.tp_c.size, table.pressure_gpa.size
    x = (t - lay.tp_min_c) / lay.tp_step_k
    i = np.clip(x.astype(np.intp), 0, n_tp - 2)
    a = (x - i)[:, None]
    y = model.calibrated_max_pressure_gpa / lay.pressure_step_gpa
    k = min(int(y), n_p - 2)
    b = y - k
    j, c = table.water_index(w)
    j1 = np.minimum(j + 1, table.water_u.size - 1)
    vals = 0.0
    for jj, wgt in ((j, 1 - c[:, None]), (j1, c[:, None])):
        v = table.values
        v0 = v[i, jj, k] + b * (v[i, jj, k + 1] - v[i, jj, k])
        v1 = v[i + 1, jj, k] + b * (v[i + 1, jj, k + 1] - v[i + 1, jj, k])
        vals = vals + wgt * (v0 + a * (v1 - v0))
    if np.ndim(water) == 0:  # one water content: the columns integrated at exactly it
        i0, exact = table.deep_columns(float(water))
        sel = i >= i0
        if sel.any():
            ii, aa = i[sel] - i0, a[sel]
            v0 = exact[ii, k] + b * (exact[ii, k + 1] - exact[ii, k])
            v1 = exact[ii + 1, k] + b * (exact[ii + 1, k + 1] - exact[ii + 1, k])
            vals[sel] = v0 + aa * (v1 - v0)
    h_c[need], f_c[need] = vals[:, 0], vals[:, 1]
    return h_c, f_c


# the depth-pressure relation as the table paths use it (the same arithmetic as the kernel)
def top_pressure(model, top_km, load_km, gpa_per_km):
    """P at ``top_km`` below a seafloor loaded by ``load_km``: ``z * gpa_per_km`` above the
    join of the depth-pressure relation (as the compiled kernel), the relation below it."""
    z = top_km + load_km
    lin = z * gpa_per_km
    with np.errstate(invalid="ignore"):
        deep = (z > model.depth_pressure.join_km) & (z < np.inf)
    return np.where(deep, model.depth_pressure.pressure_gpa(z), lin) if deep.any() else lin


def onset_depth(model, p_on, load_km, km_per_gpa):
    """Depth below the seafloor [km] of ``p_on`` (the inverse of :func:`top_pressure`)."""
    lin = p_on * km_per_gpa
    with np.errstate(invalid="ignore"):
        deep = (p_on > model.depth_pressure.join_gpa) & (p_on < np.inf)
    z = np.where(deep, model.depth_pressure.depth_km(p_on), lin) if deep.any() else lin
    return z - load_km
