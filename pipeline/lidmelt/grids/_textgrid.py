"""The text-grid reader of :func:`lidmelt.grids._io.open_grid`: ``x y value`` points on a grid.

A text grid is one point per line, three or more numeric columns separated by spaces, tabs,
commas, semicolons or ``|`` (any mix). Lines starting with ``#`` or ``>`` (GMT segment headers)
and blank lines are skipped. The first line may name the columns; then the x and y columns are
found by ``x_name``/``y_name`` or by the usual longitude/latitude names, and the value column by
``variable`` or as the one column left. Without a header the columns are x, y, value (the
order GMT's xyz tables use). Lines may come in any order; grid nodes with no line are nodata.

The points must lie on a regular lattice: every x is ``x0 + i dx`` and every y ``y0 + j dy``
(``dx``, ``dy`` the median steps between distinct values) within 1 % of a step (the tolerance
the NetCDF reader allows; common practice), with no node given twice. Coordinates are cell centres.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr
from pyproj import CRS

from lidmelt._errors import GridError, InputError
from lidmelt.grids._grid import finalise_grid
from lidmelt.grids._netcdf import given_crs

#: File suffixes read as text grids.
TEXT_GRID_SUFFIXES = (".xyz", ".txt", ".csv", ".dat", ".tsv")

_SPLIT = re.compile(r"[\s,;|]+")
_LON = ("lon", "long", "longitude", "lon_deg", "longitude_deg")
_LAT = ("lat", "latitude", "lat_deg", "latitude_deg")
_TOL = 0.01
#: The largest lattice a text grid may span (nodes): it is read whole, 16 bytes a node (the
#: float64 grid and the index count), so 1.6 GB; a bigger grid belongs in a GeoTIFF or NetCDF
#: file, which lidmelt reads window by window.
MAX_TEXT_GRID_NODES = 100_000_000
#: The largest text grid file read (bytes): its lines are split in memory, several times the
#: file's size.
MAX_TEXT_GRID_BYTES = 1_000_000_000
_CONVERT = (
    "Convert it to a GeoTIFF or NetCDF grid (e.g. GMT's xyz2grd or GDAL's gdal_translate), "
    "which lidmelt reads window by window."
)


def open_text_grid(
    path: Path,
    *,
    variable: str | None,
    name: str,
    chunks: Any,
    crs: str | None = None,
    x_name: str | None = None,
    y_name: str | None = None,
) -> tuple[xr.DataArray, str | None, str]:
    """A text grid as a north-up ``(y, x)`` grid; (grid, units (always None), long_name).

    Raises
    ------
    InputError
        If the file cannot be read or holds text where numbers are expected.
    GridError
        If the columns cannot be found, there is no CRS (columns not named longitude/latitude
        and no ``crs``), or the points are not on a regular grid.
    """
    header, table = _read_table(path, name=name)
    source = f"text grid {str(path)!r} for {name!r}"
    ix, iy, iv = _columns(header, table.shape[1], variable, x_name, y_name, source=source)
    stated = None
    if header is not None and header[ix].lower() in _LON and header[iy].lower() in _LAT:
        stated = CRS.from_epsg(4326)
    found = given_crs(crs, stated, source=source)
    if found is None:
        msg = (
            f"{source} has no CRS: its x/y columns are not named longitude/latitude. Give "
            'the CRS of its coordinates with the input key crs (e.g. crs = "EPSG:4326"), or '
            "name the columns lon and lat in a header line."
        )
        raise GridError(msg)
    xs, ys, values = table[:, ix], table[:, iy], table[:, iv]
    x0, dx, col = regular_lattice(xs, axis="x", source=source)
    y0, dy, row = regular_lattice(ys, axis="y", source=source)
    nx, ny = int(col.max()) + 1, int(row.max()) + 1
    if nx * ny > MAX_TEXT_GRID_NODES:
        msg = (
            f"{source}: its {len(xs):,} points span a lattice of {nx:,} x {ny:,} = "
            f"{nx * ny:.3g} nodes (x {x0:.6g} to {x0 + (nx - 1) * dx:.6g} by {dx:.6g}, y "
            f"{y0:.6g} to {y0 + (ny - 1) * dy:.6g} by {dy:.6g}: the median steps), more than "
            f"the {MAX_TEXT_GRID_NODES:,} a text grid may have. Check for a stray coordinate or "
            f"a point set that is not a grid. {_CONVERT}"
        )
        raise GridError(msg)
    flat = (ny - 1 - row) * nx + col  # north up
    counts = np.bincount(flat)
    if counts.max() > 1:
        first, second = np.flatnonzero(flat == int(np.argmax(counts > 1)))[:2]
        msg = (
            f"{source} gives the node x={float(xs[first])!r}, y={float(ys[first])!r} twice "
            f"(data lines {first + 1} and {second + 1}); expected each grid node once. Remove "
            "the duplicates."
        )
        raise GridError(msg)
    grid = np.full(ny * nx, np.nan)
    grid[flat] = values
    da = xr.DataArray(
        grid.reshape(ny, nx),
        dims=("y", "x"),
        coords={"y": y0 + dy * np.arange(ny)[::-1], "x": x0 + dx * np.arange(nx)},
    )
    da = finalise_grid(da, found)
    if chunks is not None:
        da = da.chunk(chunks if isinstance(chunks, dict) else {"y": chunks, "x": chunks})
    long_name = header[iv] if header is not None else name
    return da, None, long_name


def regular_lattice(values: np.ndarray, *, axis: str, source: str) -> tuple[float, float, Any]:
    """(origin, step, integer index of each value) of coordinates on a regular lattice.

    Raises
    ------
    GridError
        If there is one distinct coordinate only, or a value lies off the lattice by more than
        1 % of a step.
    """
    distinct = np.unique(values)
    if distinct.size < 2:
        msg = (
            f"{source} has a single {axis} value ({distinct[0]!r}); expected a grid at least "
            "two nodes wide in x and in y."
        )
        raise GridError(msg)
    step = float(np.median(np.diff(distinct)))
    index = np.rint((values - distinct[0]) / step)
    off = np.abs(values - distinct[0] - index * step)
    if off.max() > _TOL * step:
        bad = int(np.argmax(off))
        msg = (
            f"{source}: the points are not on a regular grid: {axis} = {float(values[bad])!r} "
            f"(data line {bad + 1}) is {off[bad]:.6g} away from the nearest node of the lattice "
            f"{float(distinct[0])!r} + k * {step:.6g} (the median step). Resample "
            "the points onto a regular grid first (e.g. GMT's blockmean and surface, or "
            "scipy.interpolate.griddata), or remove the stray lines."
        )
        raise GridError(msg)
    return float(distinct[0]), step, index.astype(np.int64)


def _read_table(path: Path, *, name: str) -> tuple[list[str] | None, np.ndarray]:
    """(header names or None, float table) of a text grid."""
    try:
        size = path.stat().st_size
        if size > MAX_TEXT_GRID_BYTES:
            msg = (
                f"text grid {str(path)!r} for {name!r} has {size:,} bytes, more than the "
                f"{MAX_TEXT_GRID_BYTES:,} a text grid may have (it is read whole, several "
                f"times its size in memory). {_CONVERT}"
            )
            raise InputError(msg)
        lines = path.read_text(encoding="utf-8-sig").splitlines()
    except (OSError, UnicodeDecodeError) as exc:
        msg = f"cannot read text grid {str(path)!r} for {name!r} ({exc}). Save it as UTF-8 text."
        raise InputError(msg) from exc
    rows = [
        _SPLIT.split(line.strip())
        for line in lines
        if line.strip() and not line.lstrip().startswith(("#", ">"))
    ]
    header = None
    if rows and not _numeric(rows[0][0]):
        header, rows = [c.strip() for c in rows[0]], rows[1:]
    width = len(header) if header else (len(rows[0]) if rows else 0)
    if not rows or width < 3:
        msg = (
            f"text grid {str(path)!r} for {name!r} has {len(rows)} data lines of {width} "
            "columns; expected lines of at least three numbers (x y value)."
        )
        raise InputError(msg)
    bad = next((i for i, r in enumerate(rows) if len(r) != width), None)
    try:
        if bad is not None:
            problem = f"{len(rows[bad])} columns instead of {width}"
            raise ValueError(problem)
        table = np.array(rows, dtype=float)
    except ValueError as exc:
        msg = (
            f"text grid {str(path)!r} for {name!r} has a line that is not {width} numbers "
            f"({exc}). Fix or remove it (comment lines start with '#')."
        )
        raise InputError(msg) from exc
    return header, table


def _numeric(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _columns(
    header: list[str] | None,
    width: int,
    variable: str | None,
    x_name: str | None,
    y_name: str | None,
    *,
    source: str,
) -> tuple[int, int, int]:
    """Indices of the x, y and value columns."""
    if header is None:
        if variable or x_name or y_name:
            msg = (
                f"{source} has no header line, so variable/x_name/y_name cannot name its "
                "columns. Add a header line (e.g. 'lon lat age') or remove those keys "
                "(without a header the columns are x, y, value)."
            )
            raise GridError(msg)
        return 0, 1, 2
    lowered = [h.lower() for h in header]

    def find(given: str | None, names: tuple[str, ...], key: str) -> int:
        wanted = (given.lower(),) if given else names
        hit = next((lowered.index(n) for n in wanted if n in lowered), None)
        if hit is None:
            msg = (
                f"{source} has no {key.replace('_name', '')} column "
                f"{'named ' + repr(given) if given else 'among ' + '/'.join(names)}; its "
                f"columns are {', '.join(header)}. Name it with the input key {key}."
            )
            raise GridError(msg)
        return hit

    ix = find(x_name, (*_LON, "x"), "x_name")
    iy = find(y_name, (*_LAT, "y"), "y_name")
    if variable is not None:
        return ix, iy, find(variable, (), "variable")
    rest = [i for i in range(width) if i not in (ix, iy)]
    if len(rest) != 1:
        msg = (
            f"{source} has {len(rest)} value columns ({', '.join(header[i] for i in rest)}); "
            'expected one. Choose one with the input key variable (e.g. variable = "age").'
        )
        raise GridError(msg)
    return ix, iy, rest[0]
