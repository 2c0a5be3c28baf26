"""Values of a finished run along a ship track, and the profile figure.

:func:`sample_track` places points every ``spacing_km`` along the geodesics (WGS84 ellipsoid,
pyproj.Geod) that join a track's waypoints and samples every variable of the run there (the
rules of :mod:`lidmelt.products._sites`); :func:`plot_profile` (:mod:`._profile_figure`) draws
them as a cross-section: inputs, melt thickness, and the melting column between the top of the
melting column and the onset depth, with depth downward. ``lidmelt profile`` is the
command-line form.

Tracks
------
Waypoints in a CSV (coordinate columns as for stations), or a vector file GDAL reads holding
points (the waypoints, in file order) or one line (its vertices are the waypoints; a
MultiLineString, or several line features, are joined when each part starts where the previous
one ends).

Points
------
The first point is the first waypoint (distance 0); then one every ``spacing_km`` km of
distance along the track, the spacing carried across waypoints (a point may fall between two
waypoints on either side of a turn; its distance is measured along the track); the last point
is the last waypoint, at the track's total length. ``waypoint_index`` is the index of the
last waypoint at or before the point (0-based; the final point has the last waypoint's index).
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
import pyproj

from lidmelt._errors import InputError
from lidmelt._files import atomic_path
from lidmelt.grids import _vector as vector
from lidmelt.grids._grid import WGS84, lonlat_from
from lidmelt.grids._rundir import RunDir
from lidmelt.products import _sampling as smp
from lidmelt.products._profile_figure import plot_profile

if TYPE_CHECKING:
    import geopandas as gpd

#: Ellipsoid of the track geodesics.
GEOD = pyproj.Geod(ellps="WGS84")

#: More points than this along one track is taken as a mistake in the spacing.
MAX_POINTS = 5_000_000

#: A track end this close (km) to the last regular point is not added again.
_END_TOLERANCE_KM = 1e-6


def read_track(
    track: gpd.GeoDataFrame | str | os.PathLike[str],
    *,
    lon_column: str | None = None,
    lat_column: str | None = None,
    crs: Any = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Read a track's waypoints as WGS84 longitudes and latitudes (degrees).

    Parameters
    ----------
    track : geopandas.GeoDataFrame or path
        Waypoints (CSV or point features, in order) or one line (see the module notes).
    lon_column, lat_column, crs
        As for :func:`lidmelt.products._sites.sample_stations`.

    Returns
    -------
    lon, lat : numpy.ndarray
        Waypoint coordinates, consecutive repeats removed. Units: degrees (WGS84).

    Raises
    ------
    lidmelt._errors.InputError
        If the file cannot be read, or has fewer than two distinct waypoints, mixed or
        disconnected geometries, or no CRS.
    """
    import shapely

    gdf, source = vector.read_features(
        track,
        what="track",
        expected="two or more waypoints, or one line",
        crs=crs,
        lon_column=lon_column,
        lat_column=lat_column,
    )
    geoms = gdf.geometry.to_numpy()
    types = set(shapely.get_type_id(geoms).tolist())
    point, line, multi = (
        int(shapely.GeometryType.POINT),
        int(shapely.GeometryType.LINESTRING),
        int(shapely.GeometryType.MULTILINESTRING),
    )
    if types == {point}:
        x, y = vector.check_points(gdf, source=source)
    elif types <= {line, multi}:
        x, y = _line_vertices(geoms, source=source)
    else:
        kinds = sorted({g.geom_type if g is not None else "missing" for g in geoms})
        msg = (
            f"{source} holds {', '.join(kinds)} geometries; expected points (the waypoints) or "
            "lines. Convert it, or give the waypoints as a CSV."
        )
        raise InputError(msg)
    lon, lat = lonlat_from(gdf.crs, x, y)
    keep = np.ones(lon.size, dtype=bool)
    keep[1:] = (np.diff(lon) != 0) | (np.diff(lat) != 0)
    lon, lat = lon[keep], lat[keep]
    if lon.size < 2:
        msg = (
            f"{source} has {lon.size} distinct waypoint(s); a track needs at least two. "
            "Give the waypoints in order, start to end."
        )
        raise InputError(msg)
    return lon, lat


def _line_vertices(geoms: np.ndarray, *, source: str) -> tuple[np.ndarray, np.ndarray]:
    import shapely

    parts = [p for g in geoms for p in shapely.get_parts(g) if not p.is_empty]
    if not parts:
        msg = f"{source} holds only empty lines; expected a line with two or more vertices."
        raise InputError(msg)
    coords = [shapely.get_coordinates(parts[0])]
    for k, part in enumerate(parts[1:], start=1):
        c = shapely.get_coordinates(part)
        if not np.allclose(c[0], coords[-1][-1], rtol=0, atol=1e-9):
            msg = (
                f"{source} has {len(parts)} line parts and part {k + 1} does not start where "
                f"part {k} ends ({tuple(coords[-1][-1])} vs {tuple(c[0])}); expected one "
                "connected track. Join the parts in order, or profile each part on its own."
            )
            raise InputError(msg)
        coords.append(c[1:])
    xy = np.concatenate(coords)
    return xy[:, 0], xy[:, 1]


def track_points(
    lon: np.ndarray, lat: np.ndarray, *, spacing_km: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Points every ``spacing_km`` along the geodesics joining waypoints ``(lon, lat)``.

    Parameters
    ----------
    lon, lat : numpy.ndarray
        Waypoints in order. Units: degrees (WGS84).
    spacing_km : float
        Distance between points along the track. Units: km; > 0.

    Returns
    -------
    lon, lat : numpy.ndarray
        Point coordinates, longitude in -180..180. Units: degrees.
    distance_km : numpy.ndarray
        Distance along the track from the first waypoint. Units: km.
    waypoint_index : numpy.ndarray
        Index of the last waypoint at or before each point.

    Raises
    ------
    lidmelt._errors.InputError
        If ``spacing_km`` is not a positive number or gives more than 5 million points.
    """
    try:
        spacing = float(spacing_km)
    except (TypeError, ValueError):
        spacing = math.nan
    if not (np.isfinite(spacing) and spacing > 0):
        msg = (
            f"spacing {spacing_km!r} km is not a positive distance; expected the distance "
            "between profile points in km, e.g. --spacing 5."
        )
        raise InputError(msg)
    lon = np.asarray(lon, dtype=float)
    lat = np.asarray(lat, dtype=float)
    azimuth, _, _ = GEOD.inv(lon[:-1], lat[:-1], lon[1:], lat[1:])
    azimuth = np.atleast_1d(np.asarray(azimuth, dtype=float))
    starts = waypoint_distances_km(lon, lat)
    seg_km = np.diff(starts)
    total = float(starts[-1])
    count = int(np.floor(total / spacing * (1 + 1e-12))) + 1
    if count > MAX_POINTS:
        msg = (
            f"spacing {spacing} km along a {total:.1f} km track gives {count} points, more than "
            f"{MAX_POINTS}; expected a spacing in km (not m). Give a larger --spacing."
        )
        raise InputError(msg)
    distance = np.arange(count) * spacing
    if total - distance[-1] > _END_TOLERANCE_KM:
        distance = np.append(distance, total)
    else:
        distance[-1] = min(distance[-1], total)
    segment = np.clip(np.searchsorted(starts, distance, side="right") - 1, 0, seg_km.size - 1)
    local_m = (distance - starts[segment]) * 1000.0
    plon, plat, _ = GEOD.fwd(lon[segment], lat[segment], azimuth[segment], local_m)
    plon = np.mod(np.asarray(plon, dtype=float) + 180.0, 360.0) - 180.0
    plat = np.asarray(plat, dtype=float)
    index = np.searchsorted(starts, distance + 1e-9, side="right") - 1
    index = np.clip(index, 0, lon.size - 1)
    index[-1] = lon.size - 1
    plon[-1], plat[-1] = np.mod(lon[-1] + 180.0, 360.0) - 180.0, lat[-1]
    return plon, plat, distance, index


def waypoint_distances_km(lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Distance along the track of each waypoint (km; 0 at the first), WGS84 geodesics."""
    lon = np.asarray(lon, dtype=float)
    lat = np.asarray(lat, dtype=float)
    _, _, seg_m = GEOD.inv(lon[:-1], lat[:-1], lon[1:], lat[1:])
    seg_km = np.atleast_1d(np.asarray(seg_m, dtype=float)) / 1000.0
    return np.concatenate([[0.0], np.cumsum(seg_km)])


def sample_track(
    run: RunDir | str | os.PathLike[str],
    track: gpd.GeoDataFrame | str | os.PathLike[str],
    *,
    spacing_km: float,
    method: str = "bilinear",
    lon_column: str | None = None,
    lat_column: str | None = None,
    crs: Any = None,
) -> gpd.GeoDataFrame:
    """Sample every variable of a run along a track.

    Parameters
    ----------
    run : RunDir or path
        A run directory written by ``lidmelt run``.
    track : geopandas.GeoDataFrame or path
        Waypoints or one line (see the module notes).
    spacing_km : float
        Distance between points along the track. Units: km.
    method : {"bilinear", "nearest"}
        As for :func:`lidmelt.products._sites.sample_stations`.
    lon_column, lat_column, crs
        Coordinate columns and CRS of a CSV track (default: common names, EPSG:4326).

    Returns
    -------
    geopandas.GeoDataFrame
        One row per point in EPSG:4326: ``distance_km`` (km along the track),
        ``waypoint_index``, ``lon`` and ``lat`` (degrees), one column per output variable and
        input of the run, ``validity_flag`` and ``flag_meaning`` (where the run has its flag
        grid; see :mod:`lidmelt.products._sampling`), ``status``, and Point geometries.

    Raises
    ------
    lidmelt._errors.InputError, lidmelt._errors.RunDirError
        On a bad track, spacing, method or run directory.
    """
    import geopandas as gpd

    smp.check_method(method)
    run = smp.as_run(run)
    wlon, wlat = read_track(track, lon_column=lon_column, lat_column=lat_column, crs=crs)
    lon, lat, distance, index = track_points(wlon, wlat, spacing_km=spacing_km)
    columns, status = smp.sample_points(run, lon, lat, WGS84, method=method)
    frame = pd.DataFrame(
        {
            "distance_km": distance,
            "waypoint_index": index,
            "lon": smp.in_grid_convention(run, lon),
            "lat": lat,
            **columns,
        }
    )
    frame["status"] = pd.array(status, dtype=object)
    gdf = gpd.GeoDataFrame(frame, geometry=gpd.points_from_xy(lon, lat), crs=WGS84)
    gdf.attrs["lidmelt_coordinate_columns"] = ("lon", "lat")
    gdf.attrs["lidmelt_units"] = smp.units_of(run, list(columns))
    gdf.attrs["lidmelt_waypoint_distance_km"] = waypoint_distances_km(wlon, wlat).tolist()
    smp.warn_outside(gdf, status, what="track point", stacklevel=2)
    return gdf


def write_profile(
    gdf: gpd.GeoDataFrame, path: str | os.PathLike[str], *, title: str = "", **figure: Any
) -> tuple[Path, Path]:
    """Write a profile's CSV and its PNG figure beside it (same stem).

    Parameters
    ----------
    gdf : geopandas.GeoDataFrame
        The profile :func:`sample_track` returned.
    path : str or os.PathLike
        The ``.csv`` file; the figure gets the same stem and ``.png``.
    title : str
        The figure's title.
    **figure
        Further options of :func:`plot_profile` (waypoint names, stations, the run for the
        inset map, a subtitle).

    Returns
    -------
    tuple of pathlib.Path
        The CSV and the PNG.
    """
    path = smp.check_output_path(path, (".csv",), what="profile")
    png = path.with_suffix(".png")
    with atomic_path(path) as temp:
        smp.table_with_coordinates(gdf).to_csv(temp, index=False)
        plot_profile(gdf, png, title=title, **figure)
    return path, png
