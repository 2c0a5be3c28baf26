"""Shared machinery of the point and region products: grid geometry, point sampling, cell areas,
reading point and vector files, and atomic writing.

Nothing here is public API; :mod:`lidmelt.products.sites`, :mod:`~lidmelt.products.profiles` and
:mod:`~lidmelt.products.regions` build on it.

Sampling rule (bilinear)
------------------------
A point's value is the bilinear interpolation of the four cell centres around it. Where one of
those four centres that carries a non-zero weight is NaN, the point takes the value of the cell
that contains it (its nearest cell centre) instead, and its status is ``next_to_nodata``; where
that containing cell is itself NaN the value is NaN and the status is ``nodata``. Within the outer
half cell of the grid (between the last cell centres and the grid edge) the coordinate is held at
the last centre, so the value there is that of the edge row or column. A point beyond the grid
edge gets NaN and the status ``outside_grid``; it is never dropped.

The status describes the run's data coverage and is taken from ``melt_thickness_km`` (NaN only
where the run has no data; 0 where the mantle does not melt). Variables that are NaN by
definition at some data cells (``onset_depth_km`` where the mantle never reaches its solidus,
``mean_melt_pressure_gpa`` where it does not melt) follow the same per-variable rule.
"""

from __future__ import annotations

import contextlib
import csv
import math
import os
import re
import warnings
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
import pyproj
from affine import Affine

from lidmelt.errors import GridError, InputError, RunDirError
from lidmelt.grids.rundir import RunDir, open_run

if TYPE_CHECKING:
    import geopandas as gpd

#: Status values of a sampled point.
STATUS_OK = "ok"
STATUS_OUTSIDE = "outside_grid"
STATUS_NODATA = "nodata"
STATUS_NEXT_TO_NODATA = "next_to_nodata"
STATUSES = (STATUS_OK, STATUS_OUTSIDE, STATUS_NODATA, STATUS_NEXT_TO_NODATA)

#: The variable whose NaN cells mark where the run has no data.
REFERENCE_VARIABLE = "melt_thickness_km"

METHODS = ("bilinear", "nearest")

#: Coordinate column names recognised in CSV files (compared case-insensitively), by priority.
LON_NAMES = ("lon", "long", "longitude", "x")
LAT_NAMES = ("lat", "latitude", "y")

#: File suffixes read as delimited text rather than through GDAL.
TEXT_SUFFIXES = (".csv", ".tsv", ".txt")

#: Column names that identify a row in messages, in order of preference.
_ID_NAMES = ("id", "name", "station", "site", "label")

#: A fractional cell index this close to an integer is taken as the integer (1e-9 of a cell),
#: so that a point on a cell centre returns the cell value exactly.
_SNAP = 1e-9

WGS84 = pyproj.CRS.from_epsg(4326)


# --------------------------------------------------------------------------------------------
# Run and grid geometry
# --------------------------------------------------------------------------------------------


def as_run(run: RunDir | str | os.PathLike[str]) -> RunDir:
    """Return ``run`` as a :class:`RunDir` (open it when it is a path)."""
    if isinstance(run, RunDir):
        return run
    return open_run(run)


@dataclass(frozen=True)
class GridInfo:
    """Geometry of a run's target grid.

    Attributes
    ----------
    transform : affine.Affine
        Pixel-corner affine transform (north-up, no rotation).
    width, height : int
        Number of columns and rows.
    crs : pyproj.CRS
        The grid's coordinate reference system.
    """

    transform: Affine
    width: int
    height: int
    crs: pyproj.CRS

    @property
    def is_geographic(self) -> bool:
        """True when the grid is in longitude/latitude."""
        return bool(self.crs.is_geographic)

    @property
    def is_periodic(self) -> bool:
        """True for a geographic grid whose columns span exactly 360 degrees of longitude."""
        span = abs(self.transform.a) * self.width
        return self.is_geographic and abs(span - 360.0) < 1e-6

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """(west, south, east, north) of the grid's outer edge, in the grid CRS."""
        t = self.transform
        xs = (t.c, t.c + t.a * self.width)
        ys = (t.f, t.f + t.e * self.height)
        return min(xs), min(ys), max(xs), max(ys)

    @property
    def x_centre(self) -> float:
        """Middle of the grid's x extent (longitude of its centre for geographic grids)."""
        west, _, east, _ = self.bounds
        return 0.5 * (west + east)

    def wrap_x(self, x: np.ndarray) -> np.ndarray:
        """Bring longitudes within 180 degrees of the grid's centre (geographic grids only)."""
        x = np.asarray(x, dtype=float)
        if not self.is_geographic:
            return x
        xc = self.x_centre
        return xc + np.mod(x - xc + 180.0, 360.0) - 180.0

    def to_grid_xy(
        self, x: np.ndarray, y: np.ndarray, src_crs: pyproj.CRS
    ) -> tuple[np.ndarray, np.ndarray]:
        """Transform point coordinates from ``src_crs`` into the grid CRS.

        Geographic longitudes in 0..360 or -180..180 are both accepted; on a geographic grid the
        result is wrapped into the grid's own longitude range, so grids that span the antimeridian
        (for example 160..200 degrees) work. Points that cannot be transformed get NaN.
        """
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        src_crs = pyproj.CRS.from_user_input(src_crs)
        if src_crs.is_geographic:
            x = np.mod(x + 180.0, 360.0) - 180.0
        if not src_crs.equals(self.crs, ignore_axis_order=True):
            transformer = pyproj.Transformer.from_crs(src_crs, self.crs, always_xy=True)
            x, y = transformer.transform(x, y, errcheck=False)
            x = np.asarray(x, dtype=float)
            y = np.asarray(y, dtype=float)
            bad = ~(np.isfinite(x) & np.isfinite(y))
            x[bad] = np.nan
            y[bad] = np.nan
        return self.wrap_x(x), y

    def fractional_index(self, gx: np.ndarray, gy: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Continuous (row, col) index of grid-CRS points; cell centre (i, j) is at (i, j)."""
        t = self.transform
        col = (np.asarray(gx, dtype=float) - t.c) / t.a - 0.5
        row = (np.asarray(gy, dtype=float) - t.f) / t.e - 0.5
        return _snap(row), _snap(col)

    def cell_centres(self, rows: np.ndarray, cols: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Grid-CRS coordinates of the centres of cells (rows, cols)."""
        t = self.transform
        return t.c + t.a * (np.asarray(cols) + 0.5), t.f + t.e * (np.asarray(rows) + 0.5)

    def cell_centres_lonlat(
        self, rows: np.ndarray, cols: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """WGS84 longitude (-180..180) and latitude (degrees) of cell centres."""
        x, y = self.cell_centres(rows, cols)
        return lonlat_from(self.crs, x, y)


def lonlat_from(crs: pyproj.CRS, x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """WGS84 longitude (-180..180) and latitude (degrees) of points given in ``crs``."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if not crs.equals(WGS84, ignore_axis_order=True):
        transformer = pyproj.Transformer.from_crs(crs, WGS84, always_xy=True)
        x, y = (np.asarray(v, dtype=float) for v in transformer.transform(x, y, errcheck=False))
    return np.mod(x + 180.0, 360.0) - 180.0, y


def _snap(index: np.ndarray) -> np.ndarray:
    nearest = np.round(index)
    return np.where(np.abs(index - nearest) < _SNAP, nearest, index)


def grid_info(run: RunDir) -> GridInfo:
    """Read the target-grid geometry from a run's ``summary.json``.

    Raises
    ------
    RunDirError
        If the summary lacks the grid keys.
    GridError
        If the grid is rotated (not north-up).
    """
    grid = run.summary.get("grid") or {}
    try:
        coeffs = [float(v) for v in grid["transform"]][:6]
        transform = Affine(*coeffs)
        width, height = int(grid["width"]), int(grid["height"])
        crs = pyproj.CRS.from_user_input(grid["crs_wkt"])
    except (KeyError, TypeError, ValueError, pyproj.exceptions.CRSError) as exc:
        msg = (
            f"the summary.json of {str(run.path)!r} has no usable 'grid' entry ({exc!r}); expected "
            "'crs_wkt', 'transform' (6 numbers), 'width' and 'height'. The run directory is "
            "damaged or from another program: run 'lidmelt run' again."
        )
        raise RunDirError(msg) from exc
    if transform.b != 0 or transform.d != 0 or transform.a == 0 or transform.e == 0:
        msg = (
            f"the grid of {str(run.path)!r} has a rotated or degenerate transform {coeffs}; "
            "expected a north-up grid (b = d = 0). Warp the inputs to a north-up target grid "
            "and run again."
        )
        raise GridError(msg)
    return GridInfo(transform=transform, width=width, height=height, crs=crs)


def variable_names(run: RunDir) -> list[str]:
    """Every output variable, then every input, of the run (the columns the products sample)."""
    names = list(run.outputs)
    names += [n for n in run.inputs if n not in names]
    return names


def units_of(run: RunDir, names: Sequence[str]) -> dict[str, str]:
    """Units of run variables, as listed in ``summary.json`` ('' when not given)."""
    table = {**run.summary.get("inputs", {}), **run.summary.get("outputs", {})}
    return {n: str((table.get(n) or {}).get("units", "")) for n in names}


def reference_name(run: RunDir) -> str:
    """The variable whose NaN cells mark missing data (``melt_thickness_km`` when present)."""
    if REFERENCE_VARIABLE in run.outputs:
        return REFERENCE_VARIABLE
    if run.outputs:
        return run.outputs[0]
    msg = (
        f"run directory {str(run.path)!r} lists no output variables in its summary.json; "
        "expected at least melt_thickness_km. Run 'lidmelt run' again."
    )
    raise RunDirError(msg)


def load_variable(run: RunDir, name: str, grid: GridInfo) -> np.ndarray:
    """Load one variable as a (height, width) float64 array with NaN nodata.

    Raises
    ------
    RunDirError
        If its shape differs from the grid in ``summary.json``.
    """
    values = np.asarray(run.open(name).values, dtype=np.float64)
    if values.shape != (grid.height, grid.width):
        msg = (
            f"{name!r} in {str(run.path)!r} has shape {values.shape}, but summary.json gives a "
            f"{grid.height} x {grid.width} grid. The run directory is inconsistent: run "
            "'lidmelt run' again."
        )
        raise RunDirError(msg)
    return values


# --------------------------------------------------------------------------------------------
# Point sampling
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Stencil:
    """Where and how a set of points reads a grid (see the module notes for the rule)."""

    inside: np.ndarray  # bool, point within the grid's outer edge
    nearest: np.ndarray  # flat index of the containing cell
    corners: tuple[np.ndarray, ...]  # flat indices of the 4 bilinear neighbours (or empty)
    weights: tuple[np.ndarray, ...]  # their weights


def make_stencil(grid: GridInfo, gx: np.ndarray, gy: np.ndarray, *, method: str) -> Stencil:
    """Compute the sampling stencil of grid-CRS points ``(gx, gy)``."""
    h, w = grid.height, grid.width
    row, col = grid.fractional_index(gx, gy)
    finite = np.isfinite(row) & np.isfinite(col)
    row = np.where(finite, row, 0.0)
    col = np.where(finite, col, 0.0)
    inside = finite & (row >= -0.5) & (row <= h - 0.5)
    if grid.is_periodic:
        col = np.mod(col + 0.5, w) - 0.5
    else:
        inside &= (col >= -0.5) & (col <= w - 0.5)

    rn = np.clip(np.floor(row + 0.5), 0, h - 1).astype(np.intp)
    if grid.is_periodic:
        cn = np.mod(np.floor(col + 0.5), w).astype(np.intp)
    else:
        cn = np.clip(np.floor(col + 0.5), 0, w - 1).astype(np.intp)
    nearest = rn * w + cn
    if method == "nearest":
        return Stencil(inside=inside, nearest=nearest, corners=(), weights=())

    r0, r1, t = _axis_pair(row, h, periodic=False)
    c0, c1, u = _axis_pair(col, w, periodic=grid.is_periodic)
    corners = (r0 * w + c0, r0 * w + c1, r1 * w + c0, r1 * w + c1)
    weights = ((1 - t) * (1 - u), (1 - t) * u, t * (1 - u), t * u)
    return Stencil(inside=inside, nearest=nearest, corners=corners, weights=weights)


def _axis_pair(
    index: np.ndarray, n: int, *, periodic: bool
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Lower and upper neighbour indices along one axis and the weight of the upper one."""
    if periodic:
        lo = np.floor(index)
        frac = index - lo
        lo = np.mod(lo, n).astype(np.intp)
        return lo, np.mod(lo + 1, n).astype(np.intp), frac
    if n == 1:
        zero = np.zeros(index.shape, dtype=np.intp)
        return zero, zero, np.zeros(index.shape)
    held = np.clip(index, 0, n - 1)
    lo = np.minimum(np.floor(held), n - 2)
    return lo.astype(np.intp), (lo + 1).astype(np.intp), held - lo


def apply_stencil(stencil: Stencil, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sample a (height, width) array; return (values, next_to_nodata flags)."""
    flat = values.ravel()
    at_nearest = flat[stencil.nearest]
    if not stencil.corners:
        out = at_nearest.copy()
        flagged = np.zeros(out.shape, dtype=bool)
    else:
        out = np.zeros(at_nearest.shape)
        flagged = np.zeros(at_nearest.shape, dtype=bool)
        for index, weight in zip(stencil.corners, stencil.weights, strict=True):
            v = flat[index]
            ok = np.isfinite(v)
            flagged |= (weight > 0) & ~ok
            out += weight * np.where(ok, v, 0.0)
        out = np.where(flagged, at_nearest, out)
    out = np.where(stencil.inside, out, np.nan)
    return out, flagged & stencil.inside


def sample_run(
    run: RunDir, grid: GridInfo, gx: np.ndarray, gy: np.ndarray, *, method: str
) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Sample every variable of ``run`` at grid-CRS points; return ({name: values}, status).

    The grids are loaded one at a time, so memory holds one variable at once.
    """
    check_method(method)
    stencil = make_stencil(grid, gx, gy, method=method)
    ref = reference_name(run)
    columns: dict[str, np.ndarray] = {}
    status = np.full(stencil.inside.shape, STATUS_OK, dtype=object)
    for name in variable_names(run):
        values, flagged = apply_stencil(stencil, load_variable(run, name, grid))
        columns[name] = values
        if name == ref:
            status[flagged] = STATUS_NEXT_TO_NODATA
            status[~np.isfinite(values)] = STATUS_NODATA
    status[~stencil.inside] = STATUS_OUTSIDE
    return columns, status


def check_method(method: str) -> None:
    """Raise InputError unless ``method`` is a sampling method lidmelt knows."""
    if method not in METHODS:
        msg = (
            f"sampling method {method!r} is not known; expected one of {', '.join(METHODS)}. "
            "Use 'bilinear' (default) or 'nearest'."
        )
        raise InputError(msg)


# --------------------------------------------------------------------------------------------
# Cell areas
# --------------------------------------------------------------------------------------------


def _authalic_q(phi: np.ndarray, es: float) -> np.ndarray:
    """Snyder's q(phi), proportional to the ellipsoid area from the equator to latitude phi.

    q = (1 - e^2) [sin(phi) / (1 - e^2 sin^2(phi)) - 1/(2e) ln((1 - e sin(phi)) / (1 + e sin(phi)))]
    (Snyder 1987, *Map Projections: A Working Manual*, USGS PP 1395, eq. 3-12). The area of the
    zone between phi1 and phi2 over a longitude span dlambda (radians) is
    a^2 / 2 * dlambda * (q(phi2) - q(phi1)); on a sphere (e = 0) q = 2 sin(phi).
    """
    s = np.sin(phi)
    if es < 1e-15:
        return 2.0 * s
    e = math.sqrt(es)
    return (1.0 - es) * (s / (1.0 - es * s * s) - np.log((1.0 - e * s) / (1.0 + e * s)) / (2.0 * e))


def row_areas_km2(grid: GridInfo) -> np.ndarray:
    """Exact ellipsoidal area (km^2) of one cell in each row of a geographic grid.

    Uses the authalic-latitude zone formula of :func:`_authalic_q` on the grid CRS's ellipsoid
    (exact for cells bounded by meridians and parallels).
    """
    geod = grid.crs.get_geod()
    t = grid.transform
    rows = np.arange(grid.height + 1)
    lat_edges = np.clip(t.f + t.e * rows, -90.0, 90.0)
    q = _authalic_q(np.radians(lat_edges), float(geod.es))
    dlon = math.radians(abs(t.a))
    return 0.5 * geod.a**2 * dlon * np.abs(np.diff(q)) / 1e6


def cell_areas_km2(grid: GridInfo, flat_index: np.ndarray) -> np.ndarray:
    """Geodesic area (km^2) of the cells with the given flat indices (row * width + col).

    Geographic grids: the exact authalic-latitude formula (:func:`row_areas_km2`). Projected
    grids: the area on the CRS's ellipsoid of the geodesic polygon through the four cell corners
    (pyproj.Geod.polygon_area_perimeter), computed only for the cells asked for.
    """
    flat_index = np.asarray(flat_index, dtype=np.intp)
    rows, cols = np.divmod(flat_index, grid.width)
    if grid.is_geographic:
        return row_areas_km2(grid)[rows]
    t = grid.transform
    dc = np.array([0, 1, 1, 0])
    dr = np.array([0, 0, 1, 1])
    cx = t.c + t.a * (cols[:, None] + dc[None, :])
    cy = t.f + t.e * (rows[:, None] + dr[None, :])
    transformer = pyproj.Transformer.from_crs(grid.crs, grid.crs.geodetic_crs, always_xy=True)
    lon, lat = transformer.transform(cx.ravel(), cy.ravel())
    lon = np.asarray(lon).reshape(cx.shape)
    lat = np.asarray(lat).reshape(cy.shape)
    geod = grid.crs.get_geod()
    areas = np.empty(len(flat_index))
    for k in range(len(flat_index)):
        areas[k] = abs(geod.polygon_area_perimeter(lon[k], lat[k])[0])
    return areas / 1e6


# --------------------------------------------------------------------------------------------
# Reading points and vector files
# --------------------------------------------------------------------------------------------


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
    """The first column whose name looks like an identifier (id, name, station, site, label)."""
    lowered = {str(c).strip().lower(): c for c in frame.columns if c != "geometry"}
    for key in _ID_NAMES:
        if key in lowered:
            return lowered[key]
    return None


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
    for name in (lon_name, lat_name):
        numbers = pd.to_numeric(frame[name].str.strip(), errors="coerce")
        bad = np.flatnonzero(~np.isfinite(numbers.to_numpy(dtype=float)))
        if bad.size:
            shown = ", ".join(f"line {i + 2}: {frame[name].iloc[i]!r}" for i in bad[:10])
            msg = (
                f"{source}: column {name!r} has {bad.size} value(s) that are not numbers "
                f"({shown}); expected decimal coordinates. Fix or remove those rows."
            )
            raise InputError(msg)
        coords[name] = numbers.to_numpy(dtype=float)
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


# --------------------------------------------------------------------------------------------
# Writing
# --------------------------------------------------------------------------------------------


def check_output_path(path: str | os.PathLike[str], suffixes: Sequence[str], *, what: str) -> Path:
    """Validate an output path's suffix before any work is done; return it as a Path."""
    path = Path(path)
    if path.suffix.lower() not in suffixes:
        msg = (
            f"output file {str(path)!r} has the suffix {path.suffix or '(none)'!r}; the {what} "
            f"can be written as {' or '.join(suffixes)} (chosen by the suffix). Give a name "
            f"ending in {' or '.join(suffixes)}."
        )
        raise InputError(msg)
    if path.exists() and path.is_dir():
        msg = f"output path {str(path)!r} is a folder; give a file name such as {path / 'out'}."
        raise InputError(msg)
    return path


@contextlib.contextmanager
def atomic_paths(*paths: Path) -> Iterator[list[Path]]:
    """Yield temporary paths beside ``paths``; rename them onto ``paths`` when the block ends.

    If the block raises, the temporary files are removed and ``paths`` are left untouched.
    """
    for p in paths:
        p.parent.mkdir(parents=True, exist_ok=True)
    temps = [p.with_name(f".{p.stem}.partial-{os.getpid()}{p.suffix}") for p in paths]
    try:
        yield temps
        for temp, final in zip(temps, paths, strict=True):
            temp.replace(final)
    finally:
        for temp in temps:
            temp.unlink(missing_ok=True)


def table_with_coordinates(gdf: gpd.GeoDataFrame) -> pd.DataFrame:
    """The attribute table of ``gdf`` for a CSV: without the geometry column, and with
    ``longitude``/``latitude`` (WGS84 degrees) added when the table has no coordinate columns
    of its own."""
    frame = pd.DataFrame(gdf.drop(columns=gdf.geometry.name))
    if "lidmelt_coordinate_columns" in gdf.attrs or {"longitude", "latitude"} <= set(frame):
        return frame
    import shapely

    geoms = gdf.geometry.to_numpy()
    x, y = shapely.get_x(geoms), shapely.get_y(geoms)
    lon, lat = lonlat_from(pyproj.CRS.from_user_input(gdf.crs), x, y)
    frame.insert(0, "latitude", lat)
    frame.insert(0, "longitude", lon)
    return frame


def write_table(gdf: gpd.GeoDataFrame, path: Path, *, layer: str) -> None:
    """Write ``gdf`` as CSV or GeoPackage (by the suffix of ``path``), atomically."""
    with atomic_paths(path) as (temp,):
        if path.suffix.lower() == ".csv":
            table_with_coordinates(gdf).to_csv(temp, index=False)
        else:
            gdf.to_file(temp, driver="GPKG", layer=layer)


def warn_outside(frame: pd.DataFrame, status: np.ndarray, *, what: str, stacklevel: int) -> None:
    """Warn once, naming them, about points that fall outside the grid."""
    outside = np.flatnonzero(status == STATUS_OUTSIDE)
    if outside.size:
        warnings.warn(
            f"{outside.size} {what}(s) lie outside the grid and were given NaN with status "
            f"{STATUS_OUTSIDE!r}: {describe_rows(frame, outside)}",
            UserWarning,
            stacklevel=stacklevel + 1,
        )


def replace_columns(frame: pd.DataFrame, names: Sequence[str], *, source: str) -> pd.DataFrame:
    """Drop columns of ``frame`` that the product is about to write, with one warning."""
    clash = [n for n in names if n in frame.columns]
    if not clash:
        return frame
    warnings.warn(
        f"{source} already has column(s) {', '.join(clash)}; they are replaced by this run's "
        "values.",
        UserWarning,
        stacklevel=3,
    )
    return frame.drop(columns=clash)


def safe_layer_name(path: Path) -> str:
    """A GeoPackage layer name from a file stem (letters, digits and underscores)."""
    name = re.sub(r"\W+", "_", path.stem).strip("_")
    return name or "lidmelt"
