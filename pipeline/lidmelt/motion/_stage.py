"""The history stage of a run: melting through time over the chunks, and the hotspot tracks.

Run after the run's own outputs are stored (``run_basin(cfg, extra_stages=motion_stages(cfg))``,
like the ensemble stage). It reuses the run's kernel settings (model, table, cooling model) and
its inputs; the grid is computed one row of chunks at a time, each chunk one task
(:func:`lidmelt.motion._history.reduce_history`: every time step of the chunk through
:func:`lidmelt._engine.evaluate_chunk`, reduced as it goes), on local threads or on the run's
dask.distributed scheduler; the reduced rows are written here. Memory is that of one chunk's
inputs and reductions per worker, whatever the number of steps.
"""

from __future__ import annotations

import dataclasses
import time
import uuid
from pathlib import Path
from typing import Any

import numpy as np

from lidmelt._cluster import share
from lidmelt._engine import StageContext, kernel_arguments, kernel_settings
from lidmelt._errors import InputError
from lidmelt._run_inputs import load_inputs
from lidmelt._variables import HISTORY
from lidmelt.grids import _rundir as rundir
from lidmelt.grids._align import align
from lidmelt.grids._io import open_grid, sha256_file
from lidmelt.grids._store import GeoTiffItem, GeoTiffSet
from lidmelt.motion._history import (
    TODAY_NEEDED,
    FrameField,
    HistoryPlan,
    history_layers,
    reduce_history,
)
from lidmelt.motion._plan import (
    DEFAULT_PLATE,
    build_tracks,
    histories,
    history_times,
    step_weights,
)
from lidmelt.motion._tracks import track_points, track_summary, write_track_files

#: The mantle's inputs that stay in the plumes' frame (history module notes).
_FRAME_INPUTS = ("thermal_anomaly_k", "water_wt_pct", "upwelling_mm_yr")


def motion_stages(cfg) -> tuple:
    """The extra stages of :func:`lidmelt._engine.run_basin` for ``cfg``: the history, if the
    workflow has a ``[motion]`` table.

    Parameters
    ----------
    cfg : RunConfig
        The validated workflow.

    Returns
    -------
    tuple
        The stages to pass as ``run_basin(cfg, extra_stages=...)``; empty without motion."""
    return (run_motion_stage,) if getattr(cfg, "motion", None) is not None else ()


def _frame_fields(context: StageContext) -> dict[str, FrameField]:
    """The anomaly, water and upwelling of the run without its plumes, as fields of the plumes'
    frame (a grid is held whole in memory, float32)."""
    cfg = context.cfg
    anomaly = dataclasses.replace(cfg.inputs.thermal_anomaly, plumes=())
    bare = dataclasses.replace(cfg, inputs=dataclasses.replace(cfg.inputs, thermal_anomaly=anomaly))
    chunks = int(cfg.compute.chunk_size)
    values = load_inputs(bare, target=context.target, chunks=chunks).values
    out = {}
    for name in _FRAME_INPUTS:
        value = values.get(name, 0.0)
        if hasattr(value, "data"):
            out[name] = FrameField.from_grid(context.target, np.asarray(value.values))
        else:
            out[name] = FrameField(float(value))
    return out


def _plate_grid(context: StageContext, known: set[int]) -> np.ndarray | None:
    """The plate id of every cell (nearest cell of the plate-id grid; -2 for none), or None;
    an InputError naming the file for ids without rotations where no default serves them."""
    motion = context.cfg.motion
    if motion.plate_ids_file is None:
        return None
    path = motion.plate_ids_file
    da = open_grid(path, name="plate_id", chunks=None)
    values = align(da, context.target, resampling="nearest", name="plate_id").values
    ids = np.where(np.isfinite(values), np.nan_to_num(values), -2).astype(np.int64)
    present = set(np.unique(ids[ids != -2]).tolist())
    lacking = sorted(present - known)
    if lacking and DEFAULT_PLATE not in known:
        msg = (
            f"motion.plate_ids: the plate-id grid {str(path)!r} has cells of plate id(s) "
            f"{', '.join(map(str, lacking[:10]))} without a rotations file in "
            "[motion.plate_rotations] and no motion.rotations for the others. Add their "
            "rotations, or give motion.rotations for every plate without its own."
        )
        raise InputError(msg)
    return ids


def _plan(context: StageContext) -> tuple[HistoryPlan, list, np.ndarray | None]:
    """The history's plan, today's kernel input arrays (dask) and the plate ids."""
    cfg = context.cfg
    motion = cfg.motion
    times = history_times(motion)
    rotations = histories(motion)
    inputs = context.inputs
    settings = kernel_settings(
        cfg, inputs=inputs, model=context.model, table=context.table, cooling=context.cooling
    )
    template = context.target.template(int(cfg.compute.chunk_size))
    args = kernel_arguments(inputs, template=template)
    upwelling = "upwelling_mm_yr" in inputs.values
    needed = [n for n in TODAY_NEEDED if upwelling or n != "melt_production_mm_yr"]
    today = None
    if all(n in cfg.outputs.variables for n in needed):  # t = 0 read from the run's files
        today = {n: context.run_dir / rundir.output_file(n) for n in needed}
        args = args[:1]  # the steps after the present need today's age alone
    scalars = tuple(None if hasattr(a, "dask") else a for a in args)
    plan = HistoryPlan(
        settings=settings, grid=context.target, times=times, weights=step_weights(times),
        rotations={p: h.at(times) for p, h in rotations.items()},
        plumes=build_tracks(cfg, times, rotations), fields=_frame_fields(context),
        scalars=scalars, threshold_km=motion.duration_min_melt_km, upwelling=upwelling,
        today_files=today,
    )  # fmt: skip
    plates = _plate_grid(context, set(rotations))
    return plan, [a for a in args if hasattr(a, "dask")], plates


def _compute_rows(context: StageContext, plan: HistoryPlan, arrays, plates, write) -> None:
    """Reduce every chunk, one row of chunks at a time; ``write(row0, layers)`` each row."""
    import dask

    cfg = context.cfg
    template = context.target.template(int(cfg.compute.chunk_size)).data
    rows, cols = (np.cumsum((0, *c)) for c in template.chunks)
    blocks = [a.rechunk(template.chunks).to_delayed(optimize_graph=False) for a in arrays]
    token = uuid.uuid4().hex
    client = context.client
    if client is not None:  # the plan and its table go to each worker once
        plan_d = share(client, plan)
        kwargs: dict[str, Any] = {"scheduler": client.get}
    else:
        plan_d = dask.delayed(plan, name=f"lidmelt-history-plan-{token}", traverse=False)
        kwargs = {"scheduler": "threads", "num_workers": int(cfg.compute.workers)}
    for i in range(len(rows) - 1):
        tasks = []
        for j in range(len(cols) - 1):
            window = (int(rows[i]), int(rows[i + 1]), int(cols[j]), int(cols[j + 1]))
            ids = None if plates is None else plates[window[0] : window[1], window[2] : window[3]]
            tasks.append(
                dask.delayed(reduce_history, pure=True)(
                    plan_d, window, [b[i, j] for b in blocks], ids,
                    dask_key_name=f"lidmelt-history-{token}-{i}-{j}",
                )
            )  # fmt: skip
        results = dask.compute(*tasks, **kwargs)
        write(int(rows[i]), list(np.concatenate(results, axis=2)))


def _files_entry(cfg) -> dict[str, Any]:
    """The motion files read, with their SHA-256 (provenance)."""
    motion = cfg.motion
    files = {"rotations": motion.rotations_file, "plate_ids": motion.plate_ids_file,
             "plume_drift": motion.drift_file}  # fmt: skip
    files.update({f"plate_rotations.{p}": path for p, path, _ in motion.plate_rotations})
    return {
        key: {"source": str(path), "sha256": sha256_file(path)}
        for key, path in files.items()
        if path is not None
    }


def run_motion_stage(context: StageContext) -> tuple[list[Path], dict[str, Any]]:
    """Evaluate the history of ``context.cfg`` and write its layers, tracks and summary entry."""
    t0 = time.perf_counter()
    cfg = context.cfg
    plan, arrays, plates = _plan(context)
    t_plan = time.perf_counter()
    names = history_layers(plan.upwelling)
    template = context.target.template(int(cfg.compute.chunk_size))
    items = []
    for name in names:
        var = HISTORY[name]
        tags = {**context.tags, "variable": name, "units": var.units}
        path = context.run_dir / rundir.output_file(name)
        items.append(GeoTiffItem(template, path, var.long_name, var.units, tags))
    # the run checks every file before it is sealed (rundir.seal_run): no read-back here
    with GeoTiffSet(items, cog=cfg.outputs.cloud_optimized, verify=False) as out:
        _compute_rows(context, plan, arrays, plates, out.write_rows)
    t1 = time.perf_counter()
    age = context.inputs.values["plate_age_ma"]
    age = np.asarray(age.values if hasattr(age, "values") else age, float)
    age = np.broadcast_to(age, context.target.shape)
    points = track_points(plan, age, plates)
    files = [item.path for item in items]
    files += write_track_files(context.run_dir, points, plan)
    motion = cfg.motion
    entry = {
        "max_age_ma": motion.max_age_ma,
        "step_ma": motion.step_ma,
        "steps": len(plan.times),
        "duration_min_melt_km": motion.duration_min_melt_km,
        "files": _files_entry(cfg),
        "plates": sorted(int(p) for p in plan.rotations if p != DEFAULT_PLATE),
        "default_rotations": DEFAULT_PLATE in plan.rotations,
        "frame": (
            "plumes and the mantle's anomaly, water and upwelling grids fixed in the plumes' "
            "frame (grids sampled at each cell's position then, their edge values beyond "
            "them); plate age, lid and water load move with the plate (age then = age today "
            "minus the time); distances on a sphere of 6371 km after t = 0"
        ),
        "tracks": track_summary(points, plan),
        "history_s": t1 - t0,
        "history_plan_s": t_plan - t0,
        # thread seconds in the kernel (lid and melting; local threads only)
        "history_kernel_thread_s": sum(plan.clock.values()),
        "compute_s": time.perf_counter() - t0,
    }
    outputs = {
        name: {"file": item.path.name, "units": item.units, "long_name": item.description}
        for name, item in zip(names, items, strict=True)
    }
    return files, {"motion": entry, "outputs": outputs}
