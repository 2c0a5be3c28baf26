"""Known features (volcanoes, seamounts) as points in the cells of a grid.

A feature file is read by the one vector reader (:func:`lidmelt.grids._vector.read_features`):
a CSV with longitude/latitude columns (EPSG:4326 unless a CRS is given), or a GeoPackage,
GeoJSON or any vector file GDAL reads, in any CRS it declares. A feature is a point: a Point
geometry as it is, a Polygon or MultiPolygon by a point inside it (its centroid when that lies
inside, else shapely's point on the surface), so each feature counts once, in one cell. Other
geometries (lines, multipoints, empty ones) are refused with the rows that hold them.

:func:`nearest_cells` places points in the cells that contain them (the rule of every product:
a point within half a cell of the grid's outer cell centres is inside; on a global geographic
grid the longitude wraps); a point beyond the grid's edge is outside and never dropped: it is
counted and named by the caller.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyproj

from lidmelt._errors import InputError
from lidmelt.grids._grid import WGS84, Grid, lonlat_from
from lidmelt.grids._vector import describe_rows, label_column, read_features


@dataclass(frozen=True, eq=False)
class FeaturePoints:
    """Features as points: ``names`` (for a person: the file's name/id column, else ``row
    N``), ``x``/``y`` in ``crs``, ``lon``/``lat`` (WGS84 degrees), ``kind`` ("point" or
    "polygon"), the attribute ``table`` and ``source`` (the file as messages name it)."""

    names: np.ndarray
    x: np.ndarray
    y: np.ndarray
    lon: np.ndarray
    lat: np.ndarray
    kind: np.ndarray
    crs: pyproj.CRS
    table: pd.DataFrame
    source: str

    def __len__(self) -> int:
        return len(self.names)


def _points_of(geoms: np.ndarray, frame: pd.DataFrame, source: str) -> tuple[np.ndarray, ...]:
    """x, y and kind of each geometry: points as they are, polygons by an inner point."""
    import shapely

    types = shapely.get_type_id(geoms)
    point = types == shapely.GeometryType.POINT
    polygon = np.isin(types, [shapely.GeometryType.POLYGON, shapely.GeometryType.MULTIPOLYGON])
    bad = np.flatnonzero(~(point | polygon) | shapely.is_empty(geoms) | (types < 0))
    if bad.size:
        kinds = sorted({g.geom_type if g is not None else "missing" for g in geoms[bad]})
        msg = (
            f"{source} has {bad.size} feature(s) that are neither points nor polygons "
            f"({', '.join(kinds)}; {describe_rows(frame, bad)}); expected one Point (or one "
            "Polygon outline) per known feature. Remove them, or split them into points."
        )
        raise InputError(msg)
    at = geoms.copy()
    centroids = shapely.centroid(geoms[polygon])
    inside = shapely.contains(geoms[polygon], centroids)
    at[polygon] = np.where(inside, centroids, shapely.point_on_surface(geoms[polygon]))
    kind = np.where(polygon, "polygon", "point").astype(object)
    return shapely.get_x(at).astype(float), shapely.get_y(at).astype(float), kind


#: GeoJSON files up to this size are checked for a legacy ``crs`` member that GDAL ignores.
_GEOJSON_CHECKED_BYTES = 100_000_000


def _check_geojson_crs(path: Path, source: str) -> None:
    """Refuse a GeoJSON whose legacy ``crs`` member names a CRS pyproj does not know (GDAL
    reads such a file as longitude/latitude without a word)."""
    if path.suffix.lower() not in (".geojson", ".json") or not path.is_file():
        return
    if path.stat().st_size > _GEOJSON_CHECKED_BYTES:
        return
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError):
        return  # the reader names what is wrong with the file
    crs = doc.get("crs") if isinstance(doc, dict) else None
    name = crs.get("properties", {}).get("name") if isinstance(crs, dict) else None
    if name is None:
        return
    try:
        pyproj.CRS.from_user_input(name)
    except pyproj.exceptions.CRSError as exc:
        msg = (
            f"{source} declares the coordinate reference system {str(name)[:80]!r}, which is "
            f"not one pyproj knows ({exc}); expected a known CRS such as EPSG:4326. Write the "
            "file in longitude/latitude (RFC 7946 GeoJSON) or as a GeoPackage with its CRS."
        )
        raise InputError(msg) from exc


def _check_transformable(crs: pyproj.CRS, source: str) -> None:
    """Refuse a CRS that cannot be placed on the Earth (an engineering or local CRS)."""
    try:
        pyproj.Transformer.from_crs(crs, WGS84, always_xy=True)
    except pyproj.exceptions.ProjError as exc:
        msg = (
            f"{source} is in the coordinate reference system {crs.name!r} ({crs.type_name}), "
            f"which cannot be transformed to longitude/latitude ({exc}): its coordinates "
            "cannot be placed on the grid. Reproject the file to a geographic or projected "
            "CRS (e.g. EPSG:4326)."
        )
        raise InputError(msg) from exc


def feature_points(gdf: Any, source: str) -> FeaturePoints:
    """A GeoDataFrame with a CRS as :class:`FeaturePoints` (geometries checked, module notes)."""
    frame = pd.DataFrame(gdf.drop(columns=gdf.geometry.name))
    crs = pyproj.CRS.from_user_input(gdf.crs)
    _check_transformable(crs, source)
    x, y, kind = _points_of(gdf.geometry.to_numpy(), frame, source)
    lon, lat = lonlat_from(crs, x, y)
    name = label_column(frame)
    if name is not None:
        names = np.array([str(v) for v in frame[name]], dtype=object)
    else:
        names = np.array([f"row {k + 1}" for k in range(len(frame))], dtype=object)
    return FeaturePoints(names, x, y, np.asarray(lon, float), np.asarray(lat, float), kind,
                         crs, frame.reset_index(drop=True), source)  # fmt: skip


def read_feature_points(
    path: str | os.PathLike[str],
    *,
    crs: Any = None,
    lon_column: str | None = None,
    lat_column: str | None = None,
    what: str = "feature",
) -> FeaturePoints:
    """Read a feature file (module notes) as points.

    Raises
    ------
    InputError
        Naming the file: missing, empty, unreadable, without coordinate columns or CRS, or with
        geometries that are neither points nor polygons.
    """
    _check_geojson_crs(Path(path), f"{what} file {str(path)!r}")
    gdf, source = read_features(
        path, what=what, expected="one point per feature", crs=crs,
        lon_column=lon_column, lat_column=lat_column, points=True,
    )  # fmt: skip
    return feature_points(gdf, source)


def nearest_cells(grid: Grid, gx: Any, gy: Any) -> tuple[np.ndarray, np.ndarray]:
    """``(inside, flat)``: whether each grid-CRS point lies within the grid (up to half a cell
    beyond the outer cell centres; any longitude on a global geographic grid) and the flat
    index (row x width + column) of the cell that contains it (clipped to the grid outside)."""
    h, w = grid.height, grid.width
    row, col = grid.fractional_index(gx, gy)
    finite = np.isfinite(row) & np.isfinite(col)
    row = np.where(finite, row, 0.0)
    col = np.where(finite, col, 0.0)
    inside = finite & (row >= -0.5) & (row <= h - 0.5)
    if grid.is_periodic:
        col = np.mod(col + 0.5, w) - 0.5
        cn = np.mod(np.floor(col + 0.5), w).astype(np.intp)
    else:
        inside &= (col >= -0.5) & (col <= w - 0.5)
        cn = np.clip(np.floor(col + 0.5), 0, w - 1).astype(np.intp)
    rn = np.clip(np.floor(row + 0.5), 0, h - 1).astype(np.intp)
    return inside, rn * w + cn
