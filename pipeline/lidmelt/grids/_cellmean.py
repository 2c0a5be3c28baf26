"""Coarsening by cell means: each target cell is the mean of the input cells inside it.

Used by :func:`lidmelt.grids._align.align` in place of bilinear interpolation when the target
cells are larger than the input cells. Each input cell centre is transformed exactly (pyproj)
into the target CRS and assigned to the target cell that contains it; the target value is the
area-weighted mean of the valid input values assigned to it. Nothing outside the target cell
enters, so every value lies within the range of the input over that cell, whatever the
projection (GDAL's warper picks one kernel size per processing chunk, which around a pole can
reach hundreds of kilometres beyond the cell).

Weights: every input cell counts by its area in the input's own coordinates, which is the same
for all cells of a regular grid, so the mean is the plain mean of the input cells inside the
target cell (as GDAL's "average" weights source pixels; the change of the true cell area across
one target cell, cos(latitude) on a geographic input or the scale factor of a projection, is
neglected; common practice). The result is a convex combination of the input values inside the
cell.
"""

from __future__ import annotations

import numpy as np
from affine import Affine
from pyproj import CRS, Transformer

from lidmelt.grids._grid import Grid

_BLOCK = 1 << 20  # input cells transformed at a time (memory bound; common practice)


def cell_means(
    pieces: list[tuple[np.ndarray, Affine, tuple[float, float] | None]],
    target: Grid,
    src_crs: CRS,
) -> tuple[np.ndarray, np.ndarray]:
    """Means of the input cells whose centres fall in each target cell.

    Parameters
    ----------
    pieces : list of (values, transform, longitude range)
        Loaded windows of the input (as built by :func:`lidmelt.grids._align.align`); a window
        repeated by periodic indexing may count an input cell twice, which changes its weight
        but keeps the mean within the range of the values in the cell.
    target : Grid
        The target grid.
    src_crs : pyproj.CRS
        The input's CRS.

    Returns
    -------
    means : numpy.ndarray
        ``target.shape`` float64, NaN where no valid input cell centre falls in the cell.
    counts : numpy.ndarray
        ``target.shape`` int64: the number of valid input cells that entered each mean.
    """
    size = target.width * target.height
    sums = np.zeros(size)
    counts = np.zeros(size, dtype=np.int64)
    same = src_crs.equals(target.pyproj_crs, ignore_axis_order=True)
    to_target = None if same else Transformer.from_crs(src_crs, target.pyproj_crs, always_xy=True)
    a, _, c, _, e, f = target.transform
    for values, tr, _lon_range in pieces:
        ny, nx = values.shape
        rows_per_block = max(1, _BLOCK // max(nx, 1))
        xs = tr.c + tr.a * (np.arange(nx) + 0.5)
        for r0 in range(0, ny, rows_per_block):
            block = values[r0 : r0 + rows_per_block].astype(np.float64)
            ys = tr.f + tr.e * (np.arange(r0, r0 + block.shape[0]) + 0.5)
            xx, yy = np.meshgrid(xs, ys)
            if to_target is not None:
                xx, yy = (np.asarray(v) for v in to_target.transform(xx, yy))
            if target.is_geographic:
                xx = target.wrap_x(xx)
            col = np.floor((xx - c) / a)
            row = np.floor((yy - f) / e)
            ok = (
                np.isfinite(block)
                & np.isfinite(col)
                & np.isfinite(row)
                & (col >= 0)
                & (col < target.width)
                & (row >= 0)
                & (row < target.height)
            )
            flat = (row[ok] * target.width + col[ok]).astype(np.int64)
            sums += np.bincount(flat, weights=block[ok], minlength=size)
            counts += np.bincount(flat, minlength=size)
    with np.errstate(invalid="ignore", divide="ignore"):
        means = np.where(counts > 0, sums / np.maximum(counts, 1), np.nan)
    return means.reshape(target.shape), counts.reshape(target.shape)
