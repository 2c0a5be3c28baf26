"""Plume (hotspot) catalogues: one plume per row of a CSV, GeoJSON or GeoPackage file.

Columns (names compared case-insensitively):

``name``
    Label of the plume (default: ``<file stem> <row number>``).
``longitude``, ``latitude``
    Plume centre. In a CSV: columns named as :data:`lidmelt.grids._vector.LON_NAMES` /
    :data:`~lidmelt.grids._vector.LAT_NAMES` (decimal degrees or degrees-minutes text,
    EPSG:4326 unless ``crs`` is given); in a vector file the point geometries, in the file's
    CRS. Either way they are returned in EPSG:4326 degrees.
``radius_km``, ``peak_excess_k``
    Plume radius (km) and excess temperature at the centre (K). Required: a missing column is
    an error (a radius or a temperature is never guessed).
``shape``
    ``gaussian`` (default when the column is absent or the cell empty), ``cosine`` or
    ``top-hat`` (see :class:`lidmelt.grids._anomaly.Plume`).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from lidmelt._config import MAX_PLUMES
from lidmelt._errors import InputError
from lidmelt.grids._grid import WGS84
from lidmelt.grids._vector import check_points, read_points

#: Values taken where a column is absent (or a cell empty).
CATALOGUE_DEFAULTS = {"shape": "gaussian"}
_REQUIRED = ("radius_km", "peak_excess_k")


def read_plume_catalogue(
    path: str | Path, *, crs: Any = None, key: str, max_rows: int | None = None
) -> list[dict[str, Any]]:
    """The rows of a plume catalogue as dicts of the plume fields (EPSG:4326 degrees).

    Parameters
    ----------
    path : str or Path
        CSV (``.csv``, ``.tsv``, ``.txt``) or any point file GDAL reads.
    crs : optional
        CRS of a CSV's coordinates, or of a vector file that states none.
    key : str
        The workflow key that named the file, for messages.
    max_rows : int, optional
        The most rows accepted; a file with more is refused after counting its lines (a text
        file) or features (a vector file), before any row is read.

    Returns
    -------
    list of dict
        ``name``, ``longitude``, ``latitude``, ``radius_km``, ``peak_excess_k``, ``shape``.
        Values are as read; the caller checks their ranges.

    Raises
    ------
    InputError
        If the file cannot be read, has no coordinates or lacks a required column, or has more
        than ``max_rows`` rows.
    """
    path = Path(path)
    if max_rows is not None:
        _check_row_count(path, max_rows, key)
    gdf = read_points(path, crs=crs, what=f"plume catalogue ({key})")
    source = f"plume catalogue {str(path)!r} ({key})"
    columns = {str(c).strip().lower(): c for c in gdf.columns if c != "geometry"}
    missing = [c for c in _REQUIRED if c not in columns]
    if missing:
        msg = (
            f"{source} lacks the column(s) {', '.join(missing)}; its columns are "
            f"{', '.join(map(str, columns.values())) or '(none)'}. Every plume needs radius_km "
            "(km) and peak_excess_k (K); add the columns (name and shape are optional, shape "
            "defaults to gaussian)."
        )
        raise InputError(msg)
    lonlat = gdf.to_crs(WGS84) if gdf.crs is not None else gdf
    lon, lat = check_points(lonlat, source=source)
    rows = []
    for i in range(len(gdf)):
        row = {
            "name": _cell(gdf, columns.get("name"), i) or f"{path.stem} {i + 1}",
            "longitude": float(lon[i]),
            "latitude": float(lat[i]),
            "shape": _cell(gdf, columns.get("shape"), i) or CATALOGUE_DEFAULTS["shape"],
        }
        for name in _REQUIRED:
            row[name] = _cell(gdf, columns[name], i)
        rows.append(row)
    return rows


def _cell(gdf: Any, column: Any, i: int) -> Any:
    """The value in row ``i`` of ``column`` (None for an absent column or an empty cell)."""
    if column is None:
        return None
    value = gdf[column].iloc[i]
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return None
    if isinstance(value, str):
        return value.strip() or None
    return value.item() if hasattr(value, "item") else value


def _check_row_count(path: Path, max_rows: int, key: str) -> None:
    """Refuse a catalogue of more than ``max_rows`` rows, counted without reading them: the
    lines of a text file (the header counts as one), the features of a vector file."""
    try:
        if path.suffix.lower() in (".csv", ".tsv", ".txt"):
            with path.open("rb") as f:
                rows = sum(block.count(b"\n") for block in iter(lambda: f.read(1 << 20), b"")) - 1
        else:
            import pyogrio

            rows = int(pyogrio.read_info(path)["features"])
    except Exception:  # unreadable: read_points gives the message
        return
    if rows > max_rows:
        msg = (
            f"plume catalogue {str(path)!r} ({key}) has {rows:,} rows, more than the "
            f"{max_rows:,} it may add: a workflow has at most {MAX_PLUMES:,} plumes, inline and "
            "catalogue rows together (each is checked before the run and costs the grid cells "
            "within its reach). Keep the plumes that reach the grid, or merge nearby ones."
        )
        raise InputError(msg)
