"""The first stages of a run: its melting model, its grid and its inputs on that grid.

:func:`load_model` (the melting model and its table), :func:`resolve_target_grid` (the grid of
every output, refused above ``compute.max_cells``), :func:`load_inputs` (every input aligned onto
the grid, or a constant; plumes and their upwelling added; a lid below sea level converted) and
:func:`lid_cooling_model` (the lid from the plate age, or a lid grid). :mod:`lidmelt.engine` runs
them before the kernel; ensembles (:mod:`lidmelt.ensemble`) run them once per distinct input set.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import xarray as xr

from lidmelt.config import DEFAULT_MAX_CELLS
from lidmelt.errors import InputError
from lidmelt.grids.align import align
from lidmelt.grids.anomaly import Plume, plume_anomaly
from lidmelt.grids.grid import Grid, registration
from lidmelt.grids.io import open_input, sha256_file
from lidmelt.grids.lidref import apply_lid_reference, water_load_source
from lidmelt.physics import get_cooling_model, get_model, get_table
from lidmelt.variables import INPUTS, input_for_workflow_key

__all__ = [
    "LID_INPUTS",
    "RunInputs",
    "lid_cooling_model",
    "load_inputs",
    "load_model",
    "resolve_target_grid",
]

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
