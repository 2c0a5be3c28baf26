"""Reading the ``[motion]`` table: the plate's finite rotations over the plumes (docs/workflow.md).

The rotations files (and the plume drift file) are read and checked here, when the workflow is
loaded, so a bad table stops the run before anything is read or written; so does a plume whose
hotspot track never lies within the grid over the history, and a workflow without a plate age
(the lid then comes from the age then).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from lidmelt._config import RunConfig
from lidmelt._config_tables import MotionOptions
from lidmelt._errors import LidmeltError, WorkflowError
from lidmelt.grids._motionfiles import read_plume_drift, read_rotations
from lidmelt.workflow._checks import Context, in_range, shown, string, table, user_path

#: The most time steps of a history (each is one evaluation of the grid).
MAX_STEPS = 10_000
#: The oldest history, Ma (the oldest ocean floor is about 200 Ma, from memory; the registry's
#: plate age range is 0-400 Ma).
_MAX_AGE_MA = 400.0


def read_motion(ctx: Context, tree: dict[str, Any], cfg: RunConfig) -> MotionOptions | None:
    """The ``[motion]`` table of ``tree`` (None without one), its files read and checked."""
    if "motion" not in tree:
        return None
    values = table(ctx, "motion", tree["motion"])
    _check_inputs(ctx, cfg)
    if "max_age_ma" not in values:
        msg = (
            f"{ctx.where('motion')} has no max_age_ma; give the oldest time of the history in "
            "Ma, e.g. max_age_ma = 30.0 (at most the last age of the rotations file)."
        )
        raise WorkflowError(msg)
    max_age = in_range(ctx, "motion.max_age_ma", values["max_age_ma"], 1e-6, _MAX_AGE_MA, "Ma",
                       "give the oldest time of the history in Ma")  # fmt: skip
    step = 1.0
    if "step_ma" in values:
        step = in_range(ctx, "motion.step_ma", values["step_ma"], 1e-3, max_age, "Ma",
                        "give the time step of the history in Ma, at most max_age_ma")  # fmt: skip
    steps = max_age / step
    if abs(steps - round(steps)) > 1e-9 * max(steps, 1.0) or round(steps) + 1 > MAX_STEPS:
        msg = (
            f"{ctx.where('motion.step_ma')} is {step:g} Ma with max_age_ma = {max_age:g} Ma: "
            f"{steps:.6g} steps; expected a whole number of steps, at most {MAX_STEPS - 1}. "
            "Choose a step that divides max_age_ma (e.g. step_ma = 1.0)."
        )
        raise WorkflowError(msg)
    opts: dict[str, Any] = {"max_age_ma": max_age, "step_ma": step}
    if "duration_min_melt_km" in values:
        opts["duration_min_melt_km"] = in_range(
            ctx, "motion.duration_min_melt_km", values["duration_min_melt_km"], 1e-6, 1000.0,
            "km", "give the melt the anomaly adds that counts as melting, in km",
        )  # fmt: skip
    base = cfg.workflow_path.parent
    opts.update(_read_rotation_files(ctx, values, base, max_age))
    if "plume_drift" in values:
        path = _file(ctx, "motion.plume_drift", values["plume_drift"], base)
        names = {name: (p.longitude, p.latitude) for name, p in plume_labels(cfg).items()}
        drift = _wrapped(ctx, "motion.plume_drift", read_plume_drift, path, plumes=names,
                         max_age_ma=max_age)  # fmt: skip
        opts["drift_file"] = path
        opts["drift"] = tuple(
            (name, tuple(a), tuple(lon), tuple(lat)) for name, (a, lon, lat) in drift.items()
        )
    options = MotionOptions(**opts)
    _check_plumes_reach_grid(ctx, tree, cfg, options)
    return options


def _check_inputs(ctx: Context, cfg: RunConfig) -> None:
    """Refuse a history without a plate age, or with a lid grid (module notes)."""
    if cfg.inputs.plate_age is None or cfg.inputs.lid_thickness is not None:
        given = "only inputs.lid_thickness" if cfg.inputs.plate_age is None else "a lid grid"
        msg = (
            f"{ctx.where('motion')} needs inputs.plate_age and no inputs.lid_thickness: through "
            "time the lid of each cell comes from its age then (age today minus the time) "
            f"through the cooling model, and the workflow gives {given}, which is today's lid "
            "only. Give [inputs.plate_age] (a plate age grid in Ma) and remove "
            "[inputs.lid_thickness], or remove the [motion] table."
        )
        raise WorkflowError(msg)
    if not cfg.inputs.thermal_anomaly.plumes:
        msg = (
            f"{ctx.where('motion')} needs at least one plume (inputs.thermal_anomaly.plumes or "
            "plumes_file): the hotspot tracks follow the plumes. Add the plumes, or remove "
            "the [motion] table."
        )
        raise WorkflowError(msg)


def _file(ctx: Context, key: str, value: Any, base: Path) -> Path:
    written = string(ctx, key, value, example="rotations.csv")
    path = user_path(written, base=base, what=ctx.where(key))
    if not path.is_file():
        msg = (
            f"{ctx.where(key)} = {shown(written)}: the file '{path}' does not exist. Paths are "
            f"relative to the workflow file's folder ({base})."
        )
        raise WorkflowError(msg)
    return path


def _wrapped(ctx: Context, key: str, reader, *args, **kwargs):
    """``reader(*args, **kwargs)``; its error as a WorkflowError naming the key."""
    try:
        return reader(*args, **kwargs)
    except LidmeltError as exc:
        msg = f"{ctx.where(key)}: {exc}"
        raise WorkflowError(msg) from exc


def _rows(rows) -> tuple[tuple[float, float, float, float], ...]:
    return tuple(zip(rows.ages, rows.pole_lat, rows.pole_lon, rows.angle_deg, strict=True))


def _read_rotation_files(
    ctx: Context, values: dict[str, Any], base: Path, max_age: float
) -> dict[str, Any]:
    """``rotations``, ``plate_ids`` and ``plate_rotations`` as MotionOptions fields."""
    out: dict[str, Any] = {}
    if "rotations" in values:
        path = _file(ctx, "motion.rotations", values["rotations"], base)
        rows = _wrapped(ctx, "motion.rotations", read_rotations, path, max_age_ma=max_age)
        out.update(rotations_file=path, rotations=_rows(rows))
    per_plate = table(ctx, "motion.plate_rotations", values.get("plate_rotations", {}))
    if ("plate_ids" in values) != bool(per_plate):
        given = "plate_ids" if "plate_ids" in values else "plate_rotations"
        msg = (
            f"{ctx.where('motion')} gives {given} without the other; a plate-id grid "
            "(plate_ids) goes with a rotations file per plate id ([motion.plate_rotations], "
            'e.g. "101" = "rot_101.csv"). Give both, or '
            "neither (one plate: motion.rotations)."
        )
        raise WorkflowError(msg)
    if "plate_ids" in values:
        out["plate_ids_file"] = _file(ctx, "motion.plate_ids", values["plate_ids"], base)
    plates = []
    for name, value in per_plate.items():
        key = f"motion.plate_rotations.{name}"
        try:
            plate = int(name)
        except ValueError:
            plate = None
        if plate is None or str(plate) != name.strip():
            msg = (
                f"{ctx.where(key)}: {shown(name)} is not a plate id; the keys of "
                '[motion.plate_rotations] are the whole numbers of the plate-id grid ("101").'
            )
            raise WorkflowError(msg)
        path = _file(ctx, key, value, base)
        rows = _wrapped(ctx, key, read_rotations, path, max_age_ma=max_age)
        plates.append((plate, path, _rows(rows)))
    if not out.get("rotations") and not plates:
        msg = (
            f"{ctx.where('motion')} has no rotations; give motion.rotations, the CSV of finite "
            "rotations (age_ma, pole_lat, pole_lon, angle_deg) of the plate over the plumes."
        )
        raise WorkflowError(msg)
    out["plate_rotations"] = tuple(sorted(plates))
    return out


def plume_labels(cfg: RunConfig) -> dict[str, Any]:
    """The plumes of ``cfg`` by the name the products give them (``plume N`` without one)."""
    plumes = cfg.inputs.thermal_anomaly.plumes
    return {(p.name or f"plume {i}"): p for i, p in enumerate(plumes, start=1)}


def _where_plume(ctx: Context, tree: dict[str, Any], cfg: RunConfig, i: int) -> str:
    """Where plume ``i`` (from 1) was given: its workflow key, or its catalogue file and row."""
    anomaly = tree.get("inputs", {}).get("thermal_anomaly", {})
    inline = len(anomaly.get("plumes", [])) if isinstance(anomaly, dict) else 0
    if i <= inline:
        return ctx.where(f"inputs.thermal_anomaly.plumes.{i}")
    written = cfg.inputs.thermal_anomaly.plumes_file
    return (
        f"row {i - inline} of the plume catalogue {written!r} (inputs.thermal_anomaly.plumes_file)"
    )


def _check_plumes_reach_grid(
    ctx: Context, tree: dict[str, Any], cfg: RunConfig, motion: MotionOptions
) -> None:
    """Refuse a plume whose track lies outside the grid at every time of the history."""
    from lidmelt._run_inputs import resolve_target_grid
    from lidmelt.motion._plan import histories, plume_positions

    try:
        grid = resolve_target_grid(cfg)
    except LidmeltError:
        return  # the run reports the grid's own problem, with its key
    times = np.arange(round(motion.max_age_ma / motion.step_ma) + 1) * motion.step_ma
    rotations = histories(motion)
    for i, (name, plume) in enumerate(plume_labels(cfg).items(), start=1):
        lon_p, lat_p = plume_positions(motion, name, plume, times)
        inside = False
        for history in rotations.values():
            lon, lat = history.track(lon_p, lat_p, times)
            row, col = grid.fractional_index(*grid.to_grid_xy(lon, lat, "EPSG:4326"))
            h, w = grid.shape
            inside = inside or bool(
                np.any((row >= -0.5) & (row <= h - 0.5) & (col >= -0.5) & (col <= w - 0.5))
            )
        if not inside:
            msg = (
                f"plume {name[:80]!r} ({_where_plume(ctx, tree, cfg, i)}, at {plume.longitude:g} "
                f"E, {plume.latitude:g} N) never lies under the grid between 0 and "
                f"{motion.max_age_ma:g} Ma: its hotspot track on today's plate stays outside the "
                f"grid's bounds {tuple(round(b, 4) for b in grid.bounds)} at every time. Remove "
                "the plume, widen the grid, or check the rotations and the plume's position."
            )
            raise WorkflowError(msg)
