"""Reading the tables of a workflow (``[run]``, ``[grid]``, ``[model]``, ...) into a RunConfig."""

from __future__ import annotations

import math
import re
from functools import partial
from pathlib import Path
from typing import Any

from lidmelt import _variables as variables
from lidmelt._config import (
    AMBIENT_TP_RANGE_C,
    CRUST_DENSITY_RANGE_KG_M3,
    LID_ISOTHERM_RANGE_C,
    METHODS,
    MIN_CHUNK_SIZE,
    OUTPUT_VARIABLES,
    TOP_OF_MELTING_RULES,
    ComputeOptions,
    GridSpec,
    Inputs,
    LithosphereOptions,
    ModelOptions,
    OutputOptions,
    Parameters,
    RunConfig,
    RunOptions,
)
from lidmelt._errors import ClusterError, LidmeltError, WorkflowError
from lidmelt.workflow._checks import (
    Context,
    Reader,
    at_least,
    boolean,
    choice,
    in_range,
    number,
    read_fields,
    shortened,
    shown,
    string,
    table,
    user_path,
    wrong_type,
)
from lidmelt.workflow._inputs import read_inputs
from lidmelt.workflow._schema import SCHEMA, check_unknown_keys


def read_config(
    ctx: Context,
    tree: dict[str, Any],
    *,
    workflow_path: Path,
    text: str,
    overrides: tuple[str, ...],
    output_dir: str | Path | None,
) -> RunConfig:
    """Check the whole (overridden) TOML tree and build the RunConfig."""
    check_unknown_keys(ctx, tree)
    tables = {name: table(ctx, name, tree.get(name, {})) for name in SCHEMA[""]}
    inputs = read_inputs(ctx, tables["inputs"], workflow_path.parent)
    return RunConfig(
        workflow_path=workflow_path,
        text=text,
        overrides=overrides,
        run=_read_run(ctx, tables["run"], workflow_path, output_dir),
        grid=_read_grid(ctx, tables["grid"], inputs),
        inputs=inputs,
        model=ModelOptions(**read_fields(ctx, "model", tables["model"], _MODEL_READERS)),
        lithosphere=LithosphereOptions(
            **read_fields(ctx, "lithosphere", tables["lithosphere"], _LITHOSPHERE_READERS)
        ),
        compute=ComputeOptions(**read_fields(ctx, "compute", tables["compute"], _COMPUTE_READERS)),
        outputs=_read_outputs(ctx, tables["outputs"], inputs),
    )


# ---------------------------------------------------------------------------------------------
# [run]


def _read_run(
    ctx: Context, run: dict[str, Any], workflow_path: Path, output_dir: str | Path | None
) -> RunOptions:
    name = workflow_path.stem
    if "name" in run:
        name = string(ctx, "run.name", run["name"], example="my_basin")
    if not re.fullmatch(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,199}", name):
        msg = (
            f"{ctx.where('run.name')} is {shown(name)}; expected a folder-safe name of up to "
            "200 letters, digits, '_', '-', '.' (no spaces or slashes), e.g. name = "
            '"north_basin".'
        )
        raise WorkflowError(msg)
    if output_dir is not None:
        out = Path(output_dir)
    elif "output_dir" in run:
        out = Path(string(ctx, "run.output_dir", run["output_dir"], example="runs/demo"))
    else:
        out = Path("runs") / name
    out = user_path(out, what="the output folder")  # relative to the current folder
    if out.exists() and not out.is_dir():
        key = "-o" if output_dir is not None else "run.output_dir"
        msg = (
            f"the output folder '{out}' ({key}) is an existing file, not a folder; expected a "
            "folder path (it is created if missing). Choose another path."
        )
        raise WorkflowError(msg)
    flags = read_fields(ctx, "run", run, dict.fromkeys(("netcdf", "maps", "report"), boolean))
    return RunOptions(name=name, output_dir=out, **flags)


# ---------------------------------------------------------------------------------------------
# [grid]


def _read_grid(ctx: Context, values: dict[str, Any], inputs: Inputs) -> GridSpec:
    has = {k for k in SCHEMA["grid"] if k in values}
    if "like" in has and has & {"extent", "resolution", "crs"}:
        others = ", ".join(sorted(has - {"like"}))
        msg = (
            f"{ctx.where('grid')} gives both 'like' and {others}; expected EITHER like = "
            '"<input name>" OR extent + resolution (+ crs). Remove one of them.'
        )
        raise WorkflowError(msg)
    if "like" in has:
        return _grid_like(ctx, values["like"], inputs)
    if not has:
        msg = (
            f"{ctx.where('grid')} is missing; a run needs a target grid. Add [grid] with "
            'like = "plate_age" (the grid of an input) or extent = [west, east, south, north] '
            "and resolution (in the grid CRS units; degrees for EPSG:4326)."
        )
        raise WorkflowError(msg)
    if "extent" not in has or "resolution" not in has:
        lacking = "extent" if "extent" not in has else "resolution"
        msg = (
            f"{ctx.where('grid')} lacks '{lacking}'; expected both extent = [west, east, "
            "south, north] and resolution (in the grid CRS units, degrees for EPSG:4326), or "
            'like = "<input name>" instead.'
        )
        raise WorkflowError(msg)
    return _grid_extent(ctx, values)


def _grid_like(ctx: Context, value: Any, inputs: Inputs) -> GridSpec:
    like = string(ctx, "grid.like", value, example="plate_age")
    given = {n: s for n, s in inputs.given().items() if s.path is not None}
    if like not in given:
        choices = ", ".join(repr(n) for n in given) or "none: no input has a path"
        msg = (
            f"{ctx.where('grid.like')} is {shown(like)}, which is not an input with a grid file; "
            f"expected the name of an [inputs.<name>] table that has a 'path' ({choices}). "
            "Or give extent and resolution instead."
        )
        raise WorkflowError(msg)
    return GridSpec(like=like)


def _grid_extent(ctx: Context, values: dict[str, Any]) -> GridSpec:
    crs = "EPSG:4326"
    if "crs" in values:
        crs = string(ctx, "grid.crs", values["crs"], example="EPSG:4326")
    geographic = _parse_crs(ctx, crs).is_geographic
    extent_raw = values["extent"]
    if not isinstance(extent_raw, list) or len(extent_raw) != 4:
        expected = "an array of 4 numbers [west, east, south, north]"
        example = "extent = [-40.0, -10.0, -25.0, 5.0]"
        raise wrong_type(ctx, "grid.extent", extent_raw, expected, example)
    unit = "degrees" if geographic else "grid CRS units"
    west, east, south, north = (number(ctx, "grid.extent", v, unit=unit) for v in extent_raw)
    if not (west < east and south < north):
        msg = (
            f"{ctx.where('grid.extent')} is {shown(extent_raw)}; expected [west, east, south, "
            "north] with west < east and south < north. For a grid across the antimeridian use "
            "longitudes 0 to 360 (e.g. [170.0, 200.0, ...])."
        )
        raise WorkflowError(msg)
    if geographic and (
        not -90.0 <= south <= 90.0 or not -90.0 <= north <= 90.0
        or not -180.0 <= west <= 360.0 or not -180.0 <= east <= 360.0
        or east - west > 360.0
    ):  # fmt: skip
        msg = (
            f"{ctx.where('grid.extent')} is {shown(extent_raw)}; for a geographic CRS ({crs}) the "
            "latitudes must lie in -90 to 90 degrees and the longitudes in -180 to 360 degrees, "
            "spanning at most 360. Check the order: [west, east, south, north]."
        )
        raise WorkflowError(msg)
    resolution = number(ctx, "grid.resolution", values["resolution"], unit=unit)
    if not 0 < resolution <= min(east - west, north - south):
        msg = (
            f"{ctx.where('grid.resolution')} is {resolution:g} {unit}; expected a cell size "
            f"> 0 and no larger than the extent ({min(east - west, north - south):g} {unit})."
        )
        raise WorkflowError(msg)
    from lidmelt.grids._grid import Grid

    try:  # the grid builder's own checks (a whole number of cells, a usable CRS)
        Grid.from_extent(west, east, south, north, resolution, crs=crs)
    except LidmeltError as exc:
        msg = (
            f"{ctx.where('grid.extent')} = {shown(extent_raw)} with grid.resolution = "
            f"{resolution:g} does not make a grid: {exc}"
        )
        raise WorkflowError(msg) from exc
    return GridSpec(extent=(west, east, south, north), resolution=resolution, crs=crs)


def _parse_crs(ctx: Context, crs: str) -> Any:
    from pyproj import CRS
    from pyproj.exceptions import CRSError

    try:
        return CRS.from_user_input(crs)
    except CRSError as exc:
        msg = (
            f"{ctx.where('grid.crs')} is {shown(crs)}, which is not a readable CRS "
            f"({shortened(str(exc), 200)}); expected an authority code such as "
            '"EPSG:4326" (longitude/latitude) or a WKT/PROJ string.'
        )
        raise WorkflowError(msg) from exc


# ---------------------------------------------------------------------------------------------
# [model], [lithosphere], [compute]: one reader for each key that is given


def _read_parameters(ctx: Context, key: str, value: Any) -> Parameters:
    values = table(ctx, key, value)
    for name, v in values.items():
        if isinstance(v, dict | list):
            raise wrong_type(ctx, f"{key}.{name}", v, "a single value (a number)", f"{name} = 0.15")
        if isinstance(v, float) and not math.isfinite(v):
            msg = f"{ctx.where(f'{key}.{name}')} is {shown(v)}; expected a finite number."
            raise WorkflowError(msg)
    return Parameters(values)


def _ambient_tp(ctx: Context, key: str, value: Any) -> float:
    advice = (
        "published ambient values are about 1280-1450 °C and depend on the melting model "
        "(docs/workflow.md); from kelvin, subtract 273.15"
    )
    return in_range(ctx, key, value, *AMBIENT_TP_RANGE_C, "°C", advice)


def _min_top_of_melting(ctx: Context, key: str, value: Any) -> float:
    depth = number(ctx, key, value, unit="km")
    if depth < 0:
        msg = (
            f"{ctx.where(key)} is {depth:g} km; expected a depth >= 0 km below the "
            "seafloor (default 7.0, the base of normal oceanic crust)."
        )
        raise WorkflowError(msg)
    return depth


def _crust_density(ctx: Context, key: str, value: Any) -> float:
    advice = "oceanic crust is about 2900 kg/m3 (common practice); from g/cm3, multiply by 1000"
    return in_range(ctx, key, value, *CRUST_DENSITY_RANGE_KG_M3, "kg/m3", advice)


def _lid_isotherm(ctx: Context, key: str, value: Any) -> float:
    iso = number(ctx, key, value, unit="°C")
    low, high = LID_ISOTHERM_RANGE_C
    if not low < iso < high:
        msg = (
            f"{ctx.where(key)} is {iso:g} °C; expected an isotherm between {low:g} and "
            f"{high:g} °C, below the cooling model's mantle temperature (default 1100 °C)."
        )
        raise WorkflowError(msg)
    return iso


_MODEL_READERS: dict[str, Reader] = {
    "name": partial(string, example="katz2003"),
    "ambient_potential_temperature_c": _ambient_tp,
    "min_top_of_melting_km": _min_top_of_melting,
    "crust_density_kg_m3": _crust_density,
    "parameters": _read_parameters,
}
_LITHOSPHERE_READERS: dict[str, Reader] = {
    "cooling": partial(string, example="gdh1"),
    "lid_isotherm_c": _lid_isotherm,
    "top_of_melting": partial(choice, choices=TOP_OF_MELTING_RULES),
    "parameters": _read_parameters,
}


def _scheduler(ctx: Context, key: str, value: Any) -> str:
    """A dask scheduler address, checked like the one of ``LIDMELT_SCHEDULER``."""
    from lidmelt._cluster import check_address

    address = string(ctx, key, value, example="tcp://127.0.0.1:8786").strip()
    try:
        return check_address(address, where=ctx.where(key))
    except ClusterError as exc:
        raise WorkflowError(str(exc)) from None


_COMPUTE_READERS: dict[str, Reader] = {
    "chunk_size": partial(
        at_least,
        minimum=MIN_CHUNK_SIZE,
        unit=" cells",
        advice="cells per chunk side (smaller chunks cost more in overhead than they save). "
        "Use 512 or 1024.",
        example="1024",
    ),
    "workers": partial(
        at_least,
        minimum=1,
        unit="",
        advice="thread (more than the number of cores does not help).",
        example="2",
    ),
    "method": partial(choice, choices=METHODS),
    "scheduler": _scheduler,
    "max_cells": partial(
        at_least,
        minimum=1,
        unit=" cells",
        advice="cell (the largest grid, width x height, a run accepts).",
        example="500000000",
    ),
}


# ---------------------------------------------------------------------------------------------
# [outputs]


def _zarr_url(ctx: Context, value: Any, *, zarr: bool) -> str:
    """``[outputs] zarr_url``: an fsspec folder URL whose file system is installed, given
    with ``zarr = true`` (:func:`lidmelt.grids._objstore.check_store_url`)."""
    from lidmelt.grids._objstore import check_store_url

    key = "outputs.zarr_url"
    url = string(ctx, key, value, example="s3://bucket/lidmelt-runs").strip()
    if not zarr:
        msg = (
            f"{ctx.where(key)} is {shortened(url)!r} but outputs.zarr is not true: zarr_url "
            "says where the run's Zarr store goes. Add zarr = true to [outputs], or remove "
            "zarr_url."
        )
        raise WorkflowError(msg)
    return check_store_url(url, where=ctx.where(key))


def _read_outputs(ctx: Context, values: dict[str, Any], inputs: Inputs) -> OutputOptions:
    given = inputs.available()
    keys = ("cloud_optimized", "zarr", "geotiff")
    flags = read_fields(ctx, "outputs", values, dict.fromkeys(keys, boolean))
    if not flags.get("geotiff", True) and not flags.get("zarr", False):
        msg = (
            f"{ctx.where('outputs.geotiff')} is false and outputs.zarr is not true: the run "
            "would write no grid. Set zarr = true (the Zarr store lidmelt.zarr) or drop "
            "geotiff = false."
        )
        raise WorkflowError(msg)
    if "zarr_url" in values:
        flags["zarr_url"] = _zarr_url(ctx, values["zarr_url"], zarr=flags.get("zarr", False))
    if "variables" not in values:
        return OutputOptions(variables=variables.default_outputs(given), **flags)
    key = "outputs.variables"
    names = values["variables"]
    if not isinstance(names, list) or not names:
        example = 'variables = ["melt_thickness_km", "onset_depth_km"]'
        raise wrong_type(ctx, key, names, "a non-empty array of variable names", example)
    chosen: list[str] = []
    for value in names:
        if isinstance(value, str) and (legacy := variables.legacy_message(value)):
            msg = f"{ctx.where(key)} lists {value!r}: {legacy}"
            raise WorkflowError(msg)
        name = choice(ctx, key, value, OUTPUT_VARIABLES)
        if name in chosen:
            msg = f"{ctx.where(key)} lists {name!r} twice; list each variable once."
            raise WorkflowError(msg)
        needs = variables.OUTPUTS[name].needs
        if needs and needs not in given:
            unit = variables.input_for_workflow_key(needs).units
            msg = (
                f"{ctx.where(key)} lists {name!r}, which needs the input {needs!r}; the workflow "
                f"gives none. Add [inputs.{needs}] (a grid or a constant in {unit}) or drop "
                f"{name!r} from the list."
            )
            raise WorkflowError(msg)
        chosen.append(name)
    return OutputOptions(variables=tuple(chosen), **flags)
