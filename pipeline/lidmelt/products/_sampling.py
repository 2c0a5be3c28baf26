"""Sampling a finished run at points, and what the point and region products share.

A run's grid (:func:`run_grid`), its variables (:func:`load_variable`), the sampling stencil of a
set of points (:func:`make_stencil`, :func:`apply_stencil`, :func:`sample_run`,
:func:`sample_points`) with the status of every point, and the checks and writers of the
product tables. :mod:`lidmelt.products._sites`, :mod:`~lidmelt.products._profiles` and
:mod:`~lidmelt.products._regions` build on it; points and polygons are read by
:mod:`lidmelt.grids._vector`, cell areas come from :mod:`lidmelt.grids._area`.

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
definition at some data cells (``onset_depth_km`` and ``mean_melt_pressure_gpa`` where the
column does not melt) follow the same per-variable rule. The
variables that are not defined without melt (:attr:`lidmelt._variables.Variable.
undefined_without_melt`: onset depth and pressure, mean melt pressure) are NaN at every point
whose sampled ``melt_thickness_km`` is 0, also in a run whose files hold a value there; tables
shown to people say "no melting" there (:func:`shown_without_melt`).

A categorical variable with classes in the registry (``melting_regime``) is followed by
``<name>_class``, the meaning of the class (the registry's label; "" where there is none).

Validity flag
-------------
Where the run has its validity flag grid (``validity_flag.tif``, uint8 bit flags, nodata 255),
every point also gets ``validity_flag`` (integer) and ``flag_meaning`` (the meanings of the bits
set, joined with "; "; "" for 0, "no data" for 255). A point takes the bits of every cell that
carries a non-zero weight in its bilinear value (their bitwise OR), or those of its containing
cell where it takes that cell's value (``nearest``, ``next_to_nodata``, ``nodata``); a point
outside the grid gets 255. The status column keeps its meaning (data coverage): a station at an
onset beyond the model's calibrated pressure range has status ``ok`` and the flag bit 4.
"""

from __future__ import annotations

import os
import re
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
import pyproj

from lidmelt._errors import InputError, RunDirError
from lidmelt._files import atomic_path
from lidmelt._variables import FLAG_NODATA, FLAG_VARIABLE, VARIABLES
from lidmelt.grids._features import nearest_cells
from lidmelt.grids._grid import Grid, lonlat_from
from lidmelt.grids._rundir import RunDir, open_run, read_flags
from lidmelt.grids._vector import describe_rows

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

#: Columns of the validity flag (integer bit flags) and of its meaning (text) per point.
FLAG_COLUMN = FLAG_VARIABLE.name
FLAG_MEANING_COLUMN = "flag_meaning"

#: Keys of the ``grid`` entry of ``summary.json`` that :func:`run_grid` needs.
_GRID_KEYS = ("crs_wkt", "transform", "width", "height")


# --------------------------------------------------------------------------------------------
# Run and grid geometry
# --------------------------------------------------------------------------------------------


def as_run(run: RunDir | str | os.PathLike[str]) -> RunDir:
    """Return ``run`` as a :class:`RunDir` (open it when it is a path)."""
    if isinstance(run, RunDir):
        return run
    return open_run(run)


def run_grid(run: RunDir) -> Grid:
    """The grid of a run, from its ``summary.json``.

    Raises
    ------
    RunDirError
        If the summary lacks the grid keys.
    GridError
        If the grid is rotated, south-up or otherwise not a valid :class:`Grid`.
    """
    grid = run.summary.get("grid") or {}
    try:
        values = {key: grid[key] for key in _GRID_KEYS}
        transform = tuple(float(v) for v in values["transform"])[:6]
        width, height = int(values["width"]), int(values["height"])
        pyproj.CRS.from_user_input(values["crs_wkt"])
    except (KeyError, TypeError, ValueError, pyproj.exceptions.CRSError) as exc:
        msg = (
            f"the summary.json of {str(run.path)!r} has no usable 'grid' entry ({exc!r}); expected "
            "'crs_wkt', 'transform' (6 numbers), 'width' and 'height'. The run directory is "
            "damaged or from another program: run 'lidmelt run' again."
        )
        raise RunDirError(msg) from exc
    return Grid(values["crs_wkt"], transform, width, height)


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


def load_variable(run: RunDir, name: str, grid: Grid) -> np.ndarray:
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


def describe_flags(flags: Any, meanings: dict[int, str]) -> np.ndarray:
    """Text of each flag value: the meanings of its bits joined with "; " ("" for 0, "no data"
    for the nodata value 255, "bit N" for a bit without a meaning)."""
    flags = np.asarray(flags, dtype=np.int64)
    values, inverse = np.unique(flags, return_inverse=True)
    texts = []
    for value in values.tolist():
        if value == FLAG_NODATA:
            texts.append("no data")
            continue
        bits = [1 << k for k in range(8) if value & (1 << k)]
        texts.append("; ".join(meanings.get(bit, f"bit {bit}") for bit in bits))
    return np.array(texts, dtype=object)[inverse.reshape(flags.shape)]


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


def make_stencil(grid: Grid, gx: np.ndarray, gy: np.ndarray, *, method: str) -> Stencil:
    """Compute the sampling stencil of grid-CRS points ``(gx, gy)`` (the containing cell by
    :func:`lidmelt.grids._features.nearest_cells`)."""
    h, w = grid.height, grid.width
    inside, nearest = nearest_cells(grid, gx, gy)
    if method == "nearest":
        return Stencil(inside=inside, nearest=nearest, corners=(), weights=())

    row, col = grid.fractional_index(gx, gy)
    finite = np.isfinite(row) & np.isfinite(col)
    row = np.where(finite, row, 0.0)
    col = np.where(finite, col, 0.0)
    if grid.is_periodic:
        col = np.mod(col + 0.5, w) - 0.5
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


def apply_flag_stencil(stencil: Stencil, flags: np.ndarray, fallback: np.ndarray) -> np.ndarray:
    """Flag of each point (int64): the bitwise OR of the flags of the cells with a non-zero
    bilinear weight, or the containing cell's flag where ``fallback`` (the point took that
    cell's value) or for ``nearest``; 255 outside the grid."""
    flat = flags.ravel()
    out = flat[stencil.nearest].astype(np.int64)
    if stencil.corners:
        merged = np.zeros(out.shape, dtype=np.int64)
        for index, weight in zip(stencil.corners, stencil.weights, strict=True):
            corner = flat[index].astype(np.int64)
            merged |= np.where((weight > 0) & (corner != FLAG_NODATA), corner, 0)
        out = np.where(fallback | (out == FLAG_NODATA), out, merged)
    return np.where(stencil.inside, out, FLAG_NODATA)


def sample_run(
    run: RunDir, grid: Grid, gx: np.ndarray, gy: np.ndarray, *, method: str
) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Sample every variable of ``run`` at grid-CRS points; return ({name: values}, status).

    Where the run has a validity flag grid, the columns end with ``validity_flag`` (int64) and
    ``flag_meaning`` (text), see the module notes. The grids are loaded one at a time, so
    memory holds one variable at once.
    """
    check_method(method)
    stencil = make_stencil(grid, gx, gy, method=method)
    classes = make_stencil(grid, gx, gy, method="nearest")  # for categorical variables
    ref = reference_name(run)
    columns: dict[str, np.ndarray] = {}
    status = np.full(stencil.inside.shape, STATUS_OK, dtype=object)
    fallback = np.ones(stencil.inside.shape, dtype=bool)
    for name in variable_names(run):
        grid_values = load_variable(run, name, grid)
        categorical = name in VARIABLES and VARIABLES[name].categorical
        values, flagged = apply_stencil(classes if categorical else stencil, grid_values)
        values = zero_float_noise(values, grid_values)
        columns[name] = values
        if categorical and VARIABLES[name].classes:  # the class meanings, from the registry
            labels = {float(c.value): c.label for c in VARIABLES[name].classes}
            columns[f"{name}_class"] = np.array([labels.get(float(v), "") for v in values], object)
        if name == ref:
            status[flagged] = STATUS_NEXT_TO_NODATA
            status[~np.isfinite(values)] = STATUS_NODATA
            fallback = flagged | ~np.isfinite(values)
    status[~stencil.inside] = STATUS_OUTSIDE
    if ref in columns:
        blank_without_melt(columns, columns[ref])
    flags = read_flags(run)
    if flags is not None:
        columns[FLAG_COLUMN] = apply_flag_stencil(stencil, flags.values, fallback)
        columns[FLAG_MEANING_COLUMN] = describe_flags(columns[FLAG_COLUMN], flags.meanings)
    return columns, status


def undefined_without_melt(names: Sequence[str]) -> list[str]:
    """The names among ``names`` of variables not defined where nothing melts (registry)."""
    return [n for n in names if n in VARIABLES and VARIABLES[n].undefined_without_melt]


def blank_without_melt(columns: dict[str, np.ndarray], melt: np.ndarray) -> None:
    """Set the variables not defined without melt to NaN where ``melt`` is 0 (in place)."""
    none = np.asarray(melt, dtype=float) == 0.0
    for name in undefined_without_melt(list(columns)):
        columns[name] = np.where(none, np.nan, columns[name])


#: Text shown for a variable that is not defined because the column does not melt.
NO_MELTING = "no melting"


def shown_without_melt(frame: pd.DataFrame) -> pd.DataFrame:
    """``frame`` for people: "no melting" in the cells of the variables not defined without
    melt where ``melt_thickness_km`` is 0 (a file keeps NaN there)."""
    if REFERENCE_VARIABLE not in frame.columns:
        return frame
    none = np.asarray(frame[REFERENCE_VARIABLE], dtype=float) == 0.0
    names = undefined_without_melt(list(frame.columns))
    if not names or not none.any():
        return frame
    out = frame.copy()
    for name in names:
        column = out[name].astype(object)
        column[none] = NO_MELTING
        out[name] = column
    return out


#: Sampled values smaller than this fraction of the variable's largest magnitude are 0.
NOISE_FRACTION = 1e-9


def zero_float_noise(values: np.ndarray, grid_values: np.ndarray) -> np.ndarray:
    """``values`` with 0 where they are zero within float noise.

    A bilinear weighted sum of cells that are 0 and cells holding float residue (e.g. a
    thermal anomaly of 1e-14 K where a plume's Gaussian tail vanishes) gives 1.7e-14 where 0
    is meant; values smaller than :data:`NOISE_FRACTION` times the largest magnitude of the
    variable's grid are set to 0 (float32 grids resolve 1.2e-7 of a value, IEEE 754, so no
    meaningful digit is lost).
    """
    finite = np.abs(grid_values[np.isfinite(grid_values)])
    if not finite.size or not np.issubdtype(np.asarray(values).dtype, np.floating):
        return values
    tiny = np.abs(values) <= NOISE_FRACTION * float(finite.max())
    return np.where(tiny & np.isfinite(values), 0.0, values)


def sample_points(
    run: RunDir, x: Any, y: Any, crs: Any, *, method: str
) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Sample every variable of ``run`` at points ``(x, y)`` given in ``crs``; return
    ({name: values}, status), as :func:`sample_run` does."""
    grid = run_grid(run)
    gx, gy = grid.to_grid_xy(x, y, crs)
    return sample_run(run, grid, gx, gy, method=method)


def in_grid_convention(run: RunDir, lon: Any) -> np.ndarray:
    """Longitudes (degrees) in the run grid's own convention: 0..360 on a grid that uses it,
    -180..180 on one that does; unchanged on a projected grid. Only whole turns are added, so
    a longitude already in the convention is returned exactly as given."""
    lon = np.asarray(lon, dtype=float)
    turns = np.round((lon - run_grid(run).wrap_x(lon)) / 360.0)
    return lon - 360.0 * turns


def check_method(method: str) -> None:
    """Raise InputError unless ``method`` is a sampling method lidmelt knows."""
    if method not in METHODS:
        msg = (
            f"sampling method {method!r} is not known; expected one of {', '.join(METHODS)}. "
            "Use 'bilinear' (default) or 'nearest'."
        )
        raise InputError(msg)


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


def check_not_input(output: str | os.PathLike[str], *inputs: Any, what: str) -> None:
    """Refuse an output file that is one of the command's inputs (resolved paths compared).

    ``inputs`` may hold paths, run directories (any file inside one is refused too) or
    objects that are not paths (ignored).

    Raises
    ------
    InputError
        Naming the output and the input it would overwrite.
    """
    out = Path(output).resolve()
    for item in inputs:
        if not isinstance(item, str | os.PathLike):
            continue
        src = Path(item).resolve()
        if out == src or (src.is_dir() and src in out.parents and out.suffix.lower() == ".tif"):
            msg = (
                f"the {what} output {str(output)!r} is the input {str(item)!r} of the same "
                "command; writing it would overwrite the input. Give another output name "
                "with -o (e.g. track_profile.csv)."
            )
            raise InputError(msg)


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
    with atomic_path(path) as temp:
        if path.suffix.lower() == ".csv":
            table_with_coordinates(gdf).to_csv(temp, index=False)
        else:
            gdf.to_file(temp, driver="GPKG", layer=layer)


def swapped_hint(run: RunDir, x: Any, y: Any, crs: Any, status: np.ndarray) -> str:
    """A hint when every point lies outside the grid but some would lie inside with their
    two coordinates exchanged (latitude given as longitude); '' otherwise."""
    crs = pyproj.CRS.from_user_input(crs)
    if not crs.is_geographic or not len(status) or not (status == STATUS_OUTSIDE).all():
        return ""
    grid = run_grid(run)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # latitudes beyond 90 degrees give NaN, as intended
        gx, gy = grid.to_grid_xy(y, x, crs)
    inside = make_stencil(grid, gx, gy, method="nearest").inside
    if not inside.any():
        return ""
    return (
        f" All of them lie outside, but {int(inside.sum())} of {inside.size} would lie inside "
        "with longitude and latitude swapped: the file's longitude and latitude columns look "
        "exchanged. Name them with --lon-column and --lat-column (Python: lon_column=, "
        "lat_column=)."
    )


def warn_outside(
    frame: pd.DataFrame, status: np.ndarray, *, what: str, stacklevel: int, hint: str = ""
) -> None:
    """Warn once, naming them, about points that fall outside the grid (``hint`` added)."""
    outside = np.flatnonzero(status == STATUS_OUTSIDE)
    if outside.size:
        warnings.warn(
            f"{outside.size} {what}(s) lie outside the grid and were given NaN with status "
            f"{STATUS_OUTSIDE!r}: {describe_rows(frame, outside)}.{hint}",
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
