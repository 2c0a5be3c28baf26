"""Files of plate motion: the rotations table, the plume drift table, and the hotspot tracks.

The one reader of each format (errors name the file and the row, counted from 1 after the
header; the line of the file is given too):

- **rotations** (:func:`read_rotations`): a CSV with the columns ``age_ma, pole_lat, pole_lon,
  angle_deg`` (any order, any case; other columns ignored; ``#`` lines are comments). Each row
  is a finite rotation that takes a point of the plate from its present position to its
  position at ``age_ma`` (Ma) in the plumes' frame: Euler pole latitude and longitude
  (degrees) and angle (degrees, positive anticlockwise seen from above the pole). Ages ascend
  strictly; a row at age 0 must have angle 0 (the present is the identity).
- **plume drift** (:func:`read_plume_drift`): a CSV with ``plume, age_ma, lon, lat``: the
  plume's position (degrees) at each age, ages ascending per plume; age 0 is the plume's
  position in the workflow.
- **hotspot tracks** (:func:`write_tracks`, :func:`read_tracks`): one line per plume, as a
  GeoPackage (layer ``hotspot_tracks``) and an RFC 7946 GeoJSON beside it, EPSG:4326; the
  attribute ``time_ma`` lists the time (Ma) of every vertex in order (a JSON list in the
  GeoPackage, an array in the GeoJSON), ``start_ma`` and ``end_ma`` the first and last.
"""

from __future__ import annotations

import csv
import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from lidmelt._errors import InputError
from lidmelt._files import atomic_paths

#: The columns of a rotations table.
ROTATION_COLUMNS = ("age_ma", "pole_lat", "pole_lon", "angle_deg")
#: The columns of a plume drift table.
DRIFT_COLUMNS = ("plume", "age_ma", "lon", "lat")
#: The most rows a table may have (a rotation per 0.01 Myr over 1000 Myr; more is not a table).
MAX_ROWS = 100_000
#: The largest table file read (bytes).
_MAX_BYTES = 20_000_000
#: The layer of the track GeoPackage.
TRACK_LAYER = "hotspot_tracks"


@dataclass(frozen=True)
class RotationRows:
    """The rows of a rotations table: ages (Ma, ascending) and each finite rotation."""

    source: str
    ages: tuple[float, ...]
    pole_lat: tuple[float, ...]
    pole_lon: tuple[float, ...]
    angle_deg: tuple[float, ...]


def _rows(path: Path, *, what: str, columns: tuple[str, ...]) -> list[tuple[int, dict[str, str]]]:
    """The rows of a CSV as (line, {column: text}) with the ``columns`` required."""
    source = f"{what} {str(path)!r}"
    if not path.is_file():
        msg = f"{source} does not exist. Check the path (relative to the workflow file's folder)."
        raise InputError(msg)
    if path.stat().st_size > _MAX_BYTES:
        msg = f"{source} has {path.stat().st_size:,} bytes, more than {_MAX_BYTES:,}; give a table."
        raise InputError(msg)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        msg = f"{source} cannot be read as UTF-8 text ({exc}). Save it as comma-separated text."
        raise InputError(msg) from exc
    lines = [(n, line) for n, line in enumerate(text.splitlines(), start=1)]
    lines = [(n, line) for n, line in lines if line.strip() and not line.lstrip().startswith("#")]
    if not lines:
        msg = f"{source} is empty; expected a header with {', '.join(columns)} and rows."
        raise InputError(msg)
    parsed = list(csv.reader([line for _, line in lines]))
    header = [h.strip().lower() for h in parsed[0]]
    missing = [c for c in columns if c not in header]
    if missing:
        msg = (
            f"{source} (header on line {lines[0][0]}) lacks the column(s) {', '.join(missing)}; "
            f"it has {', '.join(header) or 'none'}. A {what} needs the columns "
            f"{', '.join(columns)} (comma-separated, with a header line)."
        )
        raise InputError(msg)
    if len(lines) - 1 > MAX_ROWS:
        msg = f"{source} has {len(lines) - 1:,} rows, more than {MAX_ROWS:,}."
        raise InputError(msg)
    out = []
    for (line_no, _), cells in zip(lines[1:], parsed[1:], strict=True):
        if len(cells) != len(header):
            msg = (
                f"{source}, row {len(out) + 1} (line {line_no}), has {len(cells)} fields where "
                f"the header has {len(header)}. Fix that row."
            )
            raise InputError(msg)
        out.append((line_no, {h: c.strip() for h, c in zip(header, cells, strict=True)}))
    return out


def _number(source: str, k: int, line: int, name: str, text: str, unit: str) -> float:
    """A finite number of row ``k`` (from 1); an InputError naming the file and the row."""
    try:
        value = float(text)
    except ValueError:
        value = math.nan
        shown = repr(text[:40])
    else:
        shown = repr(value)
    if not math.isfinite(value):
        msg = (
            f"{source}, row {k} (line {line}): {name} is {shown}; expected a finite number "
            f"in {unit}. Fix that row."
        )
        raise InputError(msg)
    return value


def _check_ages(source: str, ages: list[float], lines: list[int], label: str = "") -> None:
    """Ages >= 0, strictly ascending (no duplicates); errors name both rows."""
    for k, (age, line) in enumerate(zip(ages, lines, strict=True), start=1):
        if age < 0:
            msg = f"{source}, row {k} (line {line}){label}: age_ma is {age:g}; expected >= 0 Ma."
            raise InputError(msg)
        if k > 1 and age <= ages[k - 2]:
            what = "repeats" if age == ages[k - 2] else "is younger than"
            msg = (
                f"{source}, row {k} (line {line}){label}: age_ma {age:g} Ma {what} the row "
                f"before (line {lines[k - 2]}, {ages[k - 2]:g} Ma); the ages must ascend "
                "strictly (one row per age). Sort the rows by age_ma and remove repeats."
            )
            raise InputError(msg)


def _check_covers(source: str, last: float, line: int, max_age_ma: float, what: str) -> None:
    if max_age_ma > last:
        msg = (
            f"{source} ends at {last:g} Ma (its last row, line {line}), but motion.max_age_ma "
            f"= {max_age_ma:g} Ma asks for ages beyond the data{what}. Add rows up to "
            f"{max_age_ma:g} Ma, or lower motion.max_age_ma to {last:g}."
        )
        raise InputError(msg)


def read_rotations(
    path: str | Path, *, max_age_ma: float, what: str = "rotations file"
) -> RotationRows:
    """The rows of a rotations table (module notes), checked; an :class:`InputError` naming
    the file and the row for missing columns, values that are not finite numbers, a pole off
    the sphere (|latitude| > 90), ages that do not ascend or repeat, a row at age 0 that is
    not the identity, and ages short of ``max_age_ma``."""
    path = Path(path)
    source = f"{what} {str(path)!r}"
    rows = _rows(path, what=what, columns=ROTATION_COLUMNS)
    if not rows:
        msg = f"{source} has a header but no rows; expected one finite rotation per age."
        raise InputError(msg)
    values = {c: [] for c in ROTATION_COLUMNS}
    units = {"age_ma": "Ma", "pole_lat": "degrees", "pole_lon": "degrees", "angle_deg": "degrees"}
    for k, (line, row) in enumerate(rows, start=1):
        for c in ROTATION_COLUMNS:
            values[c].append(_number(source, k, line, c, row[c], units[c]))
        lat, lon = values["pole_lat"][-1], values["pole_lon"][-1]
        if abs(lat) > 90.0 or abs(lon) > 360.0:
            msg = (
                f"{source}, row {k} (line {line}): the Euler pole ({lat:g} N, {lon:g} E) is off "
                "the sphere; expected pole_lat within -90..90 and pole_lon within -360..360 "
                "degrees. Check that pole_lat and pole_lon are not swapped."
            )
            raise InputError(msg)
    lines = [line for line, _ in rows]
    _check_ages(source, values["age_ma"], lines)
    if values["age_ma"][0] == 0.0 and math.remainder(values["angle_deg"][0], 360.0) != 0.0:
        msg = (
            f"{source}, row 1 (line {lines[0]}): the rotation at age 0 turns by "
            f"{values['angle_deg'][0]:g} degrees; the present is the identity (angle 0). Remove "
            "that row or set its angle_deg to 0."
        )
        raise InputError(msg)
    _check_covers(source, values["age_ma"][-1], lines[-1], max_age_ma, "")
    return RotationRows(source, *(tuple(values[c]) for c in ROTATION_COLUMNS))


def read_plume_drift(
    path: str | Path, *, plumes: dict[str, tuple[float, float]], max_age_ma: float
) -> dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """The positions of each drifting plume (module notes): ``{name: (ages, lon, lat)}`` with
    the workflow's position at age 0 first. ``plumes`` maps every plume's name to its
    (longitude, latitude) today. Errors name the file and the row."""
    path = Path(path)
    source = f"plume drift file {str(path)!r}"
    rows = _rows(path, what="plume drift file", columns=DRIFT_COLUMNS)
    found: dict[str, list[tuple[int, int, float, float, float]]] = {}
    for k, (line, row) in enumerate(rows, start=1):
        name = row["plume"]
        if name not in plumes:
            known = ", ".join(sorted(plumes)[:10])
            msg = (
                f"{source}, row {k} (line {line}): plume {name[:80]!r} is not a plume of the "
                f"workflow (they are {known}). Use the plumes' names."
            )
            raise InputError(msg)
        age = _number(source, k, line, "age_ma", row["age_ma"], "Ma")
        lon = _number(source, k, line, "lon", row["lon"], "degrees east")
        lat = _number(source, k, line, "lat", row["lat"], "degrees north")
        if abs(lat) > 90.0 or abs(lon) > 360.0:
            msg = (
                f"{source}, row {k} (line {line}): ({lon:g}, {lat:g}) is off the sphere; "
                "expected lon within -360..360 and lat within -90..90 degrees."
            )
            raise InputError(msg)
        found.setdefault(name, []).append((k, line, age, lon, lat))
    out = {}
    for name, items in found.items():
        label = f" (plume {name[:80]!r})"
        ages = [i[2] for i in items]
        _check_ages(source, ages, [i[1] for i in items], label)
        _check_covers(source, ages[-1], items[-1][1], max_age_ma, f" for plume {name[:80]!r}")
        lon0, lat0 = plumes[name]
        if ages[0] == 0.0:
            items = items[1:]
        out[name] = (
            np.array([0.0, *(i[2] for i in items)]),
            np.array([lon0, *(i[3] for i in items)]),
            np.array([lat0, *(i[4] for i in items)]),
        )
    return out


def write_tracks(
    tracks: list[dict[str, Any]], gpkg: str | Path, geojson: str | Path
) -> tuple[Path, Path]:
    """Write the hotspot tracks (module notes), both files atomically.

    ``tracks``: per plume a dict with ``plume`` (name), ``parts`` (a list of (lon, lat, time)
    arrays, one per stretch of the track under the grid, each of at least 2 vertices).
    """
    import geopandas as gpd
    import shapely

    records, geoms = [], []
    for track in tracks:
        parts = [p for p in track["parts"] if len(p[0]) >= 2]
        if not parts:
            continue
        lines = [np.column_stack([p[0], p[1]]) for p in parts]
        times = [float(t) for p in parts for t in p[2]]
        geom = shapely.linestrings(lines[0]) if len(lines) == 1 else shapely.multilinestrings(lines)
        geoms.append(geom)
        records.append(
            {"plume": track["plume"], "start_ma": times[0], "end_ma": times[-1], "time_ma": times}
        )
    gdf = gpd.GeoDataFrame(records, geometry=geoms, crs="EPSG:4326")
    if not records:
        gdf = gpd.GeoDataFrame(
            {"plume": [], "start_ma": [], "end_ma": [], "time_ma": []}, geometry=[], crs="EPSG:4326"
        )
    gpkg, geojson = Path(gpkg), Path(geojson)
    with atomic_paths(gpkg, geojson) as (gpkg_tmp, json_tmp):
        gdf.to_file(gpkg_tmp, driver="GPKG", layer=TRACK_LAYER, promote_to_multi=True)
        gdf.to_file(json_tmp, driver="GeoJSON", RFC7946="YES", promote_to_multi=True)
    return gpkg, geojson


def read_tracks(path: str | Path):
    """The hotspot tracks of :func:`write_tracks` (either file) as a GeoDataFrame whose
    ``time_ma`` holds each track's vertex times as a list of floats."""
    import geopandas as gpd

    gdf = gpd.read_file(path)
    gdf["time_ma"] = [
        [float(t) for t in (json.loads(v) if isinstance(v, str) else v)] for v in gdf["time_ma"]
    ]
    return gdf
