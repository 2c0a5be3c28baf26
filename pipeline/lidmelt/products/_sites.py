"""Values of a finished run at stations (dredge sites, drill sites, seamounts...).

:func:`sample_stations` reads every output variable and every input of a run at a set of points
and returns them as a table with one row per station, in the stations' order, with a ``status``
column; ``lidmelt sample`` is the command-line form.

Stations
--------
A CSV file (comma, semicolon, tab or ``|`` separated) with a longitude and a latitude column,
found under their common names (:data:`lidmelt.grids._vector.LON_NAMES` and
:data:`~lidmelt.grids._vector.LAT_NAMES`, any case) or named with ``lon_column``/``lat_column``;
its coordinates are EPSG:4326 unless ``crs`` says otherwise. Every other column is kept as it
was: numbers as numbers, text (identifiers such as ``007`` too) as text. Or any point file GDAL
reads (GeoPackage, GeoJSON, Shapefile...), in any CRS, or a :class:`geopandas.GeoDataFrame` of
points.

Sampling
--------
Station coordinates are transformed into the grid's CRS. On a geographic grid, longitudes in
0..360 and -180..180 both work, and so do grids that span the antimeridian (stations are
wrapped into the grid's longitude range; a global grid is treated as periodic, so a station
between its last and first column is interpolated across the seam).

``bilinear`` (default) interpolates between the four surrounding cell centres; ``nearest`` takes
the value of the cell that contains the station. Statuses:

``ok``
    Within the grid, with data.
``outside_grid``
    Beyond the grid's outer edge: every value NaN. The station is kept, never dropped, and a
    warning names it.
``nodata``
    The cell containing the station has no data (NaN ``melt_thickness_km``): every output NaN.
``next_to_nodata``
    (bilinear only) One of the four cells around the station has no data: the values are those
    of the cell containing the station (nearest-cell fallback), not an interpolation.

A variable that is NaN by definition at some cells (``onset_depth_km`` where the column does
not melt) follows the same rule on its own cells; the variables not defined where
nothing melts (onset depth and pressure, mean melt pressure) are NaN at a station whose melt
thickness is 0 (``lidmelt sample`` prints "no melting" there). Within the outer half cell of the
grid the values are those of the edge cells. When every station lies outside the grid but some
would lie inside with longitude and latitude exchanged, the warning says so.

Validity flag
-------------
Where the run has its validity flag grid, each station also gets ``validity_flag`` (integer bit
flags; 0 where valid and calibrated, 255 outside the data) and ``flag_meaning`` (the meanings
of the bits set, e.g. "onset deeper than the model's calibrated pressure range"), by the rule of
:mod:`lidmelt.products._sampling`. The status keeps its meaning: a station whose onset lies
beyond the calibrated pressure range is ``ok`` (it has data) and carries flag bit 4.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pandas as pd
import pyproj

from lidmelt.grids import _vector as vector
from lidmelt.grids._rundir import RunDir
from lidmelt.products import _sampling as smp

if TYPE_CHECKING:
    import geopandas as gpd

#: Output suffixes of ``lidmelt sample``.
OUTPUT_SUFFIXES = (".csv", ".gpkg")


def sample_stations(
    run: RunDir | str | os.PathLike[str],
    stations: gpd.GeoDataFrame | str | os.PathLike[str],
    *,
    method: str = "bilinear",
    lon_column: str | None = None,
    lat_column: str | None = None,
    crs: Any = None,
) -> gpd.GeoDataFrame:
    """Sample every output variable and input of a run at stations.

    Parameters
    ----------
    run : RunDir or path
        A run directory written by ``lidmelt run``.
    stations : geopandas.GeoDataFrame or path
        Points with a CRS, or a file: CSV (see the module notes) or any point file GDAL reads.
    method : {"bilinear", "nearest"}
        Interpolation between cell centres, or the value of the containing cell.
    lon_column, lat_column : str, optional
        Coordinate columns of a CSV (default: found under their common names).
    crs : str or pyproj.CRS, optional
        CRS of a CSV's coordinates (default EPSG:4326), or of a vector file that declares none.

    Returns
    -------
    geopandas.GeoDataFrame
        The stations in their order and CRS with their columns, then one column per output
        variable and input of the run (units in the names: ``_km`` km, ``_gpa`` GPa, ``_k`` K,
        ``_ma`` Ma, ``_wt_pct`` wt%; ``max_melt_fraction`` is a fraction, 0..1), then
        ``validity_flag`` and ``flag_meaning`` (where the run has its flag grid), then
        ``status`` (``ok``, ``outside_grid``, ``nodata``, ``next_to_nodata``).

    Raises
    ------
    lidmelt._errors.RunDirError
        If ``run`` is not a run directory.
    lidmelt._errors.InputError
        If the stations cannot be read, have no coordinates or CRS, are not points, or
        ``method`` is unknown.

    Warns
    -----
    UserWarning
        Naming the stations outside the grid (they are kept, with NaN values).
    """
    smp.check_method(method)
    run = smp.as_run(run)
    gdf, source = vector.read_features(
        stations,
        what="station",
        expected="one Point per station",
        crs=crs,
        lon_column=lon_column,
        lat_column=lat_column,
    )
    x, y = vector.check_points(gdf, source=source)
    columns, status = smp.sample_points(
        run, x, y, pyproj.CRS.from_user_input(gdf.crs), method=method
    )

    names = [*columns, "status"]
    out = smp.replace_columns(gdf, names, source=source)
    out = out.assign(**columns, status=pd.array(status, dtype=object))
    coordinates = gdf.attrs.get("lidmelt_coordinate_columns")
    if coordinates and pyproj.CRS.from_user_input(gdf.crs).is_geographic:
        out[coordinates[0]] = smp.in_grid_convention(run, out[coordinates[0]])
    geometry = out.geometry.name
    out = out[[c for c in out.columns if c != geometry] + [geometry]]
    out.attrs = {**gdf.attrs, "lidmelt_units": smp.units_of(run, list(columns))}
    hint = smp.swapped_hint(run, x, y, gdf.crs, status)
    smp.warn_outside(out, status, what="station", stacklevel=2, hint=hint)
    return out


def write_stations(gdf: gpd.GeoDataFrame, path: str | os.PathLike[str]) -> Path:
    """Write sampled stations as CSV or GeoPackage, chosen by the suffix of ``path``.

    The file is written under a temporary name in the destination folder and renamed when
    complete. A CSV has no geometry column: it keeps the stations' own coordinate columns, or
    gets ``longitude``/``latitude`` (WGS84 degrees) when the stations came from a vector file.

    Parameters
    ----------
    gdf : geopandas.GeoDataFrame
        The stations :func:`sample_stations` returned.
    path : str or os.PathLike
        A ``.csv`` or ``.gpkg`` file.

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    lidmelt._errors.InputError
        If the suffix is neither ``.csv`` nor ``.gpkg``.
    """
    path = smp.check_output_path(path, OUTPUT_SUFFIXES, what="station table")
    smp.write_table(gdf, path, layer=smp.safe_layer_name(path))
    return path
