"""The basin run: inputs aligned to one grid, the melting kernel chunk by chunk, GeoTIFF outputs.

:func:`run_basin` takes a run configuration (as made by :func:`lidmelt.workflow.load_workflow`;
any object with the same attributes works) and runs these stages: :func:`load_model` (the
melting model and its table), :func:`resolve_target_grid`, :func:`load_inputs` (every input
aligned onto the grid, or a constant), :func:`lid_cooling_model` (the lid from the plate age, or
a lid grid), :func:`build_kernel` (the lazy dask kernel over chunks: every variable of
:data:`lidmelt.variables.OUTPUTS` and the validity flag), :func:`plan_geotiffs` and
:func:`store_with_statistics` (one pass that stores every GeoTIFF and computes the summary
statistics band by band), :func:`lidmelt.grids.rundir.write_run_netcdf` (optional) and the summary
(:func:`lidmelt.grids.rundir.build_summary`). Peak memory is set by the chunk size, not by the
grid size. Units, long names and ranges come from :mod:`lidmelt.variables`; file names and the
summary format from :mod:`lidmelt.grids.rundir`.
"""

from __future__ import annotations

import functools
import time
import uuid
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from lidmelt.config import DEFAULT_MAX_CELLS
from lidmelt.errors import InputError
from lidmelt.grids import rundir
from lidmelt.grids.align import align
from lidmelt.grids.anomaly import Plume, plume_anomaly
from lidmelt.grids.area import cell_area_km2
from lidmelt.grids.grid import Grid, registration
from lidmelt.grids.io import open_input, sha256_file
from lidmelt.grids.lidref import apply_lid_reference
from lidmelt.grids.store import GeoTiffItem, GeoTiffSet
from lidmelt.grids.transaction import RunTransaction
from lidmelt.physics import (
    FLAG_MEANINGS,
    evaluate_cells,
    get_cooling_model,
    get_model,
    get_table,
    isotherm_depth_km,
)
from lidmelt.progress import band_reporter
from lidmelt.statistics import ambient_melting_warnings, band_parts, summarize_bands
from lidmelt.variables import (
    FLAG_NODATA,
    FLAG_VARIABLE,
    INPUTS,
    OUTPUTS,
    check_input_range,
    input_for_workflow_key,
)

__all__ = [
    "KernelSettings",
    "LazyRun",
    "RunInputs",
    "RunResult",
    "build_kernel",
    "evaluate_chunk",
    "lid_cooling_model",
    "load_inputs",
    "load_model",
    "plan_geotiffs",
    "resolve_target_grid",
    "run_basin",
    "store_with_statistics",
]

#: Inputs the lid is built from; missing, they are NaN (no lid) rather than 0.
_LID_INPUTS = ("plate_age_ma", "lid_thickness_km")
#: The kernel's inputs, in the order of its positional arguments.
_KERNEL_INPUTS = (
    "plate_age_ma",
    "lid_thickness_km",
    "thermal_anomaly_k",
    "water_wt_pct",
    "upwelling_mm_yr",
)
#: Outputs whose area integral goes into the summary (km: volume km3; mm/yr: km3/yr).
_INTEGRALS = ("anomaly_melt_thickness_km", "melt_production_mm_yr")


@dataclass
class RunResult:
    """What :func:`run_basin` wrote: the run directory, its files and the summary."""

    run_dir: Path
    files: list[Path]
    summary: dict[str, Any]
    timings_s: dict[str, float] = field(default_factory=dict)
    sources: dict[str, str] = field(default_factory=dict)


@dataclass
class RunInputs:
    """The inputs of a run on the target grid: lazy DataArrays or constants, and provenance."""

    values: dict[str, xr.DataArray | float]
    provenance: dict[str, dict[str, Any]]

    @property
    def gridded(self) -> list[str]:
        """Names of the inputs given as grids (written as ``input_<name>.tif``)."""
        return [n for n, v in self.values.items() if isinstance(v, xr.DataArray)]

    def sources(self) -> dict[str, str]:
        """Where each input came from, for error messages: its file or "the workflow"."""
        return {n: (p.get("source") or "the workflow") for n, p in self.provenance.items()}


@dataclass(frozen=True, kw_only=True)
class KernelSettings:
    """Everything :func:`evaluate_chunk` needs besides the input blocks."""

    model: Any
    table: Any | None
    cooling: Any | None
    lid_isotherm_c: float
    ambient_c: float
    min_top_km: float
    method: str
    sources: dict[str, str]
    crust_density_kg_m3: float = 2900.0
    upwelling: bool = False


@dataclass
class LazyRun:
    """The lazy kernel of a run: the stacked dask array and the views of it that are written.

    ``stacked`` is (n_outputs + 1, y, x) float32 with one layer per variable of
    :data:`lidmelt.variables.OUTPUTS` and the validity flag last; ``outputs`` holds the
    requested variables as (y, x) DataArrays; ``clock`` accumulates the kernel's thread seconds.
    """

    stacked: Any
    outputs: dict[str, xr.DataArray]
    flag: xr.DataArray
    clock: dict[str, float]


# ---- model, grid and inputs ----------------------------------------------------------------------
def load_model(cfg) -> tuple[Any, Any | None]:
    """The melting model of ``cfg.model`` and, for ``compute.method = "table"``, its table."""
    model = get_model(cfg.model.name, **dict(cfg.model.parameters))
    table = get_table(model) if cfg.compute.method == "table" else None
    return model, table


def resolve_target_grid(cfg) -> Grid:
    """The grid of every output: that of the input named by ``grid.like``, or ``grid.extent``."""
    spec = cfg.grid
    if spec.like:
        inp = cfg.inputs[spec.like]
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
            f"the grid has {grid.width} x {grid.height} = {grid.width * grid.height:,} cells, "
            f"more than compute.max_cells = {limit:,}. Use a coarser grid.resolution or a "
            "smaller grid.extent, or raise compute.max_cells in the workflow."
        )
        raise InputError(msg)
    return grid


def load_inputs(cfg, *, target: Grid, chunks: int) -> RunInputs:
    """Every input of ``cfg.inputs`` on ``target`` (lazy, in ``chunks``-cell chunks).

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
        values[name], provenance[name] = _load_input(inp, name, target, chunks)
        if name == "thermal_anomaly_k" and inp.plumes:
            values[name] = _add_plumes(inp, values[name], provenance[name], target, chunks)
    _add_plume_upwelling(cfg, values, provenance, target, chunks)
    if not any(name in values for name in _LID_INPUTS):
        msg = "the workflow gives neither inputs.plate_age nor inputs.lid_thickness; give one."
        raise InputError(msg)
    apply_lid_reference(cfg, values, provenance, target=target, chunks=chunks)
    return RunInputs(values, provenance)


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
    aligned = align(da, target, resampling=inp.resampling, name=name)
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


# ---- the kernel ----------------------------------------------------------------------------------
def evaluate_chunk(
    age, lid_grid, anomaly, water, upwelling=0.0, *, settings: KernelSettings, clock=None
):
    """Every output of one chunk, stacked as (n_outputs + 1, y, x) float32 (flag last).

    The lid is the input lid thickness where finite, else the isotherm depth of the cooling
    model at the plate age; cells without a lid, anomaly or water are NaN (flag
    :data:`lidmelt.variables.FLAG_NODATA`), and so are outputs the inputs do not give (melt
    production without upwelling). ``clock``, a dict, accumulates the thread seconds spent on
    the lid and on melting.
    """
    s = settings
    t0 = time.perf_counter()
    blocks = (age, lid_grid, anomaly, water, upwelling)
    shape = np.broadcast_shapes(*(np.shape(a) for a in blocks))
    for name, block in zip(_KERNEL_INPUTS, blocks, strict=True):
        if name in s.sources and np.ndim(block):
            check_input_range(block, name, s.sources[name])
    lid = np.broadcast_to(np.asarray(lid_grid, float), shape)
    if s.cooling is not None:
        from_age = isotherm_depth_km(s.lid_isotherm_c, np.broadcast_to(age, shape), model=s.cooling)
        lid = np.where(np.isfinite(lid), lid, from_age)
    t1 = time.perf_counter()
    tp = s.ambient_c + np.broadcast_to(np.asarray(anomaly, float), shape)
    water_arg = water if np.ndim(water) == 0 else np.broadcast_to(water, shape)
    res = evaluate_cells(
        tp,
        lid,
        water_arg,
        ambient_potential_temperature_c=s.ambient_c,
        model=s.model,
        method=s.method,
        table=s.table,
        min_top_km=s.min_top_km,
        upwelling_mm_yr=np.broadcast_to(upwelling, shape) if s.upwelling else None,
        crust_density_kg_m3=s.crust_density_kg_m3,
    )
    nodata = ~(np.isfinite(lid) & np.isfinite(tp) & np.isfinite(np.broadcast_to(water_arg, shape)))
    out = np.empty((len(OUTPUTS) + 1, *shape), np.float32)
    for k, name in enumerate(OUTPUTS):
        out[k] = res.get(name, np.nan)
    out[: len(OUTPUTS), nodata] = np.nan
    out[-1] = np.where(nodata, FLAG_NODATA, res["flag"])
    if clock is not None:  # dict updates of floats are atomic enough for a timing summary
        clock["lid_thread_s"] = clock.get("lid_thread_s", 0.0) + t1 - t0
        clock["melting_thread_s"] = clock.get("melting_thread_s", 0.0) + time.perf_counter() - t1
    return out


@dataclass(frozen=True, eq=False)
class _ChunkKernel:
    """:func:`evaluate_chunk` as a dask block function: constants filled in, age broadcast."""

    scalars: tuple  # per kernel input: its constant, or None where a dask block is passed
    settings: KernelSettings
    clock: dict[str, float]

    def __call__(self, *blocks, block_info=None):
        it = iter(blocks)
        shape = block_info[None]["chunk-shape"][1:]
        vals = [next(it) if s is None else s for s in self.scalars]
        vals[0] = np.broadcast_to(vals[0], shape)  # the lid from age needs an age everywhere
        return evaluate_chunk(*vals, settings=self.settings, clock=self.clock)


def _as_dask(value, chunks: int):
    """A dask array of an input DataArray; a constant stays a float."""
    import dask.array as dsa

    if not isinstance(value, xr.DataArray):
        return value
    if isinstance(value.data, dsa.Array):
        return value.data
    return dsa.from_array(value.values, chunks=chunks)


def build_kernel(
    cfg, *, inputs: RunInputs, template: xr.DataArray, model, table, cooling
) -> LazyRun:
    """The lazy kernel over the chunks of ``template``: one dask graph for every output.

    The outputs not in ``cfg.outputs.variables`` are computed (they share the column) but not
    returned in :attr:`LazyRun.outputs`.
    """
    import dask.array as dsa

    chunks = int(cfg.compute.chunk_size)
    settings = KernelSettings(
        model=model,
        table=table,
        cooling=cooling,
        lid_isotherm_c=cfg.lithosphere.lid_isotherm_c,
        ambient_c=cfg.model.ambient_potential_temperature_c,
        min_top_km=cfg.model.min_top_of_melting_km,
        method=cfg.compute.method,
        sources=inputs.sources(),
        crust_density_kg_m3=cfg.model.crust_density_kg_m3,
        upwelling="upwelling_mm_yr" in inputs.values,
    )
    args = [
        _as_dask(inputs.values.get(n, np.nan if n in _LID_INPUTS else 0.0), chunks)
        for n in _KERNEL_INPUTS
    ]
    scalars = tuple(None if isinstance(a, dsa.Array) else a for a in args)
    ref = template.data
    # with every input constant, the template alone carries the grid's chunks to the kernel
    arrays = [a.rechunk(ref.chunks) for a in args if isinstance(a, dsa.Array)] or [ref]
    clock: dict[str, float] = {}
    stacked = dsa.map_blocks(
        _ChunkKernel(scalars, settings, clock),
        *arrays,
        name=f"lidmelt-kernel-{uuid.uuid4().hex}",  # unique; spares hashing the model's table
        dtype=np.float32,
        new_axis=0,
        chunks=((len(OUTPUTS) + 1,), *ref.chunks),
    )
    outputs = {
        name: _on_grid(stacked[k], template, name)
        for k, name in enumerate(OUTPUTS)
        if name in cfg.outputs.variables
    }
    flag = _on_grid(stacked[-1], template, FLAG_VARIABLE.name)
    return LazyRun(stacked, outputs, flag, clock)


def _on_grid(data, template: xr.DataArray, name: str | None = None) -> xr.DataArray:
    """A (y, x) dask array as a DataArray on ``template``'s coordinates and CRS."""
    da = xr.DataArray(data, coords=template.coords, dims=("y", "x"), name=name)
    da.rio.write_crs(template.rio.crs, inplace=True)
    return da


# ---- storing, statistics, NetCDF -----------------------------------------------------------------
def plan_geotiffs(
    run_dir: Path,
    *,
    lazy: LazyRun,
    inputs: RunInputs,
    template: xr.DataArray,
    chunks: int,
    tags: dict[str, Any],
) -> list[GeoTiffItem]:
    """The GeoTIFFs of a run: requested outputs, gridded inputs and the validity flag."""
    layers = [(da, OUTPUTS[n], rundir.output_file(n)) for n, da in lazy.outputs.items()]
    for n in inputs.gridded:
        data = _as_dask(inputs.values[n], chunks).rechunk(template.data.chunks)
        layers.append((_on_grid(data, template), INPUTS[n], rundir.input_file(n)))
    items = [
        GeoTiffItem(
            da,
            run_dir / file,
            var.long_name,
            var.units,
            {**tags, "variable": var.name, "units": var.units},
        )
        for da, var, file in layers
    ]
    meanings = "; ".join(f"{bit}: {text}" for bit, text in FLAG_MEANINGS.items())
    flag_tags = dict(tags, variable=FLAG_VARIABLE.name, flag_meanings=meanings)
    flag_tags["nodata_meaning"] = f"{FLAG_NODATA}: no input data"
    flag = GeoTiffItem(
        lazy.flag,
        run_dir / rundir.FLAG_FILE,
        FLAG_VARIABLE.long_name,
        FLAG_VARIABLE.units,
        flag_tags,
        dtype="uint8",
        nodata=FLAG_NODATA,
    )
    return [*items, flag]


def store_with_statistics(
    items: list[GeoTiffItem],
    *,
    lazy: LazyRun,
    area,
    workers: int,
    report: Callable[[int, int], None] | None,
    inputs: RunInputs | None = None,
) -> dict[str, Any]:
    """Store every GeoTIFF and compute the summary statistics in one dask pass.

    The grid is computed in bands of two chunk rows (one :func:`dask.compute` each), so the
    kernel runs once per chunk whatever the number of files; ``area`` is the cell area (km2,
    dask, chunked like the kernel). ``inputs`` gives the plate age (for the median age of
    ambient-melting cells) and whether upwelling is known (for the melt production total).
    Returns the ``statistics`` entry of the summary (:func:`lidmelt.statistics.summarize_bands`).
    """
    names = list(lazy.outputs)
    out_index = [k for k, name in enumerate(OUTPUTS) if name in lazy.outputs]
    given = inputs.values if inputs is not None else {}
    integrals = [n for n in _INTEGRALS if not OUTPUTS[n].needs or "upwelling_mm_yr" in given]
    ref_chunks = lazy.stacked.chunks[1:]
    age = given.get("plate_age_ma")
    age = _as_dask(age, ref_chunks) if isinstance(age, xr.DataArray) else None
    extra = functools.partial(
        band_parts,
        stacked=lazy.stacked,
        area=area.rechunk(ref_chunks),
        age=None if age is None else age.rechunk(ref_chunks),
        out_index=out_index,
        integrals=[list(OUTPUTS).index(n) for n in integrals],
    )
    rows = 2 * ref_chunks[0][0]
    with GeoTiffSet(items, cog=True) as out:
        bands = out.compute(extra=extra, band_rows=rows, num_workers=workers, report=report)
    return summarize_bands(bands, names=names, integrals=integrals)


# ---- the run -------------------------------------------------------------------------------------
def run_basin(
    cfg,
    *,
    output_dir: str | Path | None = None,
    progress: bool | None = None,
    products: Callable[[Path], list[Path]] | None = None,
    wait: bool = False,
) -> RunResult:
    """Run a whole basin from a workflow configuration; return what was written.

    The run is a transaction (:class:`lidmelt.grids.transaction.RunTransaction`): it takes the
    destination's lock, writes everything into a staging folder beside it, reads every file
    back, records the manifest in the summary, and only then swaps the staging folder into
    place. On any error or interruption the destination keeps its previous run.

    Parameters
    ----------
    cfg : RunConfig
        From :func:`lidmelt.workflow.load_workflow`.
    output_dir : path, optional
        The run directory (default ``cfg.run.output_dir``).
    progress : bool, optional
        A progress bar (True), plain log lines (None when not on a terminal), or nothing (False).
    products : callable, optional
        ``products(staged_run_dir) -> paths``: draws figures (maps, report) into the staged,
        sealed run, so that they are swapped into place with it.
    wait : bool
        Wait for another run writing the same destination instead of failing at once.

    Raises
    ------
    LidmeltError
        For any bad input (file, grid, range, model), a destination locked by another run, or
        a run without a single evaluable cell; nothing is left half-written.
    """
    with RunTransaction(output_dir or cfg.run.output_dir, wait=wait) as tx:
        result = _run_staged(cfg, tx.staging, progress)
        rundir.seal_run(tx.staging, result.summary, sources=result.sources)
        drawn = list(products(tx.staging)) if products else []
        tx.commit()
    files = [tx.dest / Path(p).relative_to(tx.staging) for p in [*result.files, *drawn]]
    return replace(result, run_dir=tx.dest, files=files)


def _run_staged(cfg, run_dir: Path, progress: bool | None) -> RunResult:
    """Every stage of a run, writing into ``run_dir`` (the staging folder)."""
    t0 = time.perf_counter()
    chunks = int(cfg.compute.chunk_size)
    model, table = load_model(cfg)
    timings = {"table_s": time.perf_counter() - t0}

    target = resolve_target_grid(cfg)
    template = target.template(chunks)
    inputs = load_inputs(cfg, target=target, chunks=chunks)
    timings["inputs_s"] = time.perf_counter() - t0 - timings["table_s"]
    cooling = lid_cooling_model(cfg, inputs=inputs)

    lazy = build_kernel(
        cfg, inputs=inputs, template=template, model=model, table=table, cooling=cooling
    )
    tags = rundir.provenance_tags(cfg, model=model, cooling=cooling, provenance=inputs.provenance)
    items = plan_geotiffs(
        run_dir, lazy=lazy, inputs=inputs, template=template, chunks=chunks, tags=tags
    )
    t1 = time.perf_counter()
    statistics = store_with_statistics(
        items,
        lazy=lazy,
        area=cell_area_km2(target, chunks=chunks).data,
        workers=int(cfg.compute.workers),
        report=band_reporter(progress),
        inputs=inputs,
    )
    run_warnings = ambient_melting_warnings(
        statistics, ambient_c=cfg.model.ambient_potential_temperature_c, issue=True
    )
    timings["compute_and_write_s"] = time.perf_counter() - t1
    timings.update(lazy.clock)  # thread seconds inside the kernel (overlapping the I/O)
    files = [item.path for item in items]

    if cfg.run.netcdf:
        t2 = time.perf_counter()
        files.append(
            rundir.write_run_netcdf(
                run_dir, outputs=list(lazy.outputs), gridded_inputs=inputs.gridded, tags=tags
            )
        )
        timings["netcdf_s"] = time.perf_counter() - t2

    summary = rundir.build_summary(
        cfg,
        grid=target,
        model=model,
        cooling=cooling,
        provenance=inputs.provenance,
        gridded_inputs=inputs.gridded,
        outputs=list(lazy.outputs),
        statistics=statistics,
        warnings=run_warnings,
    )
    files.append(run_dir / rundir.SUMMARY_NAME)
    timings["total_s"] = time.perf_counter() - t0
    return RunResult(run_dir, files, summary, timings, inputs.sources())
