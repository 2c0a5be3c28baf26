"""The first stages of a run: its melting model, its grid and its inputs on that grid.

:func:`load_model` (the melting model and its table), :func:`resolve_target_grid` (the grid of
every output, refused above ``compute.max_cells``), :func:`load_inputs` (every input aligned onto
the grid, or a constant; plumes and their upwelling added; a lid below sea level converted) and
:func:`lid_cooling_model` (the lid from the plate age, or a lid grid). :mod:`lidmelt._engine` runs
them before the kernel; ensembles (:mod:`lidmelt.ensemble`) run them once per distinct input set.

Errors name the input's workflow key and file: an input grid that does not overlap the run's
grid, a ``grid.like`` grid above ``compute.max_cells``, a file whose tiles or chunks cannot be
read (:func:`explain_read_failure`, which finds the file after a run failed reading), and a run
without a single cell that could be computed (:func:`refuse_without_data`, with each input's
values and the range the model accepts).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from lidmelt._cluster import input_paths
from lidmelt._config import DEFAULT_MAX_CELLS
from lidmelt._errors import GridError, InputError, LidmeltError
from lidmelt._variables import INPUTS, input_for_workflow_key
from lidmelt.grids._align import align
from lidmelt.grids._anomaly import Plume, plume_anomaly, plume_cells
from lidmelt.grids._grid import Grid, registration
from lidmelt.grids._io import open_input, sha256_file
from lidmelt.grids._lidref import apply_lid_reference, water_load_source
from lidmelt.physics import get_cooling_model, get_model, get_table
from lidmelt.physics._cooling import seafloor_depth_m
from lidmelt.physics._geotherm import geotherm_tops, geotherm_tops_direct
from lidmelt.physics._pressure import water_load_km

#: Inputs the lid is built from; missing, they are NaN (no lid) rather than 0.
LID_INPUTS = ("plate_age_ma", "lid_thickness_km")


@dataclass
class RunInputs:
    """The inputs of a run on the target grid: lazy DataArrays or constants, and provenance."""

    values: dict[str, xr.DataArray | float]
    provenance: dict[str, dict[str, Any]]
    #: the water load above the seafloor: its source ("bathymetry", "age" or "none"), the water
    #: depth grid [m] of a bathymetry, and a description for the run summary
    water_load: tuple[str, xr.DataArray | None, str] = ("none", None, "no water load")

    @property
    def gridded(self) -> list[str]:
        """Names of the inputs given as grids (written as ``input_<name>.tif``)."""
        return [n for n, v in self.values.items() if isinstance(v, xr.DataArray)]

    def sources(self) -> dict[str, str]:
        """Where each input came from, for error messages: its file or "the workflow"."""
        return {n: (p.get("source") or "the workflow") for n, p in self.provenance.items()}


def files_read(cfg) -> list[Path]:
    """Every file a run of ``cfg`` reads: its input grids (and a lid's bathymetry), its plume
    catalogue, its motion files and its workflow file (a run must not replace a folder that
    holds one)."""
    paths = input_paths(cfg)
    anomaly = cfg.inputs.thermal_anomaly
    workflow = getattr(cfg, "workflow_path", None)
    if anomaly is not None and getattr(anomaly, "plumes_file", None) and workflow is not None:
        paths.append(Path(workflow).parent / Path(anomaly.plumes_file).expanduser())
    motion = getattr(cfg, "motion", None)
    if motion is not None:
        paths += [p for p in (motion.rotations_file, motion.plate_ids_file, motion.drift_file) if p]
        paths += [path for _, path, _ in motion.plate_rotations]
    return [*paths, Path(workflow)] if workflow is not None else paths


def load_model(cfg) -> tuple[Any, Any | None]:
    """The melting model of ``cfg.model`` and, for ``compute.method = "table"``, its table."""
    model = get_model(cfg.model.name, **dict(cfg.model.parameters))
    table = get_table(model) if cfg.compute.method == "table" else None
    return model, table


def resolve_target_grid(cfg) -> Grid:
    """The grid of every output: that of the input named by ``grid.like``, or ``grid.extent``."""
    spec = cfg.grid
    where = "the grid (grid.extent and grid.resolution)"
    if spec.like:
        inp = cfg.inputs[spec.like]
        where = f"the grid of grid.like = {spec.like!r} (inputs.{spec.like}: {str(inp.path)!r})"
        var = input_for_workflow_key(spec.like)
        da = open_input(
            inp, name=var.name, units_expected=var.units, chunks={"y": "auto", "x": "auto"}
        )
        grid = Grid.from_grid(da)
    else:
        west, east, south, north = spec.extent
        grid = Grid.from_extent(
            west, east, south, north, spec.resolution, crs=spec.crs or "EPSG:4326"
        )
    limit = int(getattr(cfg.compute, "max_cells", DEFAULT_MAX_CELLS))
    if grid.width * grid.height > limit:
        msg = (
            f"{where} has {grid.width} x {grid.height} = {grid.width * grid.height:,} cells, "
            f"more than compute.max_cells = {limit:,}. Use a coarser grid.resolution or a "
            "smaller grid.extent (or a coarser file for grid.like), or raise compute.max_cells "
            "in the workflow."
        )
        raise InputError(msg)
    _check_plume_work(cfg, grid, limit)
    return grid


def _check_plume_work(cfg, grid: Grid, limit: int) -> None:
    """Refuse plumes whose geodesic distances (:func:`lidmelt.grids._anomaly.plume_cells`, one
    per cell within a plume's reach, and again for a plume's upwelling) exceed ``limit``."""
    anomaly = cfg.inputs.thermal_anomaly
    specs = list(anomaly.plumes) if anomaly is not None else []
    specs += [p for p in specs if p.peak_upwelling_mm_yr is not None]
    if not specs:
        return
    cells = plume_cells(grid, [Plume(**p.plume_fields()) for p in specs])
    if cells > limit:
        msg = (
            f"the {len(anomaly.plumes)} plume(s) of inputs.thermal_anomaly reach about "
            f"{cells:,} cells of the grid in all (per plume the cells within 6 radii of a "
            f"gaussian, 1 radius otherwise; a geodesic distance each, about 1 microsecond), "
            f"more than compute.max_cells = {limit:,}. Use fewer or smaller plumes or a coarser "
            "grid.resolution, or raise compute.max_cells in the workflow."
        )
        raise InputError(msg)


def load_inputs(cfg, *, target: Grid, chunks: int, cache: dict | None = None) -> RunInputs:
    """Every input of ``cfg.inputs`` on ``target`` (lazy, in ``chunks``-cell chunks); a
    ``cache`` dict shares the grids of identical inputs between calls (ensemble members).

    Raises
    ------
    InputError
        If neither a plate age nor a lid thickness is given (the lid cannot be built).
    """
    values: dict[str, xr.DataArray | float] = {}
    provenance: dict[str, dict[str, Any]] = {}
    for name, var in INPUTS.items():
        inp = cfg.inputs[var.workflow_key]
        if inp is None:
            continue
        cache = {} if cache is None else cache
        key = (name, replace(inp, plumes=()))  # the plumes are added below, per call
        if key not in cache:
            cache[key] = _load_input(inp, name, target, chunks)
        values[name], provenance[name] = cache[key][0], dict(cache[key][1])
        if name == "thermal_anomaly_k" and inp.plumes:
            values[name] = _add_plumes(inp, values[name], provenance[name], target, chunks)
    _add_plume_upwelling(cfg, values, provenance, target, chunks)
    if not any(name in values for name in LID_INPUTS):
        msg = "the workflow gives neither inputs.plate_age nor inputs.lid_thickness; give one."
        raise InputError(msg)
    apply_lid_reference(cfg, values, provenance, target=target, chunks=chunks)
    load = water_load_source(cfg, values, target=target, chunks=chunks)
    return RunInputs(values, provenance, load)


def _load_input(inp, name: str, target: Grid, chunks: int) -> tuple[xr.DataArray | float, dict]:
    """An input on the target grid (lazy where it already lies on it) or a constant."""
    var = INPUTS[name]
    prov: dict[str, Any] = {"units": var.units, "long_name": var.long_name}
    if inp.path is None:
        value = float(inp.constant if inp.constant is not None else 0.0)
        prov.update({"source": None, "sha256": None, "constant": value})
        return value, prov
    da = open_input(inp, name=name, units_expected=var.units, chunks=chunks)
    prov.update(
        {
            "source": str(inp.path),
            "sha256": sha256_file(inp.path),
            "variable": inp.variable,
            "resampling": inp.resampling,
            "registration": registration(da),
            **({"conversion": da.attrs["conversion"]} if "conversion" in da.attrs else {}),
        }
    )
    try:
        aligned = align(da, target, resampling=inp.resampling, name=name)
    except GridError as exc:  # e.g. no overlap: the message names the variable; add the file
        msg = f"inputs.{INPUTS[name].workflow_key} (file {str(inp.path)!r}): {exc}"
        raise GridError(msg) from exc
    if aligned.chunks is None or aligned.chunks != target.template(chunks).chunks:
        aligned = aligned.chunk({"y": chunks, "x": chunks})
    if inp.constant:
        aligned = aligned + float(inp.constant)
        prov["constant"] = float(inp.constant)
    return aligned, prov


def _add_plumes(inp, background, prov: dict, target: Grid, chunks: int) -> xr.DataArray:
    """The thermal anomaly: the workflow's plumes on ``background`` (recorded in ``prov``)."""
    plumes = [Plume(**p.plume_fields()) for p in inp.plumes]
    keys = ("name", "longitude", "latitude", "radius_km", "peak_excess_k", "shape")
    prov["plumes"] = [{k: getattr(p, k) for k in keys} for p in inp.plumes]
    return plume_anomaly(target, plumes, background=background, chunks=chunks)


def _add_plume_upwelling(cfg, values: dict, provenance: dict, target: Grid, chunks: int):
    """Add the plumes' ``peak_upwelling_mm_yr`` (same shape and radius) to the upwelling input.

    Without ``[inputs.upwelling]`` the plumes' upwelling lies on a background of 0 mm/yr.
    """
    anomaly = cfg.inputs["thermal_anomaly"]
    specs = [p for p in anomaly.plumes if p.peak_upwelling_mm_yr is not None]
    if not specs:
        return
    name = "upwelling_mm_yr"
    var = INPUTS[name]
    if name not in values:
        values[name] = 0.0
        provenance[name] = {"units": var.units, "long_name": var.long_name, "source": None}
    plumes = [Plume(**p.upwelling_fields()) for p in specs]
    provenance[name]["plumes"] = [
        {"name": p.name, "peak_upwelling_mm_yr": p.peak_upwelling_mm_yr} for p in specs
    ]
    values[name] = plume_anomaly(target, plumes, background=values[name], chunks=chunks)


def lid_cooling_model(cfg, *, inputs: RunInputs):
    """The cooling model that turns plate age into a lid, or None when no age is given.

    With an age grid the lid is the depth of the ``lithosphere.lid_isotherm_c`` isotherm of
    ``lithosphere.cooling``; where a lid thickness grid is given too, it wins where it has data.
    """
    if "plate_age_ma" not in inputs.values:
        return None
    return get_cooling_model(cfg.lithosphere.cooling, **dict(cfg.lithosphere.parameters))


# ---- errors that name the input ------------------------------------------------------------------
def _read_errors() -> tuple[type[BaseException], ...]:
    """What a reader raises for a damaged file (GDAL; NetCDF/HDF as RuntimeError or OSError)."""
    import rasterio.errors
    from rasterio._err import CPLE_BaseError

    return (rasterio.errors.RasterioError, CPLE_BaseError, RuntimeError, OSError)


#: Exceptions after which :func:`explain_read_failure` looks for a damaged input file.
READ_ERRORS = _read_errors()


def _first_bad_block(inp, name: str, chunks: int) -> tuple[str, BaseException] | None:
    """Read an input file block by block; the first block that fails and its error, or None."""
    var = INPUTS[name]
    try:
        da = open_input(inp, name=name, units_expected=var.units, chunks=chunks)
    except InputError as exc:
        return "the file's header", exc
    if not hasattr(da.data, "to_delayed"):
        return None
    starts = [np.cumsum((0, *c[:-1])) for c in da.data.chunks]
    for (i, j), block in np.ndenumerate(da.data.to_delayed()):
        try:
            block.compute(scheduler="synchronous")
        except READ_ERRORS as exc:
            return f"the block from row {starts[0][i]}, column {starts[1][j]}", exc
    return None


def _root_message(exc: BaseException) -> str:
    """The message at the root of an exception's chain (GDAL's names the file and block,
    where rasterio's outer one says only "Read failed")."""
    seen = []
    while exc is not None and exc not in seen:
        seen.append(exc)
        exc = exc.__cause__ or exc.__context__
    texts = [str(e) for e in seen if str(e) and "previous exception" not in str(e)]
    return texts[-1] if texts else str(seen[0])


def explain_read_failure(cfg, exc: BaseException) -> InputError | None:
    """After a run failed with ``exc`` (a read error), the input file that cannot be read.

    Each input file of ``cfg`` is read again, block by block; the first damaged one gives an
    :class:`InputError` naming its workflow key, its file and the failing block (None when every
    input reads: the failure was elsewhere, e.g. writing the outputs; None for lidmelt's own
    errors, which say what is wrong already).
    """
    if isinstance(exc, LidmeltError):
        return None
    chunks = int(cfg.compute.chunk_size)
    for name, var in INPUTS.items():
        inp = cfg.inputs[var.workflow_key]
        if inp is None or inp.path is None:
            continue
        bad = _first_bad_block(inp, name, chunks)
        if bad is not None:
            where, error = bad
            msg = (
                f"inputs.{var.workflow_key}: the grid file {str(inp.path)!r} cannot be read "
                f"({where}: {_root_message(error)}). The file is damaged or truncated (corrupt "
                "tiles or chunks); write it again from its source (e.g. 'gdal_translate' or "
                "'nccopy'), or give another file in the workflow."
            )
            return InputError(msg)
    return None


def _value_range(value) -> str:
    """An input's values as text: the constant, or the range of the grid (computed now)."""
    if not isinstance(value, xr.DataArray):
        return f"the constant {float(value):g}"
    data = value.data
    low, high = (float(v) for v in (np.nanmin(data), np.nanmax(data)))
    return "only NaN (nodata)" if not np.isfinite(low) else f"values {low:.4g} to {high:.4g}"


def _input_lines(cfg, inputs: RunInputs, model) -> list[str]:
    """Per input: key, file, its values and the range accepted (water: the saturation too)."""
    lines = []
    for name, value in inputs.values.items():
        var = INPUTS[name]
        source = inputs.provenance.get(name, {}).get("source")
        where = f"file {source!r}" if source else "set in the workflow"
        lo, hi = var.valid_range
        line = (
            f"inputs.{var.workflow_key} ({where}): {_value_range(value)} {var.units}, "
            f"accepted {lo:g} to {hi:g} {var.units}"
        )
        if name == "water_wt_pct" and getattr(model, "hydrous", False):
            cal = float(getattr(model, "calibrated_max_pressure_gpa", 7.0))
            low, high = (float(model.water_saturated_bulk_wt_pct(p)) for p in (1.0, cal))
            line += (
                f", but the solid source of {model.name} holds at most {low:.3g} wt% at 1 GPa "
                f"and {high:.3g} wt% at {cal:g} GPa (more is free water)"
            )
        lines.append(line)
    return lines


def refuse_without_data(cfg, *, inputs: RunInputs, statistics: dict, flag_path, model) -> None:
    """Refuse a run none of whose cells could be computed (no finite melt thickness anywhere).

    The message counts the cells per validity flag bit that took them out (read from the
    written flag grid at ``flag_path``) and names every input: workflow key, file, values and
    the range the registry and the model accept.
    """
    if statistics.get("data_cells"):
        return
    import rasterio

    from lidmelt._variables import FLAG_NODATA, FLAG_VARIABLE
    from lidmelt.physics import FLAG_MEANINGS

    if Path(flag_path).suffix == ".zarr":  # a run without GeoTIFFs: its store's flag array
        from lidmelt.grids._zarr import flag_counts

        counts = np.zeros(256, np.int64)
        for value, n in flag_counts(flag_path, FLAG_VARIABLE.name).items():
            counts[value] = n
    else:
        with rasterio.open(flag_path) as src:
            counts = np.bincount(src.read(1).ravel(), minlength=256)
    inside = int(counts[:FLAG_NODATA].sum())
    why = [
        f"{int(counts[[v for v in range(FLAG_NODATA) if v & bit]].sum()):,} of them: {text} "
        f"(flag {bit})"
        for bit, text in FLAG_MEANINGS.items()
        if counts[[v for v in range(FLAG_NODATA) if v & bit]].sum()
    ]
    if not inside:
        what = (
            "no cell of the grid has data: every cell lacks a lid (plate age or lid thickness), "
            "a thermal anomaly or a water content. Check that the input grids overlap the "
            "grid's extent and are not all NaN (nodata)"
        )
    else:
        what = (
            f"none of the {inside:,} cells with data can be evaluated (of the grid's "
            f"{int(counts.sum()):,} cells): " + "; ".join(why)
        )
    msg = (
        f"{what}. The inputs: "
        + "; ".join(_input_lines(cfg, inputs, model))
        + ". Fix the input that is out of range (its unit or its values) and run again."
    )
    raise InputError(msg)


def chunk_water_load(source: str, age, water_depth, shape, cooling, model):
    """The water load's rock-equivalent depth [km] of one chunk (:func:`lidmelt.physics.
    pressure.water_load_km`): of the bathymetry's water depth block [m] (``source``
    "bathymetry"), else of the cooling model's seafloor depth at the plate age ("age")."""
    if source == "bathymetry":
        depth_m = np.broadcast_to(np.asarray(water_depth, float), shape)
    else:
        depth_m = seafloor_depth_m(np.broadcast_to(age, shape), model=cooling)
    return water_load_km(depth_m, model.lithostatic_density_kg_m3)


def geotherm_lid(model, table, cooling, blocks, shape, *, ambient_c: float, min_top_km: float):
    """The top of melting of one chunk under the geotherm rule where the lid comes from the age
    (the lid grid, where finite, stays the user's cap), and the kernel's ambient tops and
    excesses (:func:`lidmelt.physics.geotherm_tops`, by the table or, without one, by direct
    integration). ``blocks``: the chunk's age, lid grid, Tp, water and water load [km] (the
    geotherm's depths are below the seafloor, beneath that load)."""
    age, lid_grid, tp, water, load = blocks
    lid = np.broadcast_to(np.asarray(lid_grid, float), shape)
    age = np.broadcast_to(np.asarray(age, float), shape)
    kw = {"ambient_c": ambient_c, "min_top_km": min_top_km, "water_load_km": load}
    if table is not None:
        top, amb, excess = geotherm_tops(table, cooling, tp, water, age, **kw)
    else:
        top, amb, excess = geotherm_tops_direct(model, cooling, tp, water, age, **kw)
    if np.ndim(lid_grid) or np.isfinite(lid_grid):
        user = np.isfinite(lid)
        top = np.where(user, lid, top)
        amb, excess = np.where(user, np.nan, amb), np.where(user, np.nan, excess)
    return top, {"ambient_lid_depth_km": amb, "excess_k": excess}
