"""Lid thickness given below sea level: conversion to lidmelt's lid, below the seafloor.

Lithosphere-thickness models often give the depth of the lid base below sea level. lidmelt's
lid thickness is measured from the seafloor, so the water depth is subtracted:
``lid_below_seafloor = lid_below_sea_level - water_depth`` (kept >= 0). The water depth comes
from a bathymetry grid (elevation, negative below sea level, as GEBCO and ETOPO grids store it;
from memory) or, where none is given, from the age-depth relation of the run's cooling model
(:func:`lidmelt.physics._cooling.seafloor_depth_m`, which needs the plate age).
"""

from __future__ import annotations

from types import SimpleNamespace
from typing import Any

import numpy as np
import xarray as xr

from lidmelt._errors import InputError
from lidmelt.grids._align import align
from lidmelt.grids._grid import Grid
from lidmelt.grids._io import open_input
from lidmelt.physics._cooling import get_cooling_model, seafloor_depth_m

#: Values of ``[inputs.lid_thickness] reference``.
LID_REFERENCES = ("seafloor", "sea_level")
#: The deepest seafloor, m below sea level: about 11 km at the Challenger Deep (from memory).
#: A bathymetry grid with values well beyond it, or with every value within 11 m of sea level,
#: is taken for a unit slip (:func:`check_bathymetry`).
DEEPEST_SEAFLOOR_M = 11_000.0


def lid_below_seafloor_km(lid_below_sea_level_km: Any, water_depth_km: Any) -> Any:
    """The lid thickness below the seafloor from the lid base below sea level.

    Parameters
    ----------
    lid_below_sea_level_km, water_depth_km : array_like or DataArray
        Depth of the lid base below sea level and depth of the seafloor below sea level, km
        (both positive down).

    Returns
    -------
    Same type as the inputs
        ``max(lid - water, 0)`` km; NaN where either is NaN.
    """
    diff = lid_below_sea_level_km - water_depth_km
    if isinstance(diff, xr.DataArray):
        return diff.clip(min=0.0)
    return np.where(np.isnan(diff), np.nan, np.maximum(diff, 0.0))


def apply_lid_reference(
    cfg: Any, values: dict, provenance: dict, *, target: Grid, chunks: int
) -> None:
    """Turn a lid grid given below sea level into lidmelt's lid (in place in ``values``).

    Does nothing unless ``cfg.inputs.lid_thickness.reference == "sea_level"``. The water depth
    is the bathymetry grid (``bathymetry`` key, elevation in m, converted by units) aligned on
    ``target``, else the cooling model's seafloor depth at the plate age. ``provenance`` of the
    lid records which (``"reference"`` and ``"water_depth"``), for the run summary.

    Raises
    ------
    InputError
        If the lid is below sea level but there is neither a bathymetry grid nor a plate age,
        or the bathymetry grid's sign or unit is wrong (:func:`check_bathymetry`).
    """
    spec = cfg.inputs.lid_thickness
    name = "lid_thickness_km"
    if spec is None or getattr(spec, "reference", "seafloor") != "sea_level" or name not in values:
        return
    bathymetry = getattr(spec, "bathymetry", None)
    if bathymetry is not None:
        depth_km = _bathymetry_depth_m(bathymetry, target, chunks) / 1000.0
        how = f"water depth from the bathymetry grid {str(bathymetry)!r}"
    elif "plate_age_ma" in values:
        model = get_cooling_model(cfg.lithosphere.cooling, **dict(cfg.lithosphere.parameters))
        age = values["plate_age_ma"]
        depth_km = (
            xr.apply_ufunc(
                lambda a: seafloor_depth_m(a, model=model) / 1000.0,
                age,
                dask="parallelized",
                output_dtypes=[np.float64],
            )
            if isinstance(age, xr.DataArray)
            else float(seafloor_depth_m(age, model=model)) / 1e3
        )
        how = f"water depth from the age-depth relation of the {cfg.lithosphere.cooling} model"
    else:
        msg = (
            'inputs.lid_thickness has reference = "sea_level" but the run has neither a '
            "bathymetry grid nor a plate age to give the water depth. Add "
            'bathymetry = "elevation.nc" to [inputs.lid_thickness] or an [inputs.plate_age].'
        )
        raise InputError(msg)
    values[name] = lid_below_seafloor_km(values[name], depth_km)
    provenance[name].update(reference="sea_level", water_depth=how)


def check_bathymetry(elevation: Any, *, source: str) -> None:
    """Refuse an elevation grid (m, negative below sea level) whose sign or unit is wrong.

    lidmelt maps ocean basins, so most cells of a bathymetry grid lie below sea level: a grid
    with more than half of its cells above holds depths positive down. Every value within
    ``DEEPEST_SEAFLOOR_M`` / 1000 = 11 m of sea level is a grid in km read as metres, and a
    value beyond 1.1 x 11 km (below or above sea level) one in a smaller unit. One pass over
    the grid, block by block, before the run computes anything.

    Raises
    ------
    InputError
        Naming ``source`` (the file and key), the values found and the fix.
    """
    data = elevation.data if isinstance(elevation, xr.DataArray) else np.asarray(elevation)
    lazy = hasattr(data, "dask")
    if lazy:
        import dask
        import dask.array as xp
    else:
        xp = np
    finite = xp.isfinite(data)
    stats = (
        xp.where(finite, data, np.inf).min(),
        xp.where(finite, data, -np.inf).max(),
        finite.sum(),
        (data > 0).sum(),  # NaN is not above sea level
    )
    low, high, count, above = (float(v) for v in (dask.compute(*stats) if lazy else stats))
    if count == 0:
        return
    found = (
        f"{source} has values from {low:.6g} to {high:.6g} m, {above / count:.0%} of its cells "
        "above sea level"
    )
    if above > count / 2:
        problem = (
            "expected elevation, negative below sea level (as GEBCO and ETOPO grids store it). "
            "If the file holds depths positive down, multiply it by -1"
        )
    elif max(abs(low), abs(high)) <= DEEPEST_SEAFLOOR_M / 1000.0:
        problem = (
            "all within 11 m of sea level, as if in km; expected metres. Label the file's "
            'units "km" (lidmelt converts them) or convert it to metres'
        )
    elif max(abs(low), abs(high)) > 1.1 * DEEPEST_SEAFLOOR_M:
        problem = (
            "some beyond the deepest seafloor (about 11 000 m); expected metres. Label the "
            "file's units or convert it to metres"
        )
    else:
        return
    msg = f"{found}: {problem}, then run again."
    raise InputError(msg)


def _bathymetry_depth_m(bathymetry, target: Grid, chunks: int) -> xr.DataArray:
    """The water depth [m] of an elevation grid (negative below sea level) on ``target``."""
    bath = SimpleNamespace(name="lid_thickness.bathymetry", path=bathymetry, variable=None)
    elevation = open_input(bath, name="bathymetry_m", units_expected="m", chunks=chunks)
    elevation = align(elevation, target, name="bathymetry_m")
    where = f"bathymetry grid {str(bathymetry)!r} (inputs.lid_thickness.bathymetry)"
    check_bathymetry(elevation, source=where)
    return (-elevation).clip(min=0.0)


def water_load_source(cfg: Any, values: dict, *, target: Grid, chunks: int):
    """Where a run's water load comes from (docs/physics.md, section "Depth and pressure").

    Returns (kind, water depth grid [m] or None, description): ``"bathymetry"`` with the grid of
    ``[inputs.lid_thickness] bathymetry`` where the workflow gives one; else ``"age"`` where a
    plate age is given (the cooling model's age-depth relation,
    :func:`lidmelt.physics._cooling.seafloor_depth_m`, evaluated by the kernel); else ``"none"``:
    with only a lid grid the water depth is unknown and no water load is applied.
    """
    spec = cfg.inputs.lid_thickness
    bathymetry = getattr(spec, "bathymetry", None) if spec is not None else None
    if bathymetry is not None:
        depth = _bathymetry_depth_m(bathymetry, target, chunks)
        return "bathymetry", depth, f"water load from the bathymetry grid {str(bathymetry)!r}"
    if "plate_age_ma" in values:
        how = f"water load from the age-depth relation of the {cfg.lithosphere.cooling} model"
        return "age", None, how
    return "none", None, "no water load (neither a bathymetry grid nor a plate age is given)"
