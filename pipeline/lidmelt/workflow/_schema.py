"""The keys a workflow file may hold, and the check for unknown keys (with a suggestion)."""

from __future__ import annotations

import difflib
from collections.abc import Sequence
from typing import Any

from lidmelt._config import INPUT_NAMES
from lidmelt._errors import WorkflowError
from lidmelt.workflow._checks import Context, leaf, shortened

_INPUT_KEYS = ("path", "variable", "resampling", "constant")
# How to read a grid file: any input.
_FILE_KEYS = ("crs", "units", "scale", "offset", "x_name", "y_name", "nodata")
_PLUME_KEYS = (
    "name",
    "longitude",
    "latitude",
    "radius_km",
    "peak_excess_k",
    "shape",
    "peak_upwelling_mm_yr",
)
#: The keys allowed in each table (dotted table name -> keys). ``"*"`` marks a free table whose
#: keys are checked by the model functions (see ``validate_models``); ``"[]"`` marks an array of
#: tables.
SCHEMA: dict[str, tuple[str, ...]] = {
    "": (
        "run",
        "grid",
        "inputs",
        "model",
        "lithosphere",
        "compute",
        "outputs",
        "ensemble",
        "motion",
        "assess",
    ),
    "run": ("name", "output_dir", "netcdf", "maps", "report"),
    "grid": ("like", "extent", "resolution", "crs"),
    "inputs": INPUT_NAMES,
    **{f"inputs.{name}": (*_INPUT_KEYS, *_FILE_KEYS) for name in INPUT_NAMES},
    "inputs.thermal_anomaly": (
        *_INPUT_KEYS,
        "plumes",
        *_FILE_KEYS,
        "plumes_file",
        "dlnvs_dt_per_k",
    ),
    "inputs.lid_thickness": (*_INPUT_KEYS, *_FILE_KEYS, "reference", "bathymetry"),
    "inputs.thermal_anomaly.plumes[]": _PLUME_KEYS,
    "model": (
        "name",
        "ambient_potential_temperature_c",
        "min_top_of_melting_km",
        "crust_density_kg_m3",
        "parameters",
    ),
    "model.parameters": ("*",),
    "lithosphere": ("cooling", "lid_isotherm_c", "top_of_melting", "parameters"),
    "lithosphere.parameters": ("*",),
    "compute": ("chunk_size", "workers", "method", "scheduler", "max_cells"),
    "outputs": ("variables", "cloud_optimized", "zarr", "zarr_url", "geotiff"),
    "ensemble": (
        "members",
        "seed",
        "sampling",
        "probability_basis",
        "thresholds_km",
        "percentiles",
        "memory_limit_gb",
        "candidates",
        "candidate_min_melt_km",
        "vary",
    ),
    "ensemble.vary": ("*",),
    "motion": (
        "rotations",
        "max_age_ma",
        "step_ma",
        "duration_min_melt_km",
        "plate_ids",
        "plate_rotations",
        "plume_drift",
    ),
    "motion.plate_rotations": ("*",),
    "assess": ("features", "crs", "rejection_auc", "likelihood_shape"),
}
#: The tables of :data:`SCHEMA` (not the arrays of tables).
TABLES = frozenset(k for k in SCHEMA if k and not k.endswith("[]"))


def _all_keys() -> list[str]:
    """Every valid dotted key (plumes written as ``...plumes.N.key``)."""
    keys = []
    for name, names in SCHEMA.items():
        prefix = name.replace("[]", ".N")
        keys.extend(f"{prefix}.{n}" if prefix else n for n in names if n != "*")
    return keys


#: Every valid dotted key; array items are written ``N`` (``inputs.thermal_anomaly.plumes.N.name``).
ALL_KEYS: tuple[str, ...] = tuple(_all_keys())


def check_unknown_keys(ctx: Context, tree: dict[str, Any]) -> None:
    """Raise on the first key that :data:`SCHEMA` does not know, suggesting the nearest one."""

    def visit(values: dict[str, Any], schema_key: str, dotted: str) -> None:
        allowed = SCHEMA[schema_key]
        if allowed == ("*",):
            return
        for name, value in values.items():
            key = f"{dotted}.{name}" if dotted else name
            if name not in allowed:
                raise _unknown_key(ctx, key, allowed)
            child = f"{schema_key}.{name}" if schema_key else name
            if child in TABLES and isinstance(value, dict):
                visit(value, child, key)
            elif f"{child}[]" in SCHEMA and isinstance(value, list):
                for i, item in enumerate(value, start=1):
                    if isinstance(item, dict):
                        visit(item, f"{child}[]", f"{key}.{i}")

    visit(tree, "", "")


def _unknown_key(ctx: Context, key: str, allowed: Sequence[str]) -> WorkflowError:
    prefix, _, name = key.rpartition(".")
    near = [f"{prefix}.{n}" if prefix else n for n in difflib.get_close_matches(name, allowed, n=1)]
    if not near:  # the right name in the wrong table?
        near = [k for k in ALL_KEYS if leaf(k) == name][:1]
    if near:
        hint = f"did you mean '{near[0]}'?"
        if ".N." in near[0]:
            hint += " (N: the plume number, counted from 1)"
    else:
        where = f"[{prefix}]" if prefix else "the top level"
        hint = f"valid keys in {where}: {', '.join(allowed)}. See docs/workflow.md."
    msg = f"unknown key '{shortened(key)}' in {ctx.source}{ctx.origin(key)}; {hint}"
    return WorkflowError(msg)
