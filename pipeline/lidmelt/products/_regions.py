"""Statistics of a finished run over polygons.

:func:`region_statistics` summarises a run inside each polygon of a vector file; ``lidmelt
regions`` is the command-line form. :class:`Zones` (the run's grids loaded once, and the
statistics of any set of cells) also serves :mod:`lidmelt.products._screening`.

Statistics (columns, the same for regions and screening)
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
    a projected CRS are straight in that projection). Screening: the area of the region's
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
``anomaly_melt_volume_km3``
    Sum over the cells with data of ``anomaly_melt_thickness_km`` (the melt the thermal anomaly
    adds) times cell area (only when the run has that output).
``ambient_melt_volume_km3``
    ``melt_volume_km3 - anomaly_melt_volume_km3``: the melt ambient mantle gives beneath the
    same lid, i.e. the area integral of min(H, H_ambient) (only when the run has the anomaly
    melt).
``melt_volume_km3``
    Sum over the cells of melt thickness (km) times cell area (km^2): the total.
``shallowest_onset_depth_km``
    Smallest ``onset_depth_km`` of the cells inside that melt (``melt_thickness_km`` > 0;
    only when the run has it); NaN where none melts: the onset is not defined there.
``mean_thermal_anomaly_k``
    Area-weighted mean of the run's ``thermal_anomaly_k`` input over the cells with data
    (only when the run has that input).
``min_plate_age_ma``, ``max_plate_age_ma``
    Range of the run's ``plate_age_ma`` input over the cells with data (only when the run has
    a plate age).
``flagged_fraction``
    Of the cells inside whose validity flag is not nodata (255), the fraction with any flag
    bit set; NaN when there is none (only when the run has its flag grid). Cells without melt
    data but with a flag (e.g. no solidus crossing) count here.
``deep_melt_share``
    Melt-volume-weighted mean of ``deep_melt_share`` (the share of the melt made beyond the
    melting model's calibrated pressure): sum of share x melt thickness x area over the melt
    volume (only when the run has that output; NaN without melt).
``melt_production_km3_yr``
    Sum over the cells with data of ``melt_production_mm_yr`` times cell area, in km^3/yr
    (1 mm = 1e-6 km; only when the run has that output, i.e. an upwelling input).

Cell areas are geodesic: on a geographic grid the exact ellipsoidal area of each cell (the
authalic-latitude zone formula, Snyder 1987 eq. 3-12); on a projected grid the ellipsoidal area
of the geodesic polygon through the cell's four corners (pyproj.Geod).
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

from lidmelt._errors import GridError, RunDirError
from lidmelt._files import atomic_path
from lidmelt._variables import FLAG_NODATA
from lidmelt.grids import _vector as vector
from lidmelt.grids._area import cell_areas_km2, row_areas_km2
from lidmelt.grids._grid import WGS84, Grid
from lidmelt.grids._rundir import RunDir, read_flags
from lidmelt.products import _sampling as smp

if TYPE_CHECKING:
    import geopandas as gpd
    import shapely

#: Statistics columns, in order (those of :data:`OPTIONAL_STATISTICS` only when the run has
#: the variable they need).
STAT_COLUMNS = (
    "area_km2",
    "n_cells",
    "data_area_km2",
    "melting_area_km2",
    "mean_melt_thickness_km",
    "max_melt_thickness_km",
    "anomaly_melt_volume_km3",
    "ambient_melt_volume_km3",
    "melt_volume_km3",
    "shallowest_onset_depth_km",
    "mean_thermal_anomaly_k",
    "min_plate_age_ma",
    "max_plate_age_ma",
    "flagged_fraction",
    "deep_melt_share",
    "melt_production_km3_yr",
)

#: Optional statistics columns and the :class:`Zones` field each needs.
OPTIONAL_STATISTICS = {
    "anomaly_melt_volume_km3": "anomaly_melt",
    "ambient_melt_volume_km3": "anomaly_melt",
    "shallowest_onset_depth_km": "onset",
    "mean_thermal_anomaly_k": "anomaly",
    "min_plate_age_ma": "plate_age",
    "max_plate_age_ma": "plate_age",
    "flagged_fraction": "flag",
    "deep_melt_share": "deep_share",
    "melt_production_km3_yr": "production",
}

#: Output variable of the melt the thermal anomaly adds, and of the melt production.
ANOMALY_MELT_VARIABLE = "anomaly_melt_thickness_km"
PRODUCTION_VARIABLE = "melt_production_mm_yr"

#: km per mm (melt production in mm/yr times km^2 gives km^3/yr after this factor).
_KM_PER_MM = 1e-6

GEOD = pyproj.Geod(ellps="WGS84")

#: Vertices added per polygon edge length before a change of CRS (edges stay faithful).
_DENSIFY_PARTS = 64


# --------------------------------------------------------------------------------------------
# Loaded grids and per-zone statistics
# --------------------------------------------------------------------------------------------


def _flag_values(run: RunDir) -> np.ndarray | None:
    flags = read_flags(run)
    return None if flags is None else flags.values


@dataclass
class Zones:
    """The grids the statistics need, loaded once (None: the run does not have it)."""

    grid: Grid
    melt: np.ndarray
    onset: np.ndarray | None
    anomaly: np.ndarray | None
    row_areas: np.ndarray | None  # geographic grids: the area of a cell in each row (km^2)
    anomaly_melt: np.ndarray | None = None
    plate_age: np.ndarray | None = None
    flag: np.ndarray | None = None  # uint8 bit flags, nodata 255
    production: np.ndarray | None = None  # mm/yr
    deep_share: np.ndarray | None = None  # fraction of the melt made beyond calibration

    @classmethod
    def load(cls, run: RunDir) -> Zones:
        grid = smp.run_grid(run)
        if smp.REFERENCE_VARIABLE not in run.outputs:
            msg = (
                f"run directory {str(run.path)!r} has no {smp.REFERENCE_VARIABLE} output "
                f"(it has {', '.join(run.outputs) or 'none'}); region statistics and screening "
                "need it. Run 'lidmelt run' with melt_thickness_km among the outputs."
            )
            raise RunDirError(msg)

        def optional(name: str, names: list[str]) -> np.ndarray | None:
            return smp.load_variable(run, name, grid) if name in names else None

        return cls(
            grid=grid,
            melt=smp.load_variable(run, smp.REFERENCE_VARIABLE, grid),
            onset=optional("onset_depth_km", run.outputs),
            anomaly=optional("thermal_anomaly_k", run.inputs),
            row_areas=row_areas_km2(grid) if grid.is_geographic else None,
            anomaly_melt=optional(ANOMALY_MELT_VARIABLE, run.outputs),
            plate_age=optional("plate_age_ma", run.inputs),
            flag=_flag_values(run),
            production=optional(PRODUCTION_VARIABLE, run.outputs),
            deep_share=optional("deep_melt_share", run.outputs),
        )

    @property
    def columns(self) -> list[str]:
        return [
            c
            for c in STAT_COLUMNS
            if c not in OPTIONAL_STATISTICS or getattr(self, OPTIONAL_STATISTICS[c]) is not None
        ]

    def areas(self, flat: np.ndarray) -> np.ndarray:
        if self.row_areas is not None:
            return self.row_areas[flat // self.grid.width]
        return cell_areas_km2(self.grid, flat)

    def stats(self, flat: np.ndarray) -> dict[str, float]:
        """Statistics of the cells with flat indices ``flat`` (``area_km2`` left out)."""
        flagged = self._flagged_fraction(flat)
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
        if self.anomaly_melt is not None:
            out["anomaly_melt_volume_km3"] = _area_sum(self.anomaly_melt, flat, area)
            out["ambient_melt_volume_km3"] = volume - out["anomaly_melt_volume_km3"]
        if self.onset is not None:
            onset = self.onset.ravel()[flat]
            ok = np.isfinite(onset) & (thick > 0)
            out["shallowest_onset_depth_km"] = float(onset[ok].min()) if ok.any() else math.nan
        if self.anomaly is not None:
            anomaly = self.anomaly.ravel()[flat]
            ok = np.isfinite(anomaly)
            weight = area[ok].sum()
            out["mean_thermal_anomaly_k"] = (
                float((anomaly[ok] * area[ok]).sum() / weight) if weight > 0 else math.nan
            )
        if self.plate_age is not None:
            age = self.plate_age.ravel()[flat]
            age = age[np.isfinite(age)]
            out["min_plate_age_ma"] = float(age.min()) if age.size else math.nan
            out["max_plate_age_ma"] = float(age.max()) if age.size else math.nan
        if flagged is not None:
            out["flagged_fraction"] = flagged
        if self.production is not None:
            out["melt_production_km3_yr"] = _KM_PER_MM * _area_sum(self.production, flat, area)
        if self.deep_share is not None:
            deep = _deep_volume(self.deep_share, flat, thick, area)
            out["deep_melt_share"] = deep / volume if volume > 0 else math.nan
        return out

    @property
    def candidate_columns(self) -> list[str]:
        """The statistics columns of a screening candidate: :attr:`columns`, and always
        ``deep_melt_share`` (NaN without that output)."""
        return [c for c in STAT_COLUMNS if c in self.columns or c == "deep_melt_share"]

    def candidate_stats(self, flat: np.ndarray) -> dict[str, float]:
        """The statistics of a screening candidate: :meth:`stats`, with ``deep_melt_share``
        the share of its anomaly melt volume made beyond the calibrated pressure.

        lidmelt's definition: sum of deep_melt_share x melt thickness x area (the melt volume
        made beyond the calibrated pressure P_c) over sum of anomaly melt thickness x area
        (the volume the thermal anomaly adds), capped at 1. Melt beyond P_c is made only in
        columns whose onset is deeper than P_c, all of them far hotter than ambient mantle (at
        ambient Tp the onset is well inside the calibrated range; docs/physics.md, "How much
        is extrapolation"), so that volume is counted as part of what the anomaly adds. The
        cap keeps it a share (the hot column makes at least the ambient melt within P_c, so
        the deep volume exceeds the anomaly's only by interpolation error). NaN without the
        deep_melt_share or anomaly melt output, or with no anomaly melt.
        """
        out = self.stats(flat)
        out["deep_melt_share"] = math.nan
        if self.deep_share is None or self.anomaly_melt is None:
            return out
        thick = self.melt.ravel()[flat]
        valid = np.isfinite(thick)
        flat, thick = flat[valid], thick[valid]
        area = self.areas(flat)
        anomaly = _area_sum(self.anomaly_melt, flat, area)
        if anomaly > 0:
            deep = _deep_volume(self.deep_share, flat, thick, area)
            out["deep_melt_share"] = min(1.0, deep / anomaly)
        return out

    def _flagged_fraction(self, flat: np.ndarray) -> float | None:
        """Fraction of the cells (flag not nodata) with any flag bit set; None without flags."""
        if self.flag is None:
            return None
        flags = self.flag.ravel()[flat]
        known = flags != FLAG_NODATA
        n = int(known.sum())
        return float((flags[known] != 0).sum()) / n if n else math.nan

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


def _area_sum(values: np.ndarray, flat: np.ndarray, area: np.ndarray) -> float:
    """Sum of ``values`` (a grid) times cell area over the cells ``flat`` (NaN counts as 0)."""
    v = values.ravel()[flat]
    return float(np.where(np.isfinite(v), v * area, 0.0).sum())


def _deep_volume(share: np.ndarray, flat: np.ndarray, thick: np.ndarray, area: np.ndarray) -> float:
    """Melt volume (km^3) made beyond the calibrated pressure in the cells ``flat``: the sum
    of ``share`` (the deep_melt_share grid; NaN, where nothing melts, counts as 0) times
    their melt thickness ``thick`` (km) times their area (km^2)."""
    return float((np.nan_to_num(share.ravel()[flat], nan=0.0) * thick * area).sum())


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


def transform_geometries(
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


def _copies(geom: shapely.Geometry, grid: Grid) -> list[shapely.Geometry]:
    """The polygon, shifted by whole turns of longitude, as it can meet a geographic grid."""
    import shapely
    from shapely import affinity

    if not grid.is_geographic:
        return [geom]
    cx = shapely.centroid(geom).x
    base = float(grid.wrap_x(np.array([cx]))[0]) - cx
    return [affinity.translate(geom, xoff=base + k * 360.0) for k in (-1, 0, 1)]


def _polygon_cells(geom: shapely.Geometry, grid: Grid) -> tuple[np.ndarray, bool]:
    """Flat indices of the cells whose centres fall inside ``geom`` (grid CRS), and whether the
    polygon meets the grid at all. Each polygon is masked on its own bounding window."""
    import shapely
    from rasterio.features import geometry_mask

    t = grid.affine
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


# --------------------------------------------------------------------------------------------
# Region statistics
# --------------------------------------------------------------------------------------------


def region_statistics(
    run: RunDir | str | os.PathLike[str],
    polygons: gpd.GeoDataFrame | str | os.PathLike[str],
    *,
    crs: Any = None,
) -> gpd.GeoDataFrame:
    """Compute a run's statistics inside each polygon (the module notes list the columns).

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
    lidmelt._errors.InputError
        If the file cannot be read, is empty, has no CRS or holds non-polygons.
    lidmelt._errors.GridError
        If a polygon misses the grid.
    lidmelt._errors.RunDirError
        If ``run`` is not a run directory.

    Warns
    -----
    UserWarning
        For a polygon that meets the grid but holds no cell centre (its statistics are NaN).
    """
    run = smp.as_run(run)
    gdf, source = vector.read_features(
        polygons, what="polygon", expected="one or more polygons", crs=crs, points=False
    )
    geoms = vector.check_polygons(gdf, source=source)
    zones = Zones.load(run)
    rows, missing, empty = _polygon_statistics(zones, geoms, pyproj.CRS.from_user_input(gdf.crs))
    if missing:
        _raise_missing(zones.grid, gdf, missing, source=source, run=run)
    if empty:
        warnings.warn(
            f"{len(empty)} polygon(s) of {source} contain no cell centre "
            f"({vector.describe_rows(gdf, empty)}); their statistics are NaN (n_cells = 0).",
            UserWarning,
            stacklevel=2,
        )
    return _with_statistics(gdf, rows, zones.columns, source=source)


def _polygon_statistics(
    zones: Zones, geoms: np.ndarray, src_crs: pyproj.CRS
) -> tuple[list[dict[str, float]], list[int], list[int]]:
    """Statistics of each polygon (in ``src_crs``), and the positions of the polygons that miss
    the grid and of those that meet it but hold no cell centre."""
    in_grid = transform_geometries(geoms, src_crs, zones.grid.pyproj_crs)
    lonlat = transform_geometries(geoms, src_crs, WGS84, densify=not src_crs.is_geographic)
    rows: list[dict[str, float]] = []
    missing: list[int] = []
    empty: list[int] = []
    for k, g in enumerate(in_grid):
        flat, meets = _polygon_cells(g, zones.grid)
        if not meets:
            missing.append(k)
            continue
        if flat.size == 0:
            empty.append(k)
        rows.append({"area_km2": _geodesic_area_km2(lonlat[k]), **zones.stats(flat)})
    return rows, missing, empty


def _raise_missing(
    grid: Grid, gdf: gpd.GeoDataFrame, missing: list[int], *, source: str, run: RunDir
) -> None:
    west, south, east, north = grid.bounds
    msg = (
        f"{len(missing)} polygon(s) of {source} miss the grid of {str(run.path)!r} "
        f"({vector.describe_rows(gdf, missing)}); expected polygons that overlap the grid, "
        f"whose extent is x {west:g}..{east:g}, y {south:g}..{north:g} in "
        f"{grid.pyproj_crs.to_string()}. Remove those polygons (or check the file's CRS)."
    )
    raise GridError(msg)


def _with_statistics(
    gdf: gpd.GeoDataFrame, rows: list[dict[str, float]], columns: list[str], *, source: str
) -> gpd.GeoDataFrame:
    """The polygons with their attributes (minus clashing names), then the statistics."""
    import geopandas as gpd

    stats = pd.DataFrame(rows, columns=columns, index=gdf.index)
    stats["n_cells"] = stats["n_cells"].astype("int64")
    base = smp.replace_columns(gdf, columns, source=source)
    geometry = base.geometry.name
    attrs = pd.DataFrame(base.drop(columns=geometry))
    return gpd.GeoDataFrame(
        pd.concat([attrs, stats], axis=1), geometry=base.geometry.to_numpy(), crs=gdf.crs
    )


def write_regions(gdf: gpd.GeoDataFrame, path: str | os.PathLike[str]) -> Path:
    """Write region statistics as GeoPackage or CSV (by the suffix; a CSV has no geometry).

    Parameters
    ----------
    gdf : geopandas.GeoDataFrame
        The statistics :func:`region_statistics` returned.
    path : str or os.PathLike
        A ``.gpkg`` or ``.csv`` file, written atomically.

    Returns
    -------
    pathlib.Path
        The file written.
    """
    path = smp.check_output_path(path, (".gpkg", ".csv"), what="region statistics")
    with atomic_path(path) as temp:
        if path.suffix.lower() == ".csv":
            pd.DataFrame(gdf.drop(columns=gdf.geometry.name)).to_csv(temp, index=False)
        else:
            gdf.to_file(temp, driver="GPKG", layer=smp.safe_layer_name(path), promote_to_multi=True)
    return path
