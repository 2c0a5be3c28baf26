"""The files of candidate regions: a GeoPackage in the grid's CRS and a GeoJSON beside it.

The GeoJSON follows RFC 7946 (Butler et al. 2016, section 3.1.9): WGS 84 longitude and latitude,
geometries that cross the antimeridian split into parts within -180..180.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import TYPE_CHECKING

import pyproj

from lidmelt._files import atomic_paths
from lidmelt.grids._grid import WGS84
from lidmelt.products import _sampling as smp
from lidmelt.products._regions import transform_geometries

if TYPE_CHECKING:
    import geopandas as gpd


def _rfc7946(gdf: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """Polygons in WGS84 longitude/latitude, split at the antimeridian into -180..180."""
    import shapely
    from shapely import affinity

    src = pyproj.CRS.from_user_input(gdf.crs)
    geoms = transform_geometries(gdf.geometry.to_numpy(), src, WGS84)
    out = []
    for g in geoms:
        parts = []
        for k in (-1, 0, 1):
            box = shapely.box(-180.0 + 360.0 * k, -90.0, 180.0 + 360.0 * k, 90.0)
            if g.intersects(box):
                piece = g.intersection(box)
                piece = affinity.translate(piece, xoff=-360.0 * k)
                parts += [p for p in shapely.get_parts(piece) if p.geom_type == "Polygon"]
        out.append(shapely.MultiPolygon(parts) if len(parts) != 1 else parts[0])
    return gdf.set_geometry(out, crs=WGS84) if len(gdf) else gdf.to_crs(WGS84)


def write_candidates(gdf: gpd.GeoDataFrame, path: str | os.PathLike[str]) -> tuple[Path, Path]:
    """Write screening candidates as GeoPackage (grid CRS) and GeoJSON (RFC 7946, lon/lat)
    beside it with the same stem; both atomically.

    Parameters
    ----------
    gdf : geopandas.GeoDataFrame
        The candidates :func:`screen` returned.
    path : str or os.PathLike
        The ``.gpkg`` file; the GeoJSON gets the same stem.

    Returns
    -------
    tuple of pathlib.Path
        The GeoPackage and the GeoJSON.
    """
    path = smp.check_output_path(path, (".gpkg",), what="candidate regions")
    geojson = path.with_suffix(".geojson")
    lonlat = _rfc7946(gdf)
    with atomic_paths(path, geojson) as (gpkg_tmp, json_tmp):
        gdf.to_file(gpkg_tmp, driver="GPKG", layer="candidates", promote_to_multi=True)
        lonlat.to_file(
            json_tmp, driver="GeoJSON", layer="candidates", RFC7946="YES", promote_to_multi=True
        )
    return path, geojson
