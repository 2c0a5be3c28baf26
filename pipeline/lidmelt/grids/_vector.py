"""Reading points, tracks and polygons: the one vector reader of lidmelt.

Points (stations, track waypoints, map overlays) come from a delimited text file (CSV; comma,
semicolon, tab or ``|`` separated) with a longitude and a latitude column, or from any vector file
GDAL reads (GeoPackage, GeoJSON, Shapefile...); polygons from any vector file GDAL reads.

Coordinate columns are found under the names of :data:`LON_NAMES` and :data:`LAT_NAMES` (any
case; the first one present wins) unless named explicitly; a text file's coordinates are
EPSG:4326 unless a CRS is given, in decimal degrees or in degrees and minutes (and seconds)
with a sign or a hemisphere letter (:func:`parse_angle`). Every other column is kept as it
was: numbers as numbers, text (identifiers such as ``007`` too) as text. A vector file must
declare its CRS, or one is given to fill it in.
"""

from __future__ import annotations

import csv
import math
import os
import re
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
import pyproj

from lidmelt._errors import InputError
from lidmelt.grids._grid import WGS84

if TYPE_CHECKING:
    import geopandas as gpd

#: Longitude (x) column names recognised in text files (compared case-insensitively), by
#: priority.
LON_NAMES = ("lon", "long", "longitude", "lon_deg", "longitude_deg", "x")
#: Latitude (y) column names recognised in text files, by priority.
LAT_NAMES = ("lat", "latitude", "lat_deg", "latitude_deg", "y")

#: Column names that identify a row in messages, in order of preference.
ID_NAMES = ("id", "name", "station", "site", "label")
#: The same names, in the order a map label prefers them (a person's name before a code).
LABEL_NAMES = ("name", "station", "site", "id", "label")

#: File suffixes read as delimited text rather than through GDAL.
TEXT_SUFFIXES = (".csv", ".tsv", ".txt")


def parse_crs(value: Any, *, option: str = "--crs") -> pyproj.CRS:
    """Parse a user-given CRS (EPSG code, 'EPSG:xxxx', WKT or PROJ string)."""
    try:
        return pyproj.CRS.from_user_input(value)
    except pyproj.exceptions.CRSError as exc:
        msg = (
            f"{option} {value!r} is not a coordinate reference system pyproj knows ({exc}). "
            "Give it as 'EPSG:4326', an EPSG number, WKT or a PROJ string."
        )
        raise InputError(msg) from exc


def describe_rows(frame: pd.DataFrame, positions: Sequence[int], *, limit: int = 10) -> str:
    """Name rows of ``frame`` for a message: positions (0-based) and an id column if present."""
    positions = list(positions)
    id_col = id_column(frame)
    parts = []
    for p in positions[:limit]:
        label = f"row {p + 1}"
        if id_col is not None:
            label += f" ({id_col}={frame[id_col].iloc[p]!s})"
        parts.append(label)
    more = f" and {len(positions) - limit} more" if len(positions) > limit else ""
    return ", ".join(parts) + more


def id_column(frame: pd.DataFrame) -> str | None:
    """The first column whose name looks like an identifier (:data:`ID_NAMES`, any case)."""
    return _first_column(frame, ID_NAMES)


def label_column(frame: pd.DataFrame) -> str | None:
    """The first column that names a feature for a person (:data:`LABEL_NAMES`, any case)."""
    return _first_column(frame, LABEL_NAMES)


def _first_column(frame: pd.DataFrame, names: Sequence[str]) -> str | None:
    lowered = {str(c).strip().lower(): c for c in frame.columns if c != "geometry"}
    return next((lowered[key] for key in names if key in lowered), None)


def find_coordinate_columns(
    columns: Sequence[str], *, lon_column: str | None, lat_column: str | None, source: str
) -> tuple[str, str]:
    """Find the longitude (x) and latitude (y) columns among ``columns``.

    Raises
    ------
    InputError
        If a named column is absent or none of the common names is found.
    """
    lowered = {str(c).strip().lower(): c for c in columns}
    found = []
    for given, names, option in (
        (lon_column, LON_NAMES, "--lon-column"),
        (lat_column, LAT_NAMES, "--lat-column"),
    ):
        if given is not None:
            if given in columns:
                found.append(given)
                continue
            if given.strip().lower() in lowered:
                found.append(lowered[given.strip().lower()])
                continue
            msg = (
                f"{source} has no column {given!r} (given by {option}); its columns are "
                f"{', '.join(map(str, columns))}. Give one of those to {option}."
            )
            raise InputError(msg)
        match = next((lowered[n] for n in names if n in lowered), None)
        if match is None:
            msg = (
                f"{source} has no recognisable coordinate columns: its columns are "
                f"{', '.join(map(str, columns)) or '(none)'}; expected a longitude column named "
                f"one of {'/'.join(LON_NAMES)} and a latitude column named one of "
                f"{'/'.join(LAT_NAMES)} (any case). Rename them, or name them with "
                "--lon-column NAME --lat-column NAME (lon_column=, lat_column= in Python)."
            )
            raise InputError(msg)
        found.append(match)
    if found[0] == found[1]:
        msg = (
            f"{source}: the same column {found[0]!r} was taken for both longitude and latitude. "
            "Name them with --lon-column and --lat-column."
        )
        raise InputError(msg)
    return found[0], found[1]


_HEMISPHERES = {"lon": {"E": 1.0, "W": -1.0}, "lat": {"N": 1.0, "S": -1.0}}
_ANGLE_MARKS = re.compile(r"[°º˚'′’\"″”:dDmM]|''")


def parse_angle(text: Any, *, axis: str) -> float:
    """An angle in decimal degrees from degrees-minutes(-seconds) text; NaN if not one.

    Accepts a sign or a hemisphere letter (before or after; E/W for ``axis="lon"``, N/S for
    ``axis="lat"``), and degrees, minutes and seconds separated by spaces, colons or the marks
    ° ' " (or d m): ``06°00.0'S``, ``6 00.0 S``, ``-6:00:00``, ``W 12 30 15.5``. Minutes and
    seconds must be below 60; a sign together with a letter is refused.
    """
    value = str(text).strip().upper()
    letters = _HEMISPHERES[axis]
    sign = 1.0
    if value[-1:] in letters or value[:1] in letters:
        letter = value[-1] if value[-1:] in letters else value[0]
        value = value[:-1] if value[-1:] == letter else value[1:]
        sign = letters[letter]
        if value.strip().startswith(("-", "+")):
            return math.nan
    value = value.strip()
    if value.startswith(("-", "+")):
        sign, value = (-1.0 if value[0] == "-" else 1.0), value[1:]
    parts = _ANGLE_MARKS.sub(" ", value).split()
    try:
        numbers = [float(p) for p in parts]
    except ValueError:
        return math.nan
    if not 1 <= len(numbers) <= 3 or any(n < 0 or n >= 60 for n in numbers[1:]):
        return math.nan
    if any(n != int(n) for n in numbers[:-1]):  # only the last part may have decimals
        return math.nan
    return sign * sum(n / 60.0**i for i, n in enumerate(numbers))


def _sniff_delimiter(path: Path) -> str:
    with path.open(encoding="utf-8-sig", errors="replace") as fh:
        sample = fh.read(65536)
    first = sample.splitlines()[0] if sample.strip() else ""
    try:
        return csv.Sniffer().sniff(first, delimiters=",;\t|").delimiter
    except csv.Error:
        return "\t" if path.suffix.lower() == ".tsv" else ","


def _infer_column(values: pd.Series) -> pd.Series:
    """Numbers stay numbers, everything else stays the text it was (ids such as 007 too)."""
    text = values.astype(str).str.strip()
    present = text != ""
    if not present.any():
        return values
    numbers = pd.to_numeric(text.where(present), errors="coerce")
    if numbers[present].isna().any() or text[present].str.match(r"^[+-]?0\d").any():
        return values
    if present.all() and text.str.fullmatch(r"[+-]?\d{1,18}").all():
        return numbers.astype("int64")
    return numbers.astype("float64")


def read_table_points(
    path: Path,
    *,
    lon_column: str | None,
    lat_column: str | None,
    crs: Any,
    what: str,
) -> gpd.GeoDataFrame:
    """Read a delimited text file of points (coordinates in two columns)."""
    import geopandas as gpd

    source = f"{what} file {str(path)!r}"
    try:
        frame = pd.read_csv(
            path,
            sep=_sniff_delimiter(path),
            dtype=str,
            keep_default_na=False,
            encoding="utf-8-sig",
        )
    except pd.errors.EmptyDataError as exc:
        msg = (
            f"{source} is empty; expected a header line with longitude and latitude columns "
            "and one row per point. Check that the right file was given."
        )
        raise InputError(msg) from exc
    except (OSError, UnicodeDecodeError, pd.errors.ParserError) as exc:
        msg = f"{source} cannot be read as CSV ({exc}). Save it as UTF-8 comma-separated text."
        raise InputError(msg) from exc
    lon_name, lat_name = find_coordinate_columns(
        list(frame.columns), lon_column=lon_column, lat_column=lat_column, source=source
    )
    if frame.empty:
        msg = (
            f"{source} has a header but no rows; expected one row per point. "
            "Add the points or give another file."
        )
        raise InputError(msg)
    coords = {}
    for name, axis in ((lon_name, "lon"), (lat_name, "lat")):
        numbers = pd.to_numeric(frame[name].str.strip(), errors="coerce").to_numpy(dtype=float)
        if crs is None and not np.isfinite(numbers).all():  # degrees, minutes, seconds
            numbers = np.array([parse_angle(v, axis=axis) for v in frame[name]], dtype=float)
        bad = np.flatnonzero(~np.isfinite(numbers))
        if bad.size:
            shown = ", ".join(f"line {i + 2}: {frame[name].iloc[i]!r}" for i in bad[:10])
            msg = (
                f"{source}: column {name!r} has {bad.size} value(s) that are not numbers "
                f"nor coordinates ({shown}); expected decimal degrees or degrees and minutes "
                "(and seconds) with a sign or a hemisphere letter, e.g. -6.0, 06°00.0'S, "
                f"6 00.0 S, -6:00:00 ({'E/W' if axis == 'lon' else 'N/S'} for this column). "
                "Fix or remove those rows."
            )
            raise InputError(msg)
        coords[name] = numbers
    out = frame.copy()
    for name in out.columns:
        out[name] = coords[name] if name in coords else _infer_column(out[name])
    src_crs = WGS84 if crs is None else parse_crs(crs)
    gdf = gpd.GeoDataFrame(
        out, geometry=gpd.points_from_xy(coords[lon_name], coords[lat_name]), crs=src_crs
    )
    gdf.attrs["lidmelt_coordinate_columns"] = (lon_name, lat_name)
    return gdf


def read_vector(path: Path, *, crs: Any, what: str) -> gpd.GeoDataFrame:
    """Read a vector file through GDAL (pyogrio); apply ``crs`` when the file has none."""
    import geopandas as gpd

    source = f"{what} file {str(path)!r}"
    if path.is_file() and path.stat().st_size == 0:
        msg = f"{source} is empty (0 bytes). Check that the right file was given."
        raise InputError(msg)
    try:
        gdf = gpd.read_file(path)
    except Exception as exc:  # pyogrio raises several unrelated types for unreadable files
        msg = (
            f"{source} cannot be read as a vector file ({exc}). Give a CSV, GeoPackage, "
            "GeoJSON or Shapefile."
        )
        raise InputError(msg) from exc
    if not isinstance(gdf, gpd.GeoDataFrame) or gdf.geometry.name not in gdf.columns:
        msg = f"{source} has no geometry column. Give a file with geometries, or a CSV."
        raise InputError(msg)
    if len(gdf) == 0:
        msg = f"{source} has no features. Check that the right file (or layer) was given."
        raise InputError(msg)
    return apply_crs(gdf, crs=crs, source=source)


def apply_crs(gdf: gpd.GeoDataFrame, *, crs: Any, source: str) -> gpd.GeoDataFrame:
    """Check that ``gdf`` has a CRS, setting ``crs`` when it has none."""
    if crs is not None:
        given = parse_crs(crs)
        if gdf.crs is None:
            return gdf.set_crs(given)
        if not pyproj.CRS.from_user_input(gdf.crs).equals(given, ignore_axis_order=True):
            msg = (
                f"{source} declares the CRS {gdf.crs.to_string()!r} but {given.to_string()!r} "
                "was given; a CRS given by the option only fills in a missing one. Drop the "
                "option, or reproject the file."
            )
            raise InputError(msg)
        return gdf
    if gdf.crs is None:
        msg = (
            f"{source} has no coordinate reference system (CRS), so its coordinates cannot be "
            "placed on the grid; expected a file that declares one (a Shapefile needs its .prj). "
            "Give the CRS its coordinates are in with --crs (crs= in Python), e.g. --crs "
            "EPSG:4326, or set it in the file."
        )
        raise InputError(msg)
    return gdf


def read_points(
    path: str | os.PathLike[str],
    *,
    lon_column: str | None = None,
    lat_column: str | None = None,
    crs: Any = None,
    what: str = "station",
) -> gpd.GeoDataFrame:
    """Read points from a CSV (coordinate columns) or any point file GDAL reads.

    Parameters
    ----------
    path : str or os.PathLike
        A CSV or text table, or a vector file (GeoPackage, GeoJSON, shapefile ...).
    lon_column, lat_column : str, optional
        The coordinate columns of a table; by default found among the usual names.
    crs : optional
        The CRS of a table's coordinates (anything pyproj accepts); default WGS 84 degrees.
    what : str
        What the points are, for messages (``"station"``).

    Returns
    -------
    geopandas.GeoDataFrame
        One row per point, with the file's other columns.

    Raises
    ------
    InputError
        If the file is missing, empty, unreadable, without coordinates or without a CRS.
    """
    path = Path(path)
    if not path.is_file():
        msg = f"{what} file {str(path)!r} does not exist. Check the path."
        raise InputError(msg)
    if path.suffix.lower() in TEXT_SUFFIXES:
        return read_table_points(
            path, lon_column=lon_column, lat_column=lat_column, crs=crs, what=what
        )
    return read_vector(path, crs=crs, what=what)


def check_points(gdf: gpd.GeoDataFrame, *, source: str) -> tuple[np.ndarray, np.ndarray]:
    """Check that every geometry is a non-empty point; return its x and y (in the gdf's CRS)."""
    import shapely

    if gdf.crs is None:
        msg = (
            f"{source} has no CRS; expected points with a coordinate reference system. Set it "
            "with gdf.set_crs('EPSG:4326') (or the CRS the coordinates are in)."
        )
        raise InputError(msg)
    geoms = gdf.geometry.to_numpy()
    types = shapely.get_type_id(geoms)
    bad = np.flatnonzero((types != shapely.GeometryType.POINT) | shapely.is_empty(geoms))
    if bad.size:
        kinds = sorted({str(g.geom_type) if g is not None else "missing" for g in geoms[bad]})
        msg = (
            f"{source} has {bad.size} feature(s) that are not single points "
            f"({', '.join(kinds)}; {describe_rows(gdf, bad)}); expected one Point per station. "
            "Remove them, or convert the file to points."
        )
        raise InputError(msg)
    x = shapely.get_x(geoms).astype(float)
    y = shapely.get_y(geoms).astype(float)
    if pyproj.CRS.from_user_input(gdf.crs).is_geographic:
        bad = np.flatnonzero(~(np.abs(y) <= 90.0) | ~((x >= -180.0) & (x <= 360.0)))
        if bad.size:
            msg = (
                f"{source} has latitudes outside -90..90 degrees or longitudes outside "
                f"-180..360 degrees ({describe_rows(gdf, bad)}: e.g. x={x[bad[0]]!r}, "
                f"y={y[bad[0]]!r}). The columns may be swapped or the file may be projected: "
                "use --lon-column/--lat-column, or give its CRS with --crs."
            )
            raise InputError(msg)
    return x, y


def check_polygons(gdf: gpd.GeoDataFrame, *, source: str) -> np.ndarray:
    """Return the geometries as valid Polygons/MultiPolygons (invalid ones repaired with
    :func:`shapely.make_valid`, with a warning), or raise InputError for other geometries."""
    import warnings

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
            f"{describe_rows(gdf, bad)}); expected Polygon or MultiPolygon features. "
            "Remove them, or buffer points and lines into polygons first."
        )
        raise InputError(msg)
    invalid = np.flatnonzero(~shapely.is_valid(geoms))
    if invalid.size:
        warnings.warn(
            f"{source}: {invalid.size} invalid polygon(s) ({describe_rows(gdf, invalid)}) "
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


def read_features(
    data: gpd.GeoDataFrame | str | os.PathLike[str],
    *,
    what: str,
    expected: str,
    crs: Any = None,
    lon_column: str | None = None,
    lat_column: str | None = None,
    points: bool = True,
) -> tuple[gpd.GeoDataFrame, str]:
    """Features from a file or a GeoDataFrame, with a CRS; return them and their name in
    messages (``"<what> file '<path>'"`` or ``"the <what> table"``).

    A path is read with :func:`read_points` (``points=True``: text files as coordinate
    columns) or :func:`read_vector`; a GeoDataFrame goes through :func:`apply_crs` and must have
    rows (``expected`` says what they should be, for the message).

    Raises
    ------
    InputError
        If the file is missing or unreadable, the features have no CRS, or the table is empty.
    """
    if isinstance(data, (str, os.PathLike)):
        source = f"{what} file {str(data)!r}"
        if points:
            gdf = read_points(
                data, lon_column=lon_column, lat_column=lat_column, crs=crs, what=what
            )
        else:
            path = Path(data)
            if not path.is_file():
                msg = f"{source} does not exist. Check the path."
                raise InputError(msg)
            gdf = read_vector(path, crs=crs, what=what)
        return gdf, source
    source = f"the {what} table"
    gdf = apply_crs(data, crs=crs, source=source)
    if len(gdf) == 0:
        msg = f"{source} has no rows; expected {expected}."
        raise InputError(msg)
    return gdf, source


def read_polygons(
    data: gpd.GeoDataFrame | str | os.PathLike[str], *, crs: Any = None, what: str = "polygon"
) -> gpd.GeoDataFrame:
    """Polygon features in their own CRS, checked (and repaired) by :func:`check_polygons`.

    Parameters
    ----------
    data : geopandas.GeoDataFrame or str or os.PathLike
        Polygons, or a vector file that holds them.
    crs : optional
        The CRS to assume when the file has none (anything pyproj accepts).
    what : str
        What the polygons are, for messages (``"polygon"``).

    Returns
    -------
    geopandas.GeoDataFrame
        The polygons, valid, in their own CRS.

    Raises
    ------
    InputError
        If the file is missing, unreadable, without CRS or features, or holds non-polygons.
    """
    gdf, source = read_features(
        data, what=what, expected="one or more polygons", crs=crs, points=False
    )
    return gdf.set_geometry(check_polygons(gdf, source=source), crs=gdf.crs)


def read_labelled_points(
    path: str | os.PathLike[str], *, crs: Any = None, what: str = "stations"
) -> gpd.GeoDataFrame:
    """Points as WGS84 ``lon``/``lat`` degrees with a ``label`` column (for map overlays).

    The points are read with :func:`read_points`; ``label`` holds the text of the first column
    named as in :data:`LABEL_NAMES`, or None when there is none. Longitudes given in EPSG:4326
    are kept as they are (0..360 stays 0..360).

    Raises
    ------
    InputError
        As :func:`read_points` and :func:`check_points`.
    """
    import geopandas as gpd

    gdf = read_points(path, crs=crs, what=what)
    source = f"{what} file {str(path)!r}"
    x, y = check_points(gdf, source=source)
    src = pyproj.CRS.from_user_input(gdf.crs)
    if not src.equals(WGS84, ignore_axis_order=True):
        transformer = pyproj.Transformer.from_crs(src, WGS84, always_xy=True)
        x, y = (np.asarray(v, dtype=float) for v in transformer.transform(x, y))
    name = label_column(gdf)
    labels = [str(v) for v in gdf[name]] if name is not None else [None] * len(gdf)
    frame = pd.DataFrame({"lon": x, "lat": y, "label": labels}, index=gdf.index)
    return gpd.GeoDataFrame(frame, geometry=gpd.points_from_xy(x, y), crs=WGS84)
