"""Screening a finished run for candidate volcanic regions.

:func:`screen` finds the connected groups of cells whose melt thickness reaches a threshold and
turns them into ranked candidate polygons; :func:`write_candidates` writes them as a GeoPackage
and a GeoJSON twin. ``lidmelt screen`` is the command-line form.

Screening
---------
Candidate regions are groups of cells with ``melt_thickness_km`` >= the threshold that touch
along an edge or at a corner (8-connectivity; on a global geographic grid also across the
antimeridian seam), whose area is at least ``min_area_km2``. Each becomes a (Multi)Polygon along
its cells' edges, with the statistics columns of :mod:`lidmelt.products.regions` (``area_km2``
is the area of the region's cells, equal to that of its polygon, which follows the cell edges)
plus ``rank`` (1 = largest melt volume) and ``centroid_lon``/``centroid_lat`` (WGS84 degrees:
the area-weighted mean position of its cells on the sphere).
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
import pyproj

from lidmelt.errors import InputError
from lidmelt.files import atomic_paths
from lidmelt.grids.grid import WGS84
from lidmelt.grids.rundir import RunDir
from lidmelt.products import sampling as smp
from lidmelt.products.regions import Zones, transform_geometries

if TYPE_CHECKING:
    import geopandas as gpd
    import shapely

__all__ = ["CANDIDATE_COLUMNS", "screen", "write_candidates"]

#: Extra columns of a screening result.
CANDIDATE_COLUMNS = ("rank", "centroid_lon", "centroid_lat")


def _label(mask: np.ndarray, *, periodic: bool) -> tuple[np.ndarray, int]:
    """Label 8-connected groups of True cells (joined across the seam when ``periodic``)."""
    from scipy import ndimage

    labels, n = ndimage.label(mask, structure=np.ones((3, 3), dtype=bool))
    if not periodic or n == 0 or mask.shape[1] < 2:
        return labels, n
    parent = np.arange(n + 1)

    def find(a: int) -> int:
        while parent[a] != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a

    left, right = labels[:, 0], labels[:, -1]
    height = mask.shape[0]
    for i in np.flatnonzero(left):
        for j in (i - 1, i, i + 1):
            if 0 <= j < height and right[j]:
                a, b = find(int(left[i])), find(int(right[j]))
                if a != b:
                    parent[max(a, b)] = min(a, b)
    roots = np.array([find(k) for k in range(n + 1)])
    _, relabel = np.unique(roots, return_inverse=True)
    return relabel[labels].astype(labels.dtype), int(relabel.max())


def _component_polygons(
    labels: np.ndarray, keep: np.ndarray, transform: Any
) -> dict[int, shapely.Geometry]:
    """Polygons (along cell edges, grid CRS) of the kept labels."""
    import shapely
    from rasterio.features import shapes

    kept = np.where(np.isin(labels, keep), labels, 0).astype(np.int32)
    pieces: dict[int, list[shapely.Geometry]] = {}
    for geom, value in shapes(kept, mask=kept > 0, transform=transform, connectivity=4):
        pieces.setdefault(int(value), []).append(shapely.geometry.shape(geom))
    out = {}
    for label, parts in pieces.items():
        g = parts[0] if len(parts) == 1 else shapely.union_all(parts)
        if not g.is_valid:
            g = shapely.make_valid(g)
        out[label] = g
    return out


def _as_float(value: Any) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def screen(
    run: RunDir | str | os.PathLike[str],
    *,
    min_melt_thickness_km: float,
    min_area_km2: float = 0.0,
) -> gpd.GeoDataFrame:
    """Find candidate regions: connected groups of cells that melt at least a threshold.

    Parameters
    ----------
    run : RunDir or path
        A run directory written by ``lidmelt run``.
    min_melt_thickness_km : float
        A cell is a candidate cell when ``melt_thickness_km`` >= this. Units: km; > 0.
    min_area_km2 : float
        Smallest area of a candidate region. Units: km^2; >= 0.

    Returns
    -------
    geopandas.GeoDataFrame
        One row per candidate in the grid's CRS, ordered by melt volume (``rank`` 1 = largest):
        ``rank``, the statistics columns of the module notes, ``centroid_lon``,
        ``centroid_lat`` (WGS84 degrees), and (Multi)Polygon geometries along the cells' edges.
        Empty (with these columns) when no region qualifies.

    Raises
    ------
    lidmelt.errors.InputError
        If a threshold is not a positive number (or the area negative).
    lidmelt.errors.RunDirError
        If ``run`` is not a run directory or has no melt_thickness_km.
    """
    import geopandas as gpd

    thr, min_area = _check_thresholds(min_melt_thickness_km, min_area_km2)
    run = smp.as_run(run)
    zones = Zones.load(run)
    grid = zones.grid
    mask = np.isfinite(zones.melt) & (zones.melt >= thr)
    labels, n = _label(mask, periodic=grid.is_periodic)
    records = _candidate_records(zones, labels, n, min_area)
    polygons = _component_polygons(labels, np.array([r["label"] for r in records]), grid.affine)
    columns = ["rank", *zones.columns, "centroid_lon", "centroid_lat"]
    frame = pd.DataFrame(records, columns=["label", *columns[1:]])
    frame.insert(0, "rank", np.arange(1, len(frame) + 1, dtype="int64"))
    frame["n_cells"] = frame["n_cells"].astype("int64")
    geoms = [polygons[label] for label in frame["label"]]
    frame = frame.drop(columns="label")
    crs = grid.pyproj_crs
    return gpd.GeoDataFrame(frame, geometry=gpd.GeoSeries(geoms, crs=crs), crs=crs)


def _check_thresholds(min_melt_thickness_km: Any, min_area_km2: Any) -> tuple[float, float]:
    """The screening thresholds as floats, or InputError."""
    thr = _as_float(min_melt_thickness_km)
    if not (np.isfinite(thr) and thr > 0):
        msg = (
            f"--min-melt-thickness {min_melt_thickness_km!r} km is not a positive thickness; "
            "expected the least melt thickness of a candidate cell in km, e.g. 1.0 (use a "
            "small value such as 0.01 to take every melting cell)."
        )
        raise InputError(msg)
    min_area = _as_float(min_area_km2)
    if not (np.isfinite(min_area) and min_area >= 0):
        msg = (
            f"--min-area {min_area_km2!r} km^2 is not a non-negative area; expected the "
            "smallest candidate area in km^2, e.g. 5000 (0 keeps every region)."
        )
        raise InputError(msg)
    return thr, min_area


def _candidate_records(
    zones: Zones, labels: np.ndarray, n: int, min_area: float
) -> list[dict[str, Any]]:
    """Statistics and centroid of each labelled region of at least ``min_area`` km^2, ordered
    by melt volume (then area, then label)."""
    flat_labels = labels.ravel()
    cells = np.flatnonzero(flat_labels)
    order = np.argsort(flat_labels[cells], kind="stable")
    cells = cells[order]
    bounds = np.searchsorted(flat_labels[cells], np.arange(1, n + 2))
    records: list[dict[str, Any]] = []
    for label in range(1, n + 1):
        flat = cells[bounds[label - 1] : bounds[label]]
        stats = zones.stats(flat)
        if stats["data_area_km2"] < min_area:
            continue
        lon, lat = zones.centroid_lonlat(flat)
        records.append(
            {
                "label": label,
                "area_km2": stats["data_area_km2"],
                **stats,
                "centroid_lon": lon,
                "centroid_lat": lat,
            }
        )
    records.sort(key=lambda r: (-r["melt_volume_km3"], -r["area_km2"], r["label"]))
    return records


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
    beside it with the same stem; both atomically. Return the two paths."""
    path = smp.check_output_path(path, (".gpkg",), what="candidate regions")
    geojson = path.with_suffix(".geojson")
    lonlat = _rfc7946(gdf)
    with atomic_paths(path, geojson) as (gpkg_tmp, json_tmp):
        gdf.to_file(gpkg_tmp, driver="GPKG", layer="candidates", promote_to_multi=True)
        lonlat.to_file(
            json_tmp, driver="GeoJSON", layer="candidates", RFC7946="YES", promote_to_multi=True
        )
    return path, geojson
