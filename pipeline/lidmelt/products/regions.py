"""Statistics of a finished run over polygons, and screening for candidate volcanic regions.

:func:`region_statistics` summarises a run inside each polygon of a vector file;
:func:`screen` finds the connected groups of cells whose melt thickness reaches a threshold and
turns them into ranked candidate polygons. ``lidmelt regions`` and ``lidmelt screen`` are the
command-line forms.

Statistics (columns, the same for both products)
------------------------------------------------
A cell belongs to a polygon when its centre falls inside the polygon, whose edges are straight
lines in the polygon's own CRS (densified to 1/64 of its size before it is transformed to the
grid's CRS; in longitude/latitude a ring crossing the antimeridian, 175 -> -175, is read as the
small polygon, as pyproj.Geod reads it). Every polygon gets its own mask on its bounding
window, so overlapping polygons are each right. A polygon that does not overlap the grid is an
error; one that overlaps it but holds no cell centre gets ``n_cells`` 0, NaN means and a
warning.

``area_km2``
    ``region_statistics``: the geodesic area of the polygon itself on the WGS84 ellipsoid
    (pyproj.Geod; edges of a polygon given in longitude/latitude are geodesics, edges given in
    a projected CRS are straight in that projection). ``screen``: the area of the region's
    cells (equal to the area of its polygon, which follows the cell edges).
``n_cells``
    Cells with data (finite ``melt_thickness_km``) whose centres are inside.
``data_area_km2``
    Their total geodesic area.
``melting_area_km2``
    Total area of the cells inside with ``melt_thickness_km`` > 0.
``mean_melt_thickness_km``
    Area-weighted mean melt thickness over the cells with data (non-melting cells count as
    0), i.e. ``melt_volume_km3 / data_area_km2``.
``max_melt_thickness_km``
    Largest melt thickness inside.
``melt_volume_km3``
    Sum over the cells of melt thickness (km) times cell area (km^2).
``shallowest_onset_depth_km``
    Smallest ``onset_depth_km`` inside (only when the run has it).
``mean_thermal_anomaly_k``
    Area-weighted mean of the run's ``thermal_anomaly_k`` input over the cells with data
    (only when the run has that input).

Cell areas are geodesic: on a geographic grid the exact ellipsoidal area of each cell (the
authalic-latitude zone formula, Snyder 1987 eq. 3-12); on a projected grid the ellipsoidal area
of the geodesic polygon through the cell's four corners (pyproj.Geod).

Screening
---------
Candidate regions are groups of cells with ``melt_thickness_km`` >= the threshold that touch
along an edge or at a corner (8-connectivity; on a global geographic grid also across the
antimeridian seam), whose area is at least ``min_area_km2``. Each becomes a (Multi)Polygon along
its cells' edges, with the statistics above plus ``rank`` (1 = largest melt volume) and
``centroid_lon``/``centroid_lat`` (WGS84 degrees: the area-weighted mean position of its cells
on the sphere).
"""

from __future__ import annotations

import math
import os
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
import pyproj
from affine import Affine

from lidmelt.errors import GridError, InputError
from lidmelt.grids.rundir import RunDir
from lidmelt.products import _sampling as smp

if TYPE_CHECKING:
    import geopandas as gpd
    import shapely

__all__ = [
    "STAT_COLUMNS",
    "region_statistics",
    "screen",
    "write_candidates",
    "write_regions",
]

#: Statistics columns, in order (the last two only when the run has the variable).
STAT_COLUMNS = (
    "area_km2",
    "n_cells",
    "data_area_km2",
    "melting_area_km2",
    "mean_melt_thickness_km",
    "max_melt_thickness_km",
    "melt_volume_km3",
    "shallowest_onset_depth_km",
    "mean_thermal_anomaly_k",
)

#: Extra columns of a screening result.
CANDIDATE_COLUMNS = ("rank", "centroid_lon", "centroid_lat")

GEOD = pyproj.Geod(ellps="WGS84")

#: Vertices added per polygon edge length before a change of CRS (edges stay faithful).
_DENSIFY_PARTS = 64


# --------------------------------------------------------------------------------------------
# Loaded grids and per-zone statistics
# --------------------------------------------------------------------------------------------


@dataclass
class _Zones:
    """The grids the statistics need, loaded once."""

    grid: smp.GridInfo
    melt: np.ndarray
    onset: np.ndarray | None
    anomaly: np.ndarray | None
    row_areas: np.ndarray | None  # geographic grids: the area of a cell in each row (km^2)

    @classmethod
    def load(cls, run: RunDir) -> _Zones:
        grid = smp.grid_info(run)
        if smp.REFERENCE_VARIABLE not in run.outputs:
            msg = (
                f"run directory {str(run.path)!r} has no {smp.REFERENCE_VARIABLE} output "
                f"(it has {', '.join(run.outputs) or 'none'}); region statistics and screening "
                "need it. Run 'lidmelt run' with melt_thickness_km among the outputs."
            )
            raise smp.RunDirError(msg)
        melt = smp.load_variable(run, smp.REFERENCE_VARIABLE, grid)
        onset = (
            smp.load_variable(run, "onset_depth_km", grid)
            if "onset_depth_km" in run.outputs
            else None
        )
        anomaly = (
            smp.load_variable(run, "thermal_anomaly_k", grid)
            if "thermal_anomaly_k" in run.inputs
            else None
        )
        rows = smp.row_areas_km2(grid) if grid.is_geographic else None
        return cls(grid=grid, melt=melt, onset=onset, anomaly=anomaly, row_areas=rows)

    @property
    def columns(self) -> list[str]:
        cols = list(STAT_COLUMNS)
        if self.onset is None:
            cols.remove("shallowest_onset_depth_km")
        if self.anomaly is None:
            cols.remove("mean_thermal_anomaly_k")
        return cols

    def areas(self, flat: np.ndarray) -> np.ndarray:
        if self.row_areas is not None:
            return self.row_areas[flat // self.grid.width]
        return smp.cell_areas_km2(self.grid, flat)

    def stats(self, flat: np.ndarray) -> dict[str, float]:
        """Statistics of the cells with flat indices ``flat`` (``area_km2`` left out)."""
        thick = self.melt.ravel()[flat]
        valid = np.isfinite(thick)
        flat, thick = flat[valid], thick[valid]
        area = self.areas(flat)
        data_area = float(area.sum())
        volume = float((thick * area).sum())
        out: dict[str, float] = {
            "n_cells": int(flat.size),
            "data_area_km2": data_area,
            "melting_area_km2": float(area[thick > 0].sum()),
            "mean_melt_thickness_km": volume / data_area if data_area > 0 else math.nan,
            "max_melt_thickness_km": float(thick.max()) if thick.size else math.nan,
            "melt_volume_km3": volume,
        }
        if self.onset is not None:
            onset = self.onset.ravel()[flat]
            ok = np.isfinite(onset)
            out["shallowest_onset_depth_km"] = float(onset[ok].min()) if ok.any() else math.nan
        if self.anomaly is not None:
            anomaly = self.anomaly.ravel()[flat]
            ok = np.isfinite(anomaly)
            weight = area[ok].sum()
            out["mean_thermal_anomaly_k"] = (
                float((anomaly[ok] * area[ok]).sum() / weight) if weight > 0 else math.nan
            )
        return out

    def centroid_lonlat(self, flat: np.ndarray) -> tuple[float, float]:
        """Area-weighted mean position (WGS84 lon, lat in degrees) of cells on the sphere."""
        rows, cols = np.divmod(flat, self.grid.width)
        lon, lat = self.grid.cell_centres_lonlat(rows, cols)
        w = self.areas(flat)
        lam, phi = np.radians(lon), np.radians(lat)
        x = (w * np.cos(phi) * np.cos(lam)).sum()
        y = (w * np.cos(phi) * np.sin(lam)).sum()
        z = (w * np.sin(phi)).sum()
        lon = (math.degrees(math.atan2(y, x)) + 180.0) % 360.0 - 180.0
        return lon, math.degrees(math.atan2(z, math.hypot(x, y)))


# --------------------------------------------------------------------------------------------
# Geometry helpers
# --------------------------------------------------------------------------------------------


def _densify(geoms: np.ndarray) -> np.ndarray:
    """Add vertices so that no edge is longer than 1/64 of the geometry's bounding box."""
    import shapely

    out = geoms.copy()
    for k, g in enumerate(geoms):
        minx, miny, maxx, maxy = g.bounds
        size = max(maxx - minx, maxy - miny)
        if size > 0:
            out[k] = shapely.segmentize(g, size / _DENSIFY_PARTS)
    return out


def _transform(
    geoms: np.ndarray, src: pyproj.CRS, dst: pyproj.CRS, *, densify: bool = True
) -> np.ndarray:
    """Transform geometries between CRSs (densified first unless ``densify`` is False).

    For a geographic target, each ring's longitudes are made continuous, so that a polygon
    crossing the antimeridian (175 -> -175) stays the small polygon its edges describe (as
    pyproj.Geod reads it), not the complement.
    """
    import shapely

    out = geoms
    if not src.equals(dst, ignore_axis_order=True):
        transformer = pyproj.Transformer.from_crs(src, dst, always_xy=True)

        def func(xy: np.ndarray) -> np.ndarray:
            x, y = transformer.transform(xy[:, 0], xy[:, 1], errcheck=False)
            return np.column_stack([x, y])

        out = shapely.transform(_densify(geoms) if densify else geoms, func)
    if dst.is_geographic:
        out = np.array([_unwrap(g) for g in out], dtype=object)
    return out


def _unwrap(geom: shapely.Geometry) -> shapely.Geometry:
    """Make each ring's longitudes continuous (no jumps of more than 180 degrees)."""
    import shapely

    def ring(coords: np.ndarray) -> np.ndarray:
        x = coords[:, 0].copy()
        x[1:] = x[0] + np.cumsum((np.diff(x) + 180.0) % 360.0 - 180.0)
        if abs(x[-1] - x[0]) > 1e-9:  # the ring encircles a pole: leave it as it was
            return coords
        return np.column_stack([x, coords[:, 1]])

    def polygon(p: shapely.Polygon) -> shapely.Polygon:
        shell = ring(np.asarray(p.exterior.coords))
        holes = [ring(np.asarray(r.coords)) for r in p.interiors]
        return shapely.Polygon(shell, holes)

    if geom.geom_type == "Polygon":
        return polygon(geom)
    if geom.geom_type == "MultiPolygon":
        return shapely.MultiPolygon([polygon(p) for p in geom.geoms])
    return geom


def _copies(geom: shapely.Geometry, grid: smp.GridInfo) -> list[shapely.Geometry]:
    """The polygon, shifted by whole turns of longitude, as it can meet a geographic grid."""
    import shapely
    from shapely import affinity

    if not grid.is_geographic:
        return [geom]
    cx = shapely.centroid(geom).x
    base = float(grid.wrap_x(np.array([cx]))[0]) - cx
    return [affinity.translate(geom, xoff=base + k * 360.0) for k in (-1, 0, 1)]


def _polygon_cells(geom: shapely.Geometry, grid: smp.GridInfo) -> tuple[np.ndarray, bool]:
    """Flat indices of the cells whose centres fall inside ``geom`` (grid CRS), and whether the
    polygon meets the grid at all. Each polygon is masked on its own bounding window."""
    import shapely
    from rasterio.features import geometry_mask

    t = grid.transform
    box = shapely.box(*grid.bounds)
    found: list[np.ndarray] = []
    meets = False
    for g in _copies(geom, grid):
        if not g.intersects(box) or g.intersection(box).area <= 0:
            continue
        meets = True
        minx, miny, maxx, maxy = g.bounds
        cols = sorted(((minx - t.c) / t.a, (maxx - t.c) / t.a))
        rows = sorted(((miny - t.f) / t.e, (maxy - t.f) / t.e))
        c0, c1 = max(0, math.floor(cols[0])), min(grid.width, math.ceil(cols[1]))
        r0, r1 = max(0, math.floor(rows[0])), min(grid.height, math.ceil(rows[1]))
        if c1 <= c0 or r1 <= r0:
            continue
        window_transform = Affine(t.a, t.b, t.c + t.a * c0, t.d, t.e, t.f + t.e * r0)
        inside = geometry_mask(
            [g], out_shape=(r1 - r0, c1 - c0), transform=window_transform, invert=True
        )
        rr, cc = np.nonzero(inside)
        found.append((rr + r0) * grid.width + (cc + c0))
    if not found:
        return np.zeros(0, dtype=np.intp), meets
    return np.unique(np.concatenate(found)).astype(np.intp), meets


def _geodesic_area_km2(geom: shapely.Geometry) -> float:
    """Area of a lon/lat polygon on the WGS84 ellipsoid (pyproj.Geod), km^2."""
    from shapely.geometry.polygon import orient

    if geom.geom_type == "MultiPolygon":
        return sum(_geodesic_area_km2(p) for p in geom.geoms)
    area, _ = GEOD.geometry_area_perimeter(orient(geom, 1.0))
    return abs(area) / 1e6


def _check_polygons(gdf: gpd.GeoDataFrame, *, source: str) -> np.ndarray:
    """Return the geometries as valid Polygons/MultiPolygons, or raise InputError."""
    import shapely

    geoms = gdf.geometry.to_numpy()
    polygonal = np.array(
        [
            g is not None and not g.is_empty and g.geom_type in ("Polygon", "MultiPolygon")
            for g in geoms
        ]
    )
    bad = np.flatnonzero(~polygonal)
    if bad.size:
        kinds = sorted({g.geom_type if g is not None else "missing" for g in geoms[bad]})
        msg = (
            f"{source} has {bad.size} feature(s) that are not polygons ({', '.join(kinds)}; "
            f"{smp.describe_rows(gdf, bad)}); expected Polygon or MultiPolygon features. "
            "Remove them, or buffer points and lines into polygons first."
        )
        raise InputError(msg)
    invalid = np.flatnonzero(~shapely.is_valid(geoms))
    if invalid.size:
        warnings.warn(
            f"{source}: {invalid.size} invalid polygon(s) ({smp.describe_rows(gdf, invalid)}) "
            "were repaired with shapely.make_valid.",
            UserWarning,
            stacklevel=3,
        )
        geoms = geoms.copy()
        for k in invalid:
            fixed = shapely.make_valid(geoms[k])
            parts = [p for p in shapely.get_parts(fixed) if p.geom_type == "Polygon"]
            geoms[k] = shapely.MultiPolygon(parts) if len(parts) > 1 else parts[0]
    return geoms


# --------------------------------------------------------------------------------------------
# Region statistics
# --------------------------------------------------------------------------------------------


def region_statistics(
    run: RunDir | str | os.PathLike[str],
    polygons: gpd.GeoDataFrame | str | os.PathLike[str],
    *,
    crs: Any = None,
) -> gpd.GeoDataFrame:
    """Statistics of a run inside each polygon (see the module notes for the columns).

    Parameters
    ----------
    run : RunDir or path
        A run directory written by ``lidmelt run``.
    polygons : geopandas.GeoDataFrame or path
        Polygon features in any CRS (any vector file GDAL reads).
    crs : str or pyproj.CRS, optional
        CRS of a file that declares none.

    Returns
    -------
    geopandas.GeoDataFrame
        The polygons in their order and CRS with their attributes, then the statistics columns
        (km, km^2, km^3, K).

    Raises
    ------
    lidmelt.errors.InputError
        If the file cannot be read, is empty, has no CRS or holds non-polygons.
    lidmelt.errors.GridError
        If a polygon misses the grid.
    lidmelt.errors.RunDirError
        If ``run`` is not a run directory.

    Warns
    -----
    UserWarning
        For a polygon that meets the grid but holds no cell centre (its statistics are NaN).
    """
    import geopandas as gpd

    run = smp.as_run(run)
    if isinstance(polygons, (str, os.PathLike)):
        path = Path(polygons)
        source = f"polygon file {str(path)!r}"
        if not path.is_file():
            msg = f"{source} does not exist. Check the path."
            raise InputError(msg)
        gdf = smp.read_vector(path, crs=crs, what="polygon")
    else:
        source = "the polygon table"
        gdf = smp.apply_crs(polygons, crs=crs, source=source)
        if len(gdf) == 0:
            msg = f"{source} has no rows; expected one or more polygons."
            raise InputError(msg)
    geoms = _check_polygons(gdf, source=source)
    src_crs = pyproj.CRS.from_user_input(gdf.crs)
    zones = _Zones.load(run)
    grid = zones.grid

    in_grid = _transform(geoms, src_crs, grid.crs)
    lonlat = _transform(geoms, src_crs, smp.WGS84, densify=not src_crs.is_geographic)
    rows: list[dict[str, float]] = []
    missing: list[int] = []
    empty: list[int] = []
    for k, g in enumerate(in_grid):
        flat, meets = _polygon_cells(g, grid)
        if not meets:
            missing.append(k)
            continue
        if flat.size == 0:
            empty.append(k)
        rows.append({"area_km2": _geodesic_area_km2(lonlat[k]), **zones.stats(flat)})
    if missing:
        west, south, east, north = grid.bounds
        msg = (
            f"{len(missing)} polygon(s) of {source} miss the grid of {str(run.path)!r} "
            f"({smp.describe_rows(gdf, missing)}); expected polygons that overlap the grid, "
            f"whose extent is x {west:g}..{east:g}, y {south:g}..{north:g} in "
            f"{grid.crs.to_string()}. Remove those polygons (or check the file's CRS)."
        )
        raise GridError(msg)
    if empty:
        warnings.warn(
            f"{len(empty)} polygon(s) of {source} contain no cell centre "
            f"({smp.describe_rows(gdf, empty)}); their statistics are NaN (n_cells = 0).",
            UserWarning,
            stacklevel=2,
        )
    stats = pd.DataFrame(rows, columns=zones.columns, index=gdf.index)
    stats["n_cells"] = stats["n_cells"].astype("int64")
    base = smp.replace_columns(gdf, zones.columns, source=source)
    geometry = base.geometry.name
    attrs = pd.DataFrame(base.drop(columns=geometry))
    return gpd.GeoDataFrame(
        pd.concat([attrs, stats], axis=1), geometry=base.geometry.to_numpy(), crs=gdf.crs
    )


# --------------------------------------------------------------------------------------------
# Screening
# --------------------------------------------------------------------------------------------


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
    run = smp.as_run(run)
    zones = _Zones.load(run)
    grid = zones.grid
    mask = np.isfinite(zones.melt) & (zones.melt >= thr)
    labels, n = _label(mask, periodic=grid.is_periodic)

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
    polygons = _component_polygons(labels, np.array([r["label"] for r in records]), grid.transform)
    columns = ["rank", *zones.columns, "centroid_lon", "centroid_lat"]
    frame = pd.DataFrame(records, columns=["label", *columns[1:]])
    frame.insert(0, "rank", np.arange(1, len(frame) + 1, dtype="int64"))
    frame["n_cells"] = frame["n_cells"].astype("int64")
    geoms = [polygons[label] for label in frame["label"]]
    frame = frame.drop(columns="label")
    return gpd.GeoDataFrame(frame, geometry=gpd.GeoSeries(geoms, crs=grid.crs), crs=grid.crs)


def _rfc7946(gdf: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """Polygons in WGS84 longitude/latitude, split at the antimeridian into -180..180."""
    import shapely
    from shapely import affinity

    src = pyproj.CRS.from_user_input(gdf.crs)
    geoms = _transform(gdf.geometry.to_numpy(), src, smp.WGS84)
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
    return gdf.set_geometry(out, crs=smp.WGS84) if len(gdf) else gdf.to_crs(smp.WGS84)


def write_candidates(gdf: gpd.GeoDataFrame, path: str | os.PathLike[str]) -> tuple[Path, Path]:
    """Write screening candidates as GeoPackage (grid CRS) and GeoJSON (RFC 7946, lon/lat)
    beside it with the same stem; both atomically. Return the two paths."""
    path = smp.check_output_path(path, (".gpkg",), what="candidate regions")
    geojson = path.with_suffix(".geojson")
    lonlat = _rfc7946(gdf)
    with smp.atomic_paths(path, geojson) as (gpkg_tmp, json_tmp):
        gdf.to_file(gpkg_tmp, driver="GPKG", layer="candidates", promote_to_multi=True)
        lonlat.to_file(
            json_tmp, driver="GeoJSON", layer="candidates", RFC7946="YES", promote_to_multi=True
        )
    return path, geojson


def write_regions(gdf: gpd.GeoDataFrame, path: str | os.PathLike[str]) -> Path:
    """Write region statistics as GeoPackage or CSV (by the suffix; a CSV has no geometry)."""
    path = smp.check_output_path(path, (".gpkg", ".csv"), what="region statistics")
    with smp.atomic_paths(path) as (temp,):
        if path.suffix.lower() == ".csv":
            pd.DataFrame(gdf.drop(columns=gdf.geometry.name)).to_csv(temp, index=False)
        else:
            gdf.to_file(temp, driver="GPKG", layer=smp.safe_layer_name(path), promote_to_multi=True)
    return path
