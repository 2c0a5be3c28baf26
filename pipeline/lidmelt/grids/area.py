"""Cell areas on the ellipsoid, for area and volume statistics.

Geographic grids use the closed-form area of a latitude-longitude quadrangle on the ellipsoid
(through the authalic latitude); projected grids use the geodesic polygon of each cell's four
corners from :meth:`pyproj.Geod.polygon_area_perimeter`.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import xarray as xr
from pyproj import CRS, Geod, Transformer

from lidmelt.errors import GridError
from lidmelt.grids.align import TargetGrid

__all__ = ["authalic_q", "cell_area_km2"]


def authalic_q(lat_deg: Any, eccentricity: float) -> np.ndarray:
    """The function q of the authalic latitude (dimensionless).

    ``q(phi) = (1 - e^2) [ sin(phi) / (1 - e^2 sin^2(phi))
    - 1/(2e) ln((1 - e sin(phi)) / (1 + e sin(phi))) ]``

    (Snyder 1987, Map Projections: A Working Manual, USGS Professional Paper 1395, eq. 3-12
    [from memory]). The area of the ellipsoid between the equator and latitude phi per radian
    of longitude is ``a^2 q(phi) / 2``; ``q(90 deg) = q_p`` gives the authalic radius
    ``R_q = a sqrt(q_p / 2)`` (eq. 3-13 [from memory]). For e = 0 (a sphere) q = 2 sin(phi).

    Parameters
    ----------
    lat_deg : array_like
        Geodetic latitude, degrees.
    eccentricity : float
        First eccentricity e of the ellipsoid (0 <= e < 1).

    Returns
    -------
    numpy.ndarray
        q(phi), same shape as ``lat_deg``.
    """
    s = np.sin(np.radians(np.asarray(lat_deg, dtype=np.float64)))
    e = float(eccentricity)
    if e == 0.0:
        return 2.0 * s
    e2 = e * e
    return (1.0 - e2) * (s / (1.0 - e2 * s * s) - np.log((1.0 - e * s) / (1.0 + e * s)) / (2 * e))


def cell_area_km2(
    target: TargetGrid, *, chunks: int | tuple[int, int] | None = None
) -> xr.DataArray:
    """Area of every cell of a grid on its CRS's ellipsoid (WGS 84 for EPSG:4326/3857), km².

    Parameters
    ----------
    target : TargetGrid
        The grid.
    chunks : int or (int, int), optional
        If given, the result is a lazy dask array with these chunks.

    Returns
    -------
    xarray.DataArray
        ``cell_area_km2``, float64 ``(y, x)`` with the coordinates of ``target.template()``,
        attrs ``units = "km2"``, ``long_name`` and ``method``.

    Raises
    ------
    GridError
        If ``target`` is not a TargetGrid, or its CRS has no ellipsoid.

    Notes
    -----
    Geographic grids: a cell between latitudes phi1 < phi2 and ``dlon`` radians wide has area
    ``a^2 / 2 * dlon * (q(phi2) - q(phi1))`` with q from :func:`authalic_q`; this is exact for
    a cell bounded by meridians and parallels (equivalently ``R_q^2 dlon (q2 - q1) / q_p``).
    Rows are clamped at the poles.

    Projected grids: the four cell corners are transformed to longitude/latitude on the CRS's
    geodetic datum (one vectorised pyproj call per block) and the area of the geodesic
    quadrilateral through them is taken (one ``polygon_area_perimeter`` call per cell, about
    4 microseconds each). Neighbouring cells share their geodesic edges, so the cells tile the
    region without gaps or overlaps; each cell differs from the area inside its straight
    projected edges by a relative amount of order (cell size / Earth radius)^2.
    Corners outside the projection's domain give NaN.
    """
    if not isinstance(target, TargetGrid):
        msg = f"target={target!r} must be a TargetGrid (see TargetGrid.from_extent)."
        raise GridError(msg)
    crs = target.pyproj_crs
    if crs.ellipsoid is None:
        msg = (
            f"the CRS of the grid ({crs.name!r}) has no ellipsoid, so cell areas cannot be "
            "computed. Use a geographic or projected CRS on an Earth ellipsoid, e.g. "
            "EPSG:4326."
        )
        raise GridError(msg)
    template = target.template(chunks=chunks)
    if target.is_geographic:
        rows = _geographic_row_areas_km2(target, crs)
        method = "exact ellipsoidal quadrangle area via the authalic latitude (Snyder 1987)"
        if chunks is None:
            data: Any = np.repeat(rows[:, None], target.width, axis=1)
        else:
            import dask.array as dsa

            # broadcast lazily: a dask array made from a broadcast numpy view would be hashed
            # and copied whole (466 MB for a global 2-arc-minute grid)
            column = dsa.from_array(rows[:, None], chunks=(template.data.chunks[0], 1))
            data = dsa.broadcast_to(column, target.shape, chunks=template.data.chunks)
    else:
        method = "geodesic quadrilateral through the cell corners (pyproj.Geod)"
        if chunks is None:
            data = _projected_block(target, slice(0, target.height), slice(0, target.width))
        else:
            data = template.data.map_blocks(
                _projected_dask_block,
                target,
                dtype=np.float64,
                meta=np.empty((0, 0), dtype=np.float64),
            )
    return xr.DataArray(
        data,
        dims=("y", "x"),
        coords=template.coords,
        name="cell_area_km2",
        attrs={"units": "km2", "long_name": "cell area", "method": method},
    )


def _geographic_row_areas_km2(target: TargetGrid, crs: CRS) -> np.ndarray:
    ellipsoid = crs.ellipsoid
    a = ellipsoid.semi_major_metre
    inv_f = ellipsoid.inverse_flattening
    f = 0.0 if not inv_f else 1.0 / inv_f
    e = np.sqrt(f * (2.0 - f))
    _, _, _, _, dy, north = target.transform
    edges = np.clip(north + dy * np.arange(target.height + 1), -90.0, 90.0)
    q = authalic_q(edges, e)
    dlon = np.radians(target.transform[0])
    return 0.5 * a * a * dlon * np.abs(q[:-1] - q[1:]) / 1e6


def _projected_dask_block(
    block: np.ndarray, target: TargetGrid, block_info: dict | None = None
) -> np.ndarray:
    (r0, r1), (c0, c1) = block_info[0]["array-location"]
    return _projected_block(target, slice(r0, r1), slice(c0, c1))


def _projected_block(target: TargetGrid, rows: slice, cols: slice) -> np.ndarray:
    crs = target.pyproj_crs
    a, _, c, _, e, f = target.transform
    xs = c + a * np.arange(cols.start, cols.stop + 1)
    ys = f + e * np.arange(rows.start, rows.stop + 1)
    xx, yy = np.meshgrid(xs, ys)
    geodetic = crs.geodetic_crs
    lon, lat = Transformer.from_crs(crs, geodetic, always_xy=True).transform(xx, yy)
    lon, lat = np.asarray(lon), np.asarray(lat)
    geod: Geod = geodetic.get_geod()
    nrows, ncols = rows.stop - rows.start, cols.stop - cols.start
    out = np.full((nrows, ncols), np.nan, dtype=np.float64)
    # corners counter-clockwise in projected space: SW, SE, NE, NW
    quad_lon = np.stack([lon[1:, :-1], lon[1:, 1:], lon[:-1, 1:], lon[:-1, :-1]], axis=-1)
    quad_lat = np.stack([lat[1:, :-1], lat[1:, 1:], lat[:-1, 1:], lat[:-1, :-1]], axis=-1)
    finite = np.isfinite(quad_lon).all(axis=-1) & np.isfinite(quad_lat).all(axis=-1)
    area = geod.polygon_area_perimeter
    for j in range(nrows):
        qlon, qlat, ok = quad_lon[j].tolist(), quad_lat[j].tolist(), finite[j]
        row = out[j]
        for i in range(ncols):
            if ok[i]:
                row[i] = abs(area(qlon[i], qlat[i])[0])
    return out / 1e6
