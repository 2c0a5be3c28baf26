"""The history's geometry per step, compiled: the mantle's grids sampled at the cells' positions
then, and the plumes' profiles around their track points, one loop over the cells each.

Both loops compute what :mod:`lidmelt.motion._history` describes, cell by cell, without the
temporary arrays of the numpy forms (a rotated position, a longitude, a latitude, a row and a
column per cell and field; a cosine and a distance per cell and plume), and skip the cells
without seafloor then. On the demo's 100-step history (``benchmarks/bench_tracks.py``, one
worker) they take 0.9-1.0 s against 1.2-1.3 s for the numpy forms and 2.2-2.5 s for the
kernel: the arc cosines, exponentials and arc tangents per cell, not the temporaries, are most
of the cost.

- :func:`sample_rotated`: a cell's position then is the rotation matrix times its unit vector
  today; its longitude and latitude (latitude from z alone, as the history's notes say), the
  grid's fractional row and column from its affine transform, and the bilinear value with the
  edge values beyond the grid: the rule of :func:`scipy.ndimage.map_coordinates` with
  ``order=1, mode="nearest"`` (the two neighbours ``floor(c)`` and ``floor(c) + 1`` along each
  axis, indices clamped to the grid, so a NaN neighbour of weight 0 still gives NaN, as there),
  rounded to the grid's float32. Cells outside the field's cap get its baseline.
- :func:`add_plumes`: per cell and plume, the great-circle distance R arccos(cos) between the
  cell and the plume's track point, and the plume's profile
  (:func:`lidmelt.grids._anomaly.plume_profile`: gaussian A exp(-(d/r)^2) up to its reach,
  cosine A cos^2(pi d / 2r) for d < r, top-hat A for d <= r) added to the anomaly and, with its
  peak upwelling, to the upwelling, plume after plume in their order.

Without numba both run as plain Python (slow, but the same numbers).
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from lidmelt.physics._jitcache import compiled_function

#: The plume shapes (:class:`lidmelt.grids._anomaly.Plume`) as the compiled loop's codes.
SHAPE_CODES = {"gaussian": 0, "cosine": 1, "top-hat": 2}


def _wrap(lon, centre):
    """``lon`` within 180 degrees of ``centre``, as :meth:`lidmelt.grids._grid.Grid.wrap_x`."""
    return centre + np.mod(lon - centre + 180.0, 360.0) - 180.0


def _bilinear(values, row, col):
    """``map_coordinates(values, [[row], [col]], order=1, mode="nearest")`` in double."""
    ny, nx = values.shape
    r0, c0 = math.floor(row), math.floor(col)
    wr, wc = row - r0, col - c0
    ra, rb = min(max(r0, 0), ny - 1), min(max(r0 + 1, 0), ny - 1)
    ca, cb = min(max(c0, 0), nx - 1), min(max(c0 + 1, 0), nx - 1)
    top = (1.0 - wc) * values[ra, ca] + wc * values[ra, cb]
    bottom = (1.0 - wc) * values[rb, ca] + wc * values[rb, cb]
    return (1.0 - wr) * top + wr * bottom


class SampledField(NamedTuple):
    """A geographic grid as :func:`sample_rotated` reads it (numba takes it as a named tuple).

    ``values`` (float32, rows by columns) and its affine ``transform`` (a, c, e, f: x scale,
    x origin, y scale, y origin, degrees), ``centre`` its longitude centre for wrapping;
    ``seen`` (3) and ``cap_cos``: the field's cap seen on today's plate (a cell whose
    ``xyz @ seen`` is below ``cap_cos`` is outside it); ``baseline`` the value outside it.
    """

    values: np.ndarray
    transform: np.ndarray
    centre: float
    seen: np.ndarray
    cap_cos: float
    baseline: float


def sample_rotated(xyz, alive, matrix, field, out):
    """Fill ``out`` (n) with the grid of ``field`` (:class:`SampledField`) at the positions
    ``matrix`` (3, 3) gives the unit vectors ``xyz`` (n, 3) (module notes); a cell outside the
    field's cap, or not ``alive`` (n, bool: a cell whose seafloor did not exist then, which the
    kernel gives nothing), gets the field's baseline."""
    values, transform, centre, seen = field.values, field.transform, field.centre, field.seen
    cap_cos, baseline = field.cap_cos, field.baseline
    a, c, e, f = transform[0], transform[1], transform[2], transform[3]
    for i in range(xyz.shape[0]):
        px, py, pz = xyz[i, 0], xyz[i, 1], xyz[i, 2]
        if not alive[i] or px * seen[0] + py * seen[1] + pz * seen[2] < cap_cos:
            out[i] = baseline
            continue
        x = matrix[0, 0] * px + matrix[0, 1] * py + matrix[0, 2] * pz
        y = matrix[1, 0] * px + matrix[1, 1] * py + matrix[1, 2] * pz
        z = matrix[2, 0] * px + matrix[2, 1] * py + matrix[2, 2] * pz
        lon = math.degrees(math.atan2(y, x))
        lat = math.degrees(math.asin(min(max(z, -1.0), 1.0)))
        col = (_wrap(lon, centre) - c) / a - 0.5
        row = (lat - f) / e - 0.5
        out[i] = np.float32(_bilinear(values, row, col))


def _profile(d, shape, radius, reach):
    """The profile of a plume of peak 1 at distance ``d`` km (module notes)."""
    if shape == 0:
        return math.exp(-((d / radius) ** 2)) if d <= reach else 0.0
    if shape == 1:
        return math.cos(math.pi * d / (2.0 * radius)) ** 2 if d < radius else 0.0
    return 1.0 if d <= radius else 0.0


def add_plumes(xyz, alive, points, params, shapes, earth_radius, anomaly, up):
    """Add each plume's profile at the cells ``xyz`` (n, 3) that are ``alive`` (n, bool; the
    others are left as they are) to ``anomaly`` and ``up`` (n):
    ``points`` (P, 3) their track points now, ``params`` (P, 5) their cosine of the reach,
    radius (km), reach (km), peak excess (K) and peak upwelling (mm/yr; 0 for none),
    ``shapes`` (P) their :data:`SHAPE_CODES`; distances on a sphere of ``earth_radius`` km."""
    for i in range(xyz.shape[0]):
        if not alive[i]:
            continue
        px, py, pz = xyz[i, 0], xyz[i, 1], xyz[i, 2]
        for p in range(points.shape[0]):
            cosine = px * points[p, 0] + py * points[p, 1] + pz * points[p, 2]
            if cosine < params[p, 0]:
                continue
            d = earth_radius * math.acos(min(cosine, 1.0))
            unit = _profile(d, shapes[p], params[p, 1], params[p, 2])
            anomaly[i] += params[p, 3] * unit
            if params[p, 4] != 0.0:
                up[i] += params[p, 4] * unit


_wrap = compiled_function(_wrap, inline="always")
_bilinear = compiled_function(_bilinear, inline="always")
_profile = compiled_function(_profile, inline="always")
sample_rotated = compiled_function(sample_rotated)
add_plumes = compiled_function(add_plumes)
