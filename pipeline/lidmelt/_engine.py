"""The basin run: inputs aligned to one grid, the melting kernel chunk by chunk, GeoTIFF outputs.

:func:`run_basin` takes a run configuration (as made by :func:`lidmelt.workflow.load_workflow`;
any object with the same attributes works) and runs these stages: :func:`load_model` (the
melting model and its table), :func:`resolve_target_grid`, :func:`load_inputs` (every input
aligned onto the grid, or a constant), :func:`lid_cooling_model` (the lid from the plate age, or
a lid grid), :func:`build_kernel` (the lazy dask kernel over chunks: every variable of
:data:`lidmelt._variables.OUTPUTS` and the validity flag), :func:`plan_geotiffs` and
:func:`store_with_statistics` (one pass that stores every GeoTIFF and computes the summary
statistics band by band), :func:`lidmelt.grids._runnetcdf.write_run_netcdf` (optional) and the
summary (:func:`lidmelt.grids._rundir.build_summary`). Peak memory is set by the chunk size,
not by the grid size. Units, long names and ranges come from :mod:`lidmelt._variables`; file
names and the summary format from :mod:`lidmelt.grids._rundir`.
"""

from __future__ import annotations

import functools
import time
import uuid
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np
import xarray as xr

from lidmelt import _run_store as run_store
from lidmelt._cluster import connect, share
from lidmelt._progress import band_reporter
from lidmelt._run_inputs import (
    LID_INPUTS,
    READ_ERRORS,
    RunInputs,
    chunk_water_load,
    explain_read_failure,
    files_read,
    geotherm_lid,
    lid_cooling_model,
    load_inputs,
    load_model,
    refuse_without_data,
    resolve_target_grid,
)
from lidmelt._statistics import ambient_melting_warnings, band_parts, summarize_bands
from lidmelt._variables import (
    FLAG_NODATA,
    FLAG_VARIABLE,
    INPUTS,
    OUTPUTS,
    check_input_range,
)
from lidmelt.grids import _rundir as rundir
from lidmelt.grids._area import cell_area_km2, row_areas_km2
from lidmelt.grids._grid import Grid
from lidmelt.grids._runnetcdf import write_run_netcdf
from lidmelt.grids._stac import write_run_catalogue
from lidmelt.grids._store import GeoTiffItem, GeoTiffSet
from lidmelt.grids._transaction import RunTransaction
from lidmelt.physics import FLAG_MEANINGS, evaluate_cells
from lidmelt.physics._cells import CellOptions
from lidmelt.physics._kernel_records import Cells
from lidmelt.physics._lidlookup import lid_lookup
from lidmelt.physics._table import TableFile

#: The kernel's inputs, in the order of its positional arguments.
_KERNEL_INPUTS = (
    "plate_age_ma", "lid_thickness_km", "thermal_anomaly_k", "water_wt_pct", "upwelling_mm_yr",
    "water_depth_m",
)  # fmt: skip
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


@dataclass(frozen=True, kw_only=True)
class StageContext:
    """What :func:`run_basin` hands to an extra stage: ``stage(context) -> (files, entries)``."""

    cfg: Any
    run_dir: Path
    target: Grid
    inputs: RunInputs
    model: Any
    table: Any | None
    cooling: Any | None
    tags: dict[str, Any]
    progress: bool | None
    client: Any = None  # the run's dask.distributed client (lidmelt._cluster.connect), or None


@dataclass(frozen=True, kw_only=True)
class KernelSettings:
    """Everything :func:`evaluate_chunk` needs besides the input blocks."""

    model: Any
    table: Any | None
    cooling: Any | None
    lid_isotherm_c: float
    ambient_c: float
    top_of_melting: str = "isotherm"
    min_top_km: float
    method: str
    sources: dict[str, str]
    crust_density_kg_m3: float = 2900.0
    upwelling: bool = False
    water_load: str = "none"  # "bathymetry", "age" or "none" (RunInputs.water_load)


@dataclass
class LazyRun:
    """The lazy kernel of a run: the stacked dask array and the views of it that are written.

    ``stacked`` is (n_outputs + 1, y, x) float32 with one layer per variable of
    :data:`lidmelt._variables.OUTPUTS` and the validity flag last; ``outputs`` holds the
    requested variables as (y, x) DataArrays; ``clock`` accumulates the kernel's thread seconds.
    """

    stacked: Any
    outputs: dict[str, xr.DataArray]
    flag: xr.DataArray
    clock: dict[str, float]


class ChunkInputs(NamedTuple):
    """The input blocks of one chunk (arrays that broadcast together, or constants), in the
    order of :data:`_KERNEL_INPUTS`: plate age [Ma], lid thickness [km] (NaN: from the age),
    thermal anomaly [K], water [wt%], upwelling [mm/yr] and water depth [m]."""

    plate_age_ma: Any
    lid_thickness_km: Any
    thermal_anomaly_k: Any
    water_wt_pct: Any
    upwelling_mm_yr: Any = 0.0
    water_depth_m: Any = np.nan


# ---- the kernel ----------------------------------------------------------------------------------
def evaluate_chunk(
    blocks: ChunkInputs, *, settings: KernelSettings, clock=None, check_inputs: bool = True
):
    """Every output of one chunk, stacked as (n_outputs + 1, y, x) float32 (flag last).

    The lid is the input lid thickness where finite, else from the plate age: the isotherm depth
    of the cooling model (:func:`lidmelt.physics.lid_lookup`, within 0.01 km of the exact depth)
    or, with ``top_of_melting = "geotherm"``, where each column meets its geotherm
    (:func:`lidmelt.physics.geotherm_tops`); cells without a lid, anomaly or water are NaN (flag
    :data:`lidmelt._variables.FLAG_NODATA`), and so are outputs the inputs do not give (melt
    production without upwelling). The water above the seafloor loads the column
    (``settings.water_load``: the ``water_depth_m`` block of a bathymetry, or the cooling
    model's seafloor depth at the plate age; none otherwise). ``clock``, a dict shared by the
    chunks of a run (dask threads), accumulates the thread seconds spent on the lid and on
    melting. ``check_inputs=False`` skips the range
    check of input blocks that were already checked (an ensemble's members sharing one input group).
    """
    s = settings
    if isinstance(s.table, TableFile):  # a cluster's worker: the table read once from its file
        s = replace(s, table=s.table.load())
    t0 = time.perf_counter()
    age, lid_grid, anomaly, water, upwelling, water_depth = blocks
    shape = np.broadcast_shapes(*(np.shape(a) for a in blocks))
    for name, block in zip(_KERNEL_INPUTS, blocks, strict=True):
        if check_inputs and name in s.sources and np.ndim(block):
            check_input_range(block, name, s.sources[name])
    lid = np.broadcast_to(np.asarray(lid_grid, float), shape)
    tp = s.ambient_c + np.broadcast_to(np.asarray(anomaly, float), shape)
    water_arg = water if np.ndim(water) == 0 else np.broadcast_to(water, shape)
    load = 0.0
    if s.water_load == "bathymetry" or (s.water_load == "age" and s.cooling is not None):
        load = chunk_water_load(s.water_load, age, water_depth, shape, s.cooling, s.model)
    geotherm = {}
    if s.cooling is not None and s.top_of_melting == "geotherm":
        lid, geotherm = geotherm_lid(
            s.model, s.table, s.cooling, (age, lid_grid, tp, water_arg, load), shape,
            ambient_c=s.ambient_c, min_top_km=s.min_top_km,
        )  # fmt: skip
    elif s.cooling is not None:
        lookup = lid_lookup(s.lid_isotherm_c, model=s.cooling)  # built once, cached
        from_age = lookup.depth_km(np.broadcast_to(age, shape))
        given = np.ndim(lid_grid) or np.isfinite(lid_grid)
        lid = np.where(np.isfinite(lid), lid, from_age) if given else from_age
    t1 = time.perf_counter()
    out = np.empty((len(OUTPUTS) + 1, *shape), np.float32)
    rows = out.reshape(len(OUTPUTS) + 1, -1)
    cells = Cells(
        tp, lid, water_arg, water_load_km=load,
        upwelling_mm_yr=np.broadcast_to(upwelling, shape) if s.upwelling else None, **geotherm,
    )  # fmt: skip
    options = CellOptions(
        ambient_potential_temperature_c=s.ambient_c, model=s.model, method=s.method,
        table=s.table, min_top_km=s.min_top_km, crust_density_kg_m3=s.crust_density_kg_m3,
        nodata=FLAG_NODATA,
    )  # fmt: skip
    res = evaluate_cells(cells, options, dtype=np.float32, out=rows[:-1])
    rows[-1] = res.flag.ravel()
    if clock is not None:  # dict updates of floats are atomic enough for a timing summary
        clock["lid_thread_s"] = clock.get("lid_thread_s", 0.0) + t1 - t0
        clock["melting_thread_s"] = clock.get("melting_thread_s", 0.0) + time.perf_counter() - t1
    return out


@dataclass(frozen=True, eq=False)
class _ChunkKernel:
    """:func:`evaluate_chunk` as a dask block function: constants filled in, age broadcast.
    The settings come as one node of the graph every chunk depends on (:func:`_shared`)."""

    scalars: tuple  # per kernel input: its constant, or None where a dask block is passed
    clock: dict[str, float]  # filled on local threads only (a worker's copy stays there)

    def __call__(self, *blocks, settings: KernelSettings, block_info=None):
        it = iter(blocks)
        shape = block_info[None]["chunk-shape"][1:]
        vals = [next(it) if s is None else s for s in self.scalars]
        vals[0] = np.broadcast_to(vals[0], shape)  # the lid from age needs an age everywhere
        return evaluate_chunk(ChunkInputs(*vals), settings=settings, clock=self.clock)


def _as_dask(value, chunks: int):
    """A dask array of an input DataArray; a constant stays a float."""
    import dask.array as dsa

    if not isinstance(value, xr.DataArray):
        return value
    if isinstance(value.data, dsa.Array):
        return value.data
    return dsa.from_array(value.values, chunks=chunks)


def kernel_settings(cfg, *, inputs: RunInputs, model, table, cooling) -> KernelSettings:
    """The :class:`KernelSettings` of ``cfg`` for these inputs, model, table and cooling model."""
    return KernelSettings(
        model=model, table=table, cooling=cooling, lid_isotherm_c=cfg.lithosphere.lid_isotherm_c,
        ambient_c=cfg.model.ambient_potential_temperature_c,
        top_of_melting=cfg.lithosphere.top_of_melting,
        min_top_km=cfg.model.min_top_of_melting_km, method=cfg.compute.method,
        sources=inputs.sources(), crust_density_kg_m3=cfg.model.crust_density_kg_m3,
        upwelling="upwelling_mm_yr" in inputs.values, water_load=inputs.water_load[0],
    )  # fmt: skip


def kernel_arguments(inputs: RunInputs, *, template: xr.DataArray) -> list:
    """The kernel's inputs: dask arrays chunked like ``template``, or constants (NaN: no lid)."""
    import dask.array as dsa

    chunks = template.data.chunks
    values = [inputs.values.get(n, np.nan if n in LID_INPUTS else 0.0) for n in _KERNEL_INPUTS]
    if inputs.water_load[1] is not None:
        values[-1] = inputs.water_load[1]
    args = [_as_dask(v, chunks) for v in values]
    return [a.rechunk(chunks) if isinstance(a, dsa.Array) else a for a in args]


def build_kernel(
    cfg, *, inputs: RunInputs, template: xr.DataArray, model, table, cooling, client=None
) -> LazyRun:
    """The lazy kernel over the chunks of ``template``: one dask graph for every output.

    The outputs not in ``cfg.outputs.variables`` are computed (they share the column) but not
    returned in :attr:`LazyRun.outputs`. With ``client`` (dask.distributed), the settings
    reach every worker once (:func:`lidmelt._cluster.share`), not with each band's graph.
    """
    import dask.array as dsa

    settings = kernel_settings(cfg, inputs=inputs, model=model, table=table, cooling=cooling)
    args = kernel_arguments(inputs, template=template)
    scalars = tuple(None if isinstance(a, dsa.Array) else a for a in args)
    ref = template.data
    # with every input constant, the template alone carries the grid's chunks to the kernel
    arrays = [a for a in args if isinstance(a, dsa.Array)] or [ref]
    clock: dict[str, float] = {}
    token = uuid.uuid4().hex  # unique names spare hashing the model's table
    stacked = dsa.map_blocks(
        _ChunkKernel(scalars, clock),
        *arrays,
        settings=_shared(settings, f"lidmelt-settings-{token}", client),
        name=f"lidmelt-kernel-{token}",
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


def _shared(value, name: str, client):
    """``value`` as one node of a dask graph: on ``client``'s workers (:func:`share`: once
    each, a melting table by its file), or a delayed value for local threads. Never part of
    each task (a table is 220 MB)."""
    import dask

    if client is not None:
        return share(client, value)
    return dask.delayed(value, name=name, traverse=False)


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
    scheduler: Any = None,
    cog: bool = False,
    store: Any = None,
) -> dict[str, Any]:
    """Store every GeoTIFF and compute the summary statistics in one dask pass.

    The grid is computed in bands of two chunk rows (one :func:`dask.compute` each), so the
    kernel runs once per chunk whatever the number of files; ``area`` is the cell area (km2,
    dask), or a numpy column (y, 1) of row areas (:func:`statistics_area`).
    ``inputs`` gives the plate age (for the median age of ambient-melting cells) and whether
    upwelling is known (for the melt production total). ``cog`` gives the files the
    Cloud-Optimized layout (``[outputs] cloud_optimized``). The files are only checked for structure
    here: the run checks every file before it is sealed (:func:`lidmelt.grids._rundir.seal_run`).
    ``scheduler``, a dask.distributed client (:func:`lidmelt._cluster.connect`), computes the
    chunks on its workers; the files are written here. ``store``, the run's Zarr store
    (:class:`lidmelt.grids._zarr.RunStore`), is written in the same pass by the tasks that
    compute the chunks (on the workers with ``scheduler``). Returns the ``statistics`` entry of
    the summary (:func:`lidmelt._statistics.summarize_bands`).
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
        area=area if isinstance(area, np.ndarray) else area.rechunk(ref_chunks),
        age=None if age is None else age.rechunk(ref_chunks),
        out_index=out_index,
        integrals=[list(OUTPUTS).index(n) for n in integrals],
    )
    if store is not None:  # the band's store task joins its statistics (dropped from results)
        extra = functools.partial(lambda base, rows: [*base(rows), store.band(rows)], extra)
    rows = 2 * ref_chunks[0][0]
    t0 = time.perf_counter()
    try:
        with GeoTiffSet(items, cog=cog, verify=False) as out:
            bands = out.compute(
                extra=extra, band_rows=rows, num_workers=workers, report=report,
                scheduler=scheduler, height=lazy.stacked.shape[1],
            )  # fmt: skip
            t1 = time.perf_counter()
    except BaseException:
        if store is not None:  # threads may still be writing chunks into the staged store
            store.close()
        raise
    if store is not None:  # consolidated now, so a refused run's flags can be read back
        store.finish()
        bands = [band[:-1] for band in bands]
    lazy.clock["store_s"] = t1 - t0
    lazy.clock["finish_files_s"] = time.perf_counter() - t1
    return summarize_bands(bands, names=names, integrals=integrals)


def statistics_area(target: Grid, *, chunks: int):
    """The cell areas (km2) the statistics weigh by.

    A geographic grid gives one numpy column (y, 1) of row areas (:func:`row_areas_km2`: the
    cells of a row are equal), which each chunk's statistics slice and broadcast; it is no
    node of the dask graph, so each chunk's statistics depend on the kernel's chunk alone and
    run as soon as it is computed (a dask area array made the scheduler hold a band of kernel
    chunks: peak RSS 1.7 GB instead of 0.7 GB, benchmarks/bench_basin.py). Any other grid
    gives every cell's area (:func:`cell_area_km2`, dask, chunked along ``chunks``).
    """
    if target.is_geographic:
        return row_areas_km2(target)[:, None]
    return cell_area_km2(target, chunks=chunks).data


# ---- the run -------------------------------------------------------------------------------------
def _run_stages(stages, context: StageContext, files: list[Path]) -> dict[str, Any]:
    """Run each extra stage; add its files to ``files`` and return its summary entries."""
    entries: dict[str, Any] = {}
    for stage in stages:
        stage_files, stage_entries = stage(context)
        files += stage_files
        for key, value in stage_entries.items():  # two stages' outputs and warnings add up
            if key in entries and key in ("outputs", "warnings"):
                value = {**entries[key], **value} if key == "outputs" else entries[key] + value
            entries[key] = value
    return entries


def run_basin(
    cfg,
    *,
    output_dir: str | Path | None = None,
    progress: bool | None = None,
    products: Callable[[Path], list[Path]] | None = None,
    wait: bool = False,
    extra_stages: tuple[Callable[[StageContext], tuple[list[Path], dict]], ...] = (),
) -> RunResult:
    """Run a whole basin from a workflow configuration; return what was written.

    The run is a transaction (:class:`lidmelt.grids._transaction.RunTransaction`): it takes the
    destination's lock, writes everything into a staging folder beside it, checks every file
    (:func:`lidmelt.grids._rundir.seal_run`), records the manifest in the summary, and only
    then swaps the staging folder into place. On any error or interruption the destination
    keeps its previous run.

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
    extra_stages : tuple of callables
        Run after the outputs are stored, each ``stage(StageContext) -> (files, summary
        entries)`` (an ``"outputs"`` entry adds to the run's outputs), e.g. the ensemble.

    Returns
    -------
    RunResult
        The run directory, its files, the summary and the timings.

    Raises
    ------
    LidmeltError
        For any bad input (file, grid, range, model), a destination locked by another run, or
        a run without a single evaluable cell; nothing is left half-written.
    """
    dest, reads = output_dir or cfg.run.output_dir, files_read(cfg)
    with RunTransaction(dest, wait=wait, inputs=reads) as tx, connect(cfg) as client:
        try:
            at = run_store.store_location(cfg, tx)  # a new store at [outputs] zarr_url
            result = _run_staged(cfg, tx.staging, progress, extra_stages, client, store_at=at)
        except READ_ERRORS as exc:  # a damaged input file? name it and its workflow key
            explained = explain_read_failure(cfg, exc)
            if explained is None:
                raise
            raise explained from exc
        t0 = time.perf_counter()
        rundir.seal_run(tx.staging, result.summary, sources=result.sources)
        result.timings_s["seal_s"] = time.perf_counter() - t0
        drawn = list(products(tx.staging)) if products else []
        drawn += write_run_catalogue(tx.staging)  # STAC: lists every file, so written last
        t1 = time.perf_counter()
        tx.commit()
        result.timings_s["commit_s"] = time.perf_counter() - t1
    files = [tx.dest / Path(p).relative_to(tx.staging) for p in [*result.files, *drawn]]
    return replace(result, run_dir=tx.dest, files=files)


def _run_staged(
    cfg, run_dir: Path, progress: bool | None, extra_stages: tuple, client, *, store_at=None
) -> RunResult:
    """Every stage of a run, writing into ``run_dir`` (the staging folder); ``client``: a
    dask.distributed client computes the chunks, or None (local threads); ``store_at``: the
    URL of the run's Zarr store (:func:`lidmelt._run_store.store_location`), or None."""
    t0 = time.perf_counter()
    run_store.check_formats(cfg)
    chunks = int(cfg.compute.chunk_size)
    model, table = load_model(cfg)
    timings = {"table_s": time.perf_counter() - t0}

    target = resolve_target_grid(cfg)
    template = target.template(chunks)
    inputs = load_inputs(cfg, target=target, chunks=chunks)
    timings["inputs_s"] = time.perf_counter() - t0 - timings["table_s"]
    cooling = lid_cooling_model(cfg, inputs=inputs)

    lazy = build_kernel(
        cfg, inputs=inputs, template=template, model=model, table=table, cooling=cooling,
        client=client,
    )  # fmt: skip
    tags = rundir.provenance_tags(cfg, model=model, cooling=cooling, provenance=inputs.provenance)
    items = plan_geotiffs(
        run_dir, lazy=lazy, inputs=inputs, template=template, chunks=chunks, tags=tags
    )
    store = run_store.plan_store(cfg, run_dir, items, tags=tags, at=store_at, stacked=lazy.stacked)
    t1 = time.perf_counter()
    statistics = store_with_statistics(
        items if cfg.outputs.geotiff else [],
        lazy=lazy,
        area=statistics_area(target, chunks=chunks),
        workers=int(cfg.compute.workers),
        report=band_reporter(progress),
        inputs=inputs,
        scheduler=client,
        cog=cfg.outputs.cloud_optimized,
        store=store,
    )
    flags = run_store.flag_source(cfg, run_dir, store)
    refuse_without_data(cfg, inputs=inputs, statistics=statistics, flag_path=flags, model=model)
    run_warnings = ambient_melting_warnings(
        statistics, ambient_c=cfg.model.ambient_potential_temperature_c, issue=True
    )
    timings["compute_and_write_s"] = time.perf_counter() - t1
    timings.update(lazy.clock)  # thread seconds inside the kernel (overlapping the I/O)
    files = [item.path for item in items] if cfg.outputs.geotiff else []
    files += run_store.local_files(store)

    if cfg.run.netcdf:
        t2 = time.perf_counter()
        files.append(
            write_run_netcdf(
                run_dir, outputs=list(lazy.outputs), gridded_inputs=inputs.gridded, tags=tags
            )
        )
        timings["netcdf_s"] = time.perf_counter() - t2

    context = StageContext(
        cfg=cfg, run_dir=run_dir, target=target, inputs=inputs, model=model, table=table,
        cooling=cooling, tags=tags, progress=progress, client=client,
    )  # fmt: skip
    staged = _run_stages(extra_stages, context, files)
    record = rundir.RunRecord(
        grid=target,
        model=model,
        cooling=cooling,
        provenance=inputs.provenance,
        gridded_inputs=inputs.gridded,
        outputs=list(lazy.outputs),
        statistics=statistics,
        warnings=run_warnings,
        extra={"water_load": inputs.water_load[2], **staged},
    )
    run_store.add_stage_layers(store, run_dir, staged)
    summary = rundir.build_summary(cfg, record)
    summary = run_store.record_formats(summary, store, cfg.outputs.geotiff)
    files.append(run_dir / rundir.SUMMARY_NAME)
    timings["total_s"] = time.perf_counter() - t0
    return RunResult(run_dir, files, summary, timings, inputs.sources())
