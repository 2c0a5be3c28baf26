"""Reading the ``[inputs]`` tables: grid files, constants and plumes.

The units and accepted ranges of the constants are those of the variable registry
(:mod:`lidmelt._variables`: ``valid_range`` and ``advice``), the same limits the engine applies to
the grid values.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from lidmelt import _variables as variables
from lidmelt._config import (
    INPUT_NAMES,
    MAX_PLUMES,
    PLUME_SHAPES,
    RESAMPLING_METHODS,
    Inputs,
    InputSpec,
    PlumeSpec,
)
from lidmelt._errors import LidmeltError, WorkflowError
from lidmelt.grids._anomaly import Plume
from lidmelt.grids._catalogue import read_plume_catalogue
from lidmelt.grids._io import detect_format
from lidmelt.grids._lidref import LID_REFERENCES
from lidmelt.grids._units import dlnvs_to_kelvin
from lidmelt.workflow._checks import (
    Context,
    choice,
    in_range,
    number,
    shown,
    string,
    table,
    user_path,
    wrong_type,
)

# Physical ranges of the plume fields: (low, high, unit, advice when outside); common practice.
_PLUME_RANGES: dict[str, tuple[float, float, str, str]] = {
    "longitude": (-360.0, 360.0, "degrees", "give degrees east, -180 to 180 or 0 to 360"),
    "latitude": (
        -90.0,
        90.0,
        "degrees",
        "give degrees north, -90 to 90; were longitude and latitude swapped?",
    ),
    "radius_km": (0.0, 20000.0, "km", "give the plume radius in km, not m"),
    "peak_excess_k": (
        -1000.0,
        1000.0,
        "K",
        "give the excess over ambient in K (plumes are typically 100-300 K, from memory)",
    ),
}


def read_inputs(ctx: Context, values: dict[str, Any], base_dir: Path) -> Inputs:
    """The ``[inputs]`` table; input paths are resolved against ``base_dir``."""
    specs: dict[str, InputSpec | None] = dict.fromkeys(INPUT_NAMES)
    for name in INPUT_NAMES:
        if name in values:
            sub = table(ctx, f"inputs.{name}", values[name])
            specs[name] = _read_input(ctx, name, sub, base_dir)
    if specs["plate_age"] is None and specs["lid_thickness"] is None:
        msg = (
            f"{ctx.where('inputs')} names neither 'plate_age' nor 'lid_thickness'; a run needs "
            "one of them to place the lid. Add [inputs.plate_age] with the path of a plate age "
            "grid (Ma), or [inputs.lid_thickness] with a lid thickness grid (km)."
        )
        raise WorkflowError(msg)
    for name in ("thermal_anomaly", "water"):
        if specs[name] is None:
            specs[name] = InputSpec(name=name, constant=0.0)
    return Inputs(**specs)  # type: ignore[arg-type]


def _read_input(ctx: Context, name: str, values: dict[str, Any], base_dir: Path) -> InputSpec:
    prefix = f"inputs.{name}"
    var = variables.input_for_workflow_key(name)
    unit = var.units
    path, written, variable = _read_source(ctx, prefix, values, base_dir)
    resampling = "bilinear"
    if "resampling" in values:
        resampling = choice(ctx, f"{prefix}.resampling", values["resampling"], RESAMPLING_METHODS)
    constant = 0.0 if name == "thermal_anomaly" else None
    if "constant" in values:
        low, high = var.valid_range or (-float("inf"), float("inf"))
        key = f"{prefix}.constant"
        constant = in_range(ctx, key, values["constant"], low, high, unit, f"expected {var.advice}")
        if path is not None and name != "thermal_anomaly":
            msg = (
                f"{ctx.where(prefix)} has both 'path' and 'constant'; expected one of them "
                f"(a grid, or one value in {unit}). Remove one."
            )
            raise WorkflowError(msg)
    plumes: tuple[PlumeSpec, ...] = ()
    if "plumes" in values:
        plumes = _read_plumes(ctx, f"{prefix}.plumes", values["plumes"])
    extra = read_input_options(ctx, prefix, values, base_dir, has_path=path is not None)
    inline = len(plumes)
    if "plumes_file" in extra:
        plumes = plumes + _read_plumes_file(ctx, f"{prefix}.plumes_file", extra, base_dir, inline)
    _check_plume_names(ctx, prefix, plumes, inline)
    if path is None and constant is None:
        msg = (
            f"{ctx.where(prefix)} gives neither 'path' nor 'constant'; expected a grid file "
            f'(path = "grid.tif", values in {unit}) or one value (constant = ..., in {unit}).'
        )
        raise WorkflowError(msg)
    return InputSpec(
        name=name,
        path=path,
        path_as_written=written,
        variable=variable,
        resampling=resampling,
        constant=constant,
        plumes=plumes,
        **extra,
    )


def _read_source(
    ctx: Context, prefix: str, values: dict[str, Any], base_dir: Path
) -> tuple[Path | None, str | None, str | None]:
    """The grid file of an input: (absolute path, path as written, NetCDF variable)."""
    path = written = variable = None
    if "path" in values:
        written = string(ctx, f"{prefix}.path", values["path"], example="grids/my_grid.tif")
        path = user_path(written, base=base_dir, what=ctx.where(prefix + ".path"))
        if not path.is_file():
            state = "is a folder, not a file" if path.is_dir() else "does not exist"
            msg = (
                f"input file for {ctx.where(prefix + '.path')} {state}: written {written!r}, "
                f"resolved to '{path}'. Input paths are relative to the workflow file's folder "
                f"({base_dir}); fix the path or give an absolute one."
            )
            raise WorkflowError(msg)
    if "variable" in values:
        variable = string(ctx, f"{prefix}.variable", values["variable"], example="age")
        if path is None:
            msg = (
                f"{ctx.where(prefix + '.variable')} is set but {prefix}.path is not; the "
                "variable names a NetCDF variable of the grid file. Add the path or remove it."
            )
            raise WorkflowError(msg)
        if detect_format(path, name=prefix) == "gdal":
            msg = (
                f"{ctx.where(prefix + '.variable')} is {variable!r} but the file {written!r} is "
                "a GeoTIFF or another single-grid raster format, which has no variables; remove "
                "'variable' (it is for NetCDF files only, and text grids with a header line)."
            )
            raise WorkflowError(msg)
    return path, written, variable


def _too_many_plumes(ctx: Context, key: str, count: int) -> WorkflowError:
    return WorkflowError(
        f"{ctx.where(key)} gives {count:,} plumes; a workflow has at most {MAX_PLUMES:,} (inline "
        "and catalogue rows together; each is checked before the run, and each costs the grid "
        "cells within its reach). Keep the plumes that reach the grid, or merge nearby ones."
    )


def _check_plume_names(
    ctx: Context, prefix: str, plumes: tuple[PlumeSpec, ...], inline: int
) -> None:
    """Refuse two plumes of one name (a plume without one is ``plume N``, N its place from 1
    over the ``inline`` [[plumes]] then the catalogue's rows, as the products call it):
    candidates and ensemble drivers are matched to plumes by name."""
    seen: dict[str, str] = {}
    for i, plume in enumerate(plumes, start=1):
        name = plume.name or f"plume {i}"
        where = f"{prefix}.plumes.{i}" if i <= inline else f"{prefix}.plumes_file.{i - inline}"
        if name in seen:
            msg = (
                f"{ctx.where(where)} is called {shown(name)}, as {seen[name]} is (a plume "
                "without a name is 'plume N', N its place from 1 over [[plumes]] then the rows "
                "of plumes_file); candidates are matched to plumes by name, so give each plume "
                "its own name."
            )
            raise WorkflowError(msg)
        seen[name] = where


def _read_plumes(ctx: Context, key: str, value: Any) -> tuple[PlumeSpec, ...]:
    if not isinstance(value, list):
        raise wrong_type(
            ctx, key, value, "an array of tables", f"[[{key}]] above each plume's keys"
        )
    if len(value) > MAX_PLUMES:
        raise _too_many_plumes(ctx, key, len(value))
    return tuple(_read_plume(ctx, key, i, item) for i, item in enumerate(value, start=1))


def _read_plume(ctx: Context, key: str, i: int, item: Any) -> PlumeSpec:
    pkey = f"{key}.{i}"
    if not isinstance(item, dict):
        raise wrong_type(ctx, pkey, item, "a table of plume fields", f"[[{key}]]")
    for required in _PLUME_RANGES:
        if required not in item:
            msg = (
                f"{ctx.where(pkey)} (plume {i}) lacks '{required}'; every plume needs "
                "longitude and latitude (degrees), radius_km (km) and peak_excess_k (K)."
            )
            raise WorkflowError(msg)
    fields = {
        name: in_range(ctx, f"{pkey}.{name}", item[name], *bounds)
        for name, bounds in _PLUME_RANGES.items()
    }
    if not fields["radius_km"] > 0:
        msg = (
            f"{ctx.where(pkey + '.radius_km')} is {fields['radius_km']:g} km; expected a "
            "radius > 0 km (plume heads are typically a few hundred km across)."
        )
        raise WorkflowError(msg)
    if "shape" in item:
        fields["shape"] = choice(ctx, f"{pkey}.shape", item["shape"], PLUME_SHAPES)
    if "name" in item:
        fields["name"] = string(ctx, f"{pkey}.name", item["name"], example="plume A")
        if len(fields["name"]) > 200:
            where, name = ctx.where(pkey + ".name"), shown(fields["name"])
            msg = f"{where} is {name}; expected a name of at most 200 characters."
            raise WorkflowError(msg)
    if "peak_upwelling_mm_yr" in item:
        var = variables.input_for_workflow_key("upwelling")
        low, high = var.valid_range or (0.0, float("inf"))
        fields["peak_upwelling_mm_yr"] = in_range(
            ctx,
            f"{pkey}.peak_upwelling_mm_yr",
            item["peak_upwelling_mm_yr"],
            low,
            high,
            var.units,
            f"expected {var.advice}",
        )
    spec = PlumeSpec(**fields)
    try:
        Plume(**spec.plume_fields())  # the anomaly builder's own checks
    except LidmeltError as exc:
        msg = f"{ctx.where(pkey)} (plume {i}) is not valid: {exc}"
        raise WorkflowError(msg) from exc
    return spec


# Keys of issue 13: how to read a grid file, the lid reference and plume catalogues.
_TEXT_KEYS = {"crs": "EPSG:4326", "x_name": "lon", "y_name": "lat", "units": "m"}
_NUMBER_KEYS = {
    "scale": "the file's units",
    "offset": "the file's units",
    "nodata": "the file's units",
    "dlnvs_dt_per_k": "1/K",
}


def read_input_options(
    ctx: Context, prefix: str, values: dict[str, Any], base_dir: Path, *, has_path: bool
) -> dict[str, Any]:
    """The per-input keys of ``[inputs.<name>]`` beyond path/variable/resampling/constant, as
    :class:`~lidmelt._config.InputSpec` fields (only those given)."""
    out: dict[str, Any] = {}
    for key, example in _TEXT_KEYS.items():
        if key in values:
            field = "file_units" if key == "units" else key
            out[field] = string(ctx, f"{prefix}.{key}", values[key], example=example)
    for key, unit in _NUMBER_KEYS.items():
        if key in values:
            out[key] = number(ctx, f"{prefix}.{key}", values[key], unit=unit)
    grid_keys = sorted(k for k in (*_TEXT_KEYS, *_NUMBER_KEYS) if k in values)
    if grid_keys and not has_path:
        msg = (
            f"{ctx.where(prefix)} sets {', '.join(grid_keys)} but no path; these keys say how "
            "to read a grid file. Add the path, or remove them."
        )
        raise WorkflowError(msg)
    if "dlnvs_dt_per_k" in out:
        try:
            dlnvs_to_kelvin(out["dlnvs_dt_per_k"])
        except LidmeltError as exc:
            msg = f"{ctx.where(prefix + '.dlnvs_dt_per_k')} is not valid: {exc}"
            raise WorkflowError(msg) from exc
    if "reference" in values:
        out["reference"] = choice(ctx, f"{prefix}.reference", values["reference"], LID_REFERENCES)
    if "bathymetry" in values:
        spec = {"path": values["bathymetry"]}
        out["bathymetry"] = _read_source(ctx, f"{prefix}.bathymetry", spec, base_dir)[0]
    if "plumes_file" in values:
        out["plumes_file"] = string(
            ctx, f"{prefix}.plumes_file", values["plumes_file"], example="hotspots.csv"
        )
    return out


def _read_plumes_file(
    ctx: Context, key: str, extra: dict[str, Any], base_dir: Path, inline: int
) -> tuple[PlumeSpec, ...]:
    """The rows of a plume catalogue, checked like inline plumes (``inline`` of them before)."""
    written = extra["plumes_file"]
    path = user_path(written, base=base_dir, what=ctx.where(key))
    try:
        rows = read_plume_catalogue(path, key=f"{ctx.source}: {key}", max_rows=MAX_PLUMES - inline)
    except LidmeltError as exc:
        msg = f"{ctx.where(key)} = {shown(written)}: {exc}"
        raise WorkflowError(msg) from exc
    return tuple(_read_plume(ctx, key, i, row) for i, row in enumerate(rows, start=1))
