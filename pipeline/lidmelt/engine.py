"""The basin run: inputs aligned to one grid, the melting kernel chunk by chunk, GeoTIFF outputs.

:func:`run_basin` takes a run configuration (as made by :func:`lidmelt.workflow.load_workflow`;
any object with the same attributes works), reads and aligns every input onto the target grid,
evaluates every output variable of DESIGN.md cell by cell through the melting table in chunks
(xarray + dask, threads), and writes one GeoTIFF per variable, the aligned inputs, a validity
flag grid, optionally one CF NetCDF, and ``summary.json`` (grid, statistics, provenance) into the
run directory. Peak memory is set by the chunk size, not by the grid size: one dask pass stores
every output and computes the summary statistics.
"""

from __future__ import annotations

import json
import logging
import math
import sys
import time
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from lidmelt import __version__
from lidmelt.errors import InputError
from lidmelt.grids.align import TargetGrid, align
from lidmelt.grids.anomaly import plume_anomaly
from lidmelt.grids.area import cell_area_km2
from lidmelt.grids.io import open_grid, sha256_file
from lidmelt.grids.rundir import RUN_FORMAT_VERSION, SUMMARY_NAME
from lidmelt.grids.store import GeoTiffItem, GeoTiffSet
from lidmelt.physics import (
    FLAG_MEANINGS,
    excess_to_melt_k,
    get_cooling_model,
    get_model,
    get_table,
    isotherm_depth_km,
    melt_column,
)

log = logging.getLogger("lidmelt")

#: Output variables: unit and long name (DESIGN.md "Output variables").
VARIABLES: dict[str, tuple[str, str]] = {
    "melt_thickness_km": ("km", "melt thickness (column-integrated melt fraction)"),
    "onset_depth_km": ("km", "onset depth of melting below the seafloor"),
    "onset_pressure_gpa": ("GPa", "onset pressure of melting"),
    "lid_depth_km": ("km", "top of the melting column (lid base or crust base)"),
    "max_melt_fraction": ("1", "melt fraction at the top of the melting column"),
    "mean_melt_pressure_gpa": ("GPa", "melt-fraction-weighted mean pressure of melting"),
    "excess_to_melt_k": ("K", "thermal anomaly at which melting would begin beneath this lid"),
}
#: Aligned inputs written to the run directory: unit and long name.
INPUTS: dict[str, tuple[str, str]] = {
    "plate_age_ma": ("Ma", "plate age"),
    "lid_thickness_km": ("km", "lid (lithosphere) thickness given as input"),
    "thermal_anomaly_k": ("K", "thermal anomaly above the ambient potential temperature"),
    "water_wt_pct": ("wt%", "water in the bulk source"),
}
_WORKFLOW_INPUT = {
    "plate_age": "plate_age_ma",
    "lid_thickness": "lid_thickness_km",
    "thermal_anomaly": "thermal_anomaly_k",
    "water": "water_wt_pct",
}
FLAG_NODATA = 255

# Physical ranges of the inputs: values outside are unit mistakes, not data.
_RANGES = {
    "plate_age_ma": (
        0.0,
        400.0,
        "Ma (the oldest seafloor is about 200 Ma). A grid in seconds "
        "divides by 3.15576e13, in years by 1e6",
    ),
    "lid_thickness_km": (0.0, 700.0, "km below the seafloor. A grid in metres divides by 1000"),
    "thermal_anomaly_k": (
        -1000.0,
        1000.0,
        "K relative to the ambient potential temperature. "
        "If the grid holds absolute Tp, subtract the ambient Tp",
    ),
    "water_wt_pct": (
        0.0,
        5.0,
        "wt% of the bulk source (0.01 wt% = 100 ppm). A grid in ppm divides by 10000",
    ),
}


@dataclass
class RunResult:
    """What :func:`run_basin` wrote: the run directory, its files and the summary."""

    run_dir: Path
    files: list[Path]
    summary: dict[str, Any]
    timings_s: dict[str, float] = field(default_factory=dict)


# ------------------------------------------------------------------------------------------------
# inputs
# ------------------------------------------------------------------------------------------------
def _target_grid(cfg) -> TargetGrid:
    spec = cfg.grid
    if spec.like:
        inp = cfg.inputs[spec.like]
        name = _WORKFLOW_INPUT[spec.like]
        da = open_grid(
            inp.path,
            variable=inp.variable,
            name=name,
            units_expected=INPUTS[name][0],
            chunks={"y": "auto", "x": "auto"},
        )
        return TargetGrid.from_grid(da)
    west, east, south, north = spec.extent
    return TargetGrid.from_extent(
        west, east, south, north, spec.resolution, crs=spec.crs or "EPSG:4326"
    )


def _load_input(
    inp, name: str, target: TargetGrid, chunks: int
) -> tuple[xr.DataArray | float, dict]:
    """An input on the target grid (lazy where it already lies on it) or a constant."""
    units = INPUTS[name][0]
    prov: dict[str, Any] = {"units": units, "long_name": INPUTS[name][1]}
    if inp.path is None:
        value = float(inp.constant if inp.constant is not None else 0.0)
        prov.update({"source": None, "sha256": None, "constant": value})
        return value, prov
    da = open_grid(inp.path, variable=inp.variable, name=name, units_expected=units, chunks=chunks)
    prov.update(
        {
            "source": str(inp.path),
            "sha256": sha256_file(inp.path),
            "variable": inp.variable,
            "resampling": inp.resampling,
        }
    )
    aligned = align(da, target, resampling=inp.resampling, name=name)
    if aligned.chunks is None or aligned.chunks != target.template(chunks).chunks:
        aligned = aligned.chunk({"y": chunks, "x": chunks})
    if inp.constant:
        aligned = aligned + float(inp.constant)
        prov["constant"] = float(inp.constant)
    return aligned, prov


def _thermal_anomaly(inp, target: TargetGrid, chunks: int) -> tuple[xr.DataArray | float, dict]:
    grid, prov = _load_input(inp, "thermal_anomaly_k", target, chunks)
    if inp.plumes:
        plumes = [p.as_plume() for p in inp.plumes]
        grid = plume_anomaly(target, plumes, background=grid, chunks=chunks)
        prov["plumes"] = [
            {
                "name": p.name,
                "longitude": p.longitude,
                "latitude": p.latitude,
                "radius_km": p.radius_km,
                "peak_excess_k": p.peak_excess_k,
                "shape": p.shape,
            }
            for p in inp.plumes
        ]
    return grid, prov


def _range_check(block: np.ndarray, name: str, source: str) -> np.ndarray:
    lo, hi, advice = _RANGES[name]
    with np.errstate(invalid="ignore"):
        bad = (block < lo) | (block > hi)
    if bad.any():
        values = block[bad]
        msg = (
            f"{name} from {source} has values from {np.nanmin(values):.6g} to "
            f"{np.nanmax(values):.6g}, outside {lo:g} to {hi:g}: expected {advice}. "
            "Fix the grid's units (or its nodata value) and run again."
        )
        raise InputError(msg)
    return block


# ------------------------------------------------------------------------------------------------
# the kernel
# ------------------------------------------------------------------------------------------------
def _kernel(
    age,
    lid_grid,
    anomaly,
    water,
    *,
    model,
    table,
    cooling,
    lid_isotherm_c,
    ambient_c,
    min_top_km,
    method,
    sources,
    clock=None,
):
    """Every output of one chunk, stacked as (n_variables + 1, y, x) float32 (flag last).

    ``clock``, a dict, accumulates the thread seconds spent on the lid and on melting.
    """
    t0 = time.perf_counter()
    shape = np.broadcast_shapes(*(np.shape(a) for a in (age, lid_grid, anomaly, water)))
    for name, block in (
        ("plate_age_ma", age),
        ("lid_thickness_km", lid_grid),
        ("thermal_anomaly_k", anomaly),
        ("water_wt_pct", water),
    ):
        if name in sources and np.ndim(block):
            _range_check(block, name, sources[name])
    lid = np.broadcast_to(np.asarray(lid_grid, float), shape)
    if cooling is not None:
        from_age = isotherm_depth_km(lid_isotherm_c, np.broadcast_to(age, shape), model=cooling)
        lid = np.where(np.isfinite(lid), lid, from_age)
    t1 = time.perf_counter()
    tp = ambient_c + np.broadcast_to(np.asarray(anomaly, float), shape)
    water_arg = water if np.ndim(water) == 0 else np.broadcast_to(water, shape)
    res = melt_column(
        tp, lid, water_arg, model=model, method=method, table=table, min_top_km=min_top_km
    )
    excess = excess_to_melt_k(
        lid,
        water_arg,
        ambient_potential_temperature_c=ambient_c,
        model=model,
        min_top_km=min_top_km,
    )
    nodata = ~(np.isfinite(lid) & np.isfinite(tp) & np.isfinite(np.broadcast_to(water_arg, shape)))
    out = np.empty((len(VARIABLES) + 1, *shape), np.float32)
    for k, name in enumerate(VARIABLES):
        out[k] = excess if name == "excess_to_melt_k" else getattr(res, name)
    out[: len(VARIABLES), nodata] = np.nan
    out[-1] = np.where(nodata, FLAG_NODATA, res.flag)
    if clock is not None:  # dict updates of floats are atomic enough for a timing summary
        clock["lid_thread_s"] = clock.get("lid_thread_s", 0.0) + t1 - t0
        clock["melting_thread_s"] = clock.get("melting_thread_s", 0.0) + time.perf_counter() - t1
    return out


# ------------------------------------------------------------------------------------------------
# the run
# ------------------------------------------------------------------------------------------------
def _reporter(show: bool | None):
    """Progress by bands: a line that updates in place on a terminal, log lines otherwise."""
    if show is False:
        return None
    tty = sys.stderr.isatty() if show is None else bool(show)

    def report(done: int, total: int) -> None:
        pct = 100 * done // total
        if tty:
            bar = "#" * (pct // 4)
            end = "\n" if done == total else ""
            print(f"\rlidmelt run: [{bar:<25}] {pct:3d} %", end=end, file=sys.stderr, flush=True)
        else:
            print(
                f"lidmelt run: {pct:3d} % of the grid done ({done}/{total} bands)",
                file=sys.stderr,
                flush=True,
            )

    return report


def run_basin(
    cfg, *, output_dir: str | Path | None = None, progress: bool | None = None
) -> RunResult:
    """Run a whole basin from a workflow configuration; return what was written.

    Parameters
    ----------
    cfg : RunConfig
        From :func:`lidmelt.workflow.load_workflow`.
    output_dir : path, optional
        The run directory (default ``cfg.run.output_dir``).
    progress : bool, optional
        A progress bar (True), plain log lines (None when not on a terminal), or nothing (False).

    Raises
    ------
    LidmeltError
        For any bad input (file, grid, range, model); no output is left half-written.
    """
    import dask.array as dsa

    t0 = time.perf_counter()
    timings: dict[str, float] = {}
    run_dir = Path(output_dir or cfg.run.output_dir)
    chunks = int(cfg.compute.chunk_size)
    model = get_model(cfg.model.name, **dict(cfg.model.parameters))
    table = get_table(model) if cfg.compute.method == "table" else None
    timings["table_s"] = time.perf_counter() - t0

    target = _target_grid(cfg)
    template = target.template(chunks)
    inputs, provenance = {}, {}
    for key, name in _WORKFLOW_INPUT.items():
        inp = cfg.inputs[key]
        if inp is None:
            continue
        if key == "thermal_anomaly":
            value, prov = _thermal_anomaly(inp, target, chunks)
        else:
            value, prov = _load_input(inp, name, target, chunks)
        inputs[name], provenance[name] = value, prov
    if "plate_age_ma" not in inputs and "lid_thickness_km" not in inputs:
        msg = "the workflow gives neither inputs.plate_age nor inputs.lid_thickness; give one."
        raise InputError(msg)
    timings["inputs_s"] = time.perf_counter() - t0 - timings["table_s"]

    uses_age = "plate_age_ma" in inputs
    cooling = None
    if uses_age:
        cooling = get_cooling_model(cfg.lithosphere.cooling, **dict(cfg.lithosphere.parameters))
    sources = {name: (prov.get("source") or "the workflow") for name, prov in provenance.items()}

    def as_dask(value):
        if isinstance(value, xr.DataArray):
            return (
                value.data
                if isinstance(value.data, dsa.Array)
                else dsa.from_array(value.values, chunks=chunks)
            )
        return value

    def lazy(name):
        value = inputs.get(name, np.nan if name in ("plate_age_ma", "lid_thickness_km") else 0.0)
        return as_dask(value)

    args = [
        lazy("plate_age_ma"),
        lazy("lid_thickness_km"),
        lazy("thermal_anomaly_k"),
        lazy("water_wt_pct"),
    ]
    arrays = [a for a in args if isinstance(a, dsa.Array)]
    scalars = [None if isinstance(a, dsa.Array) else a for a in args]
    ref = template.data

    clock: dict[str, float] = {}

    def block(*blocks, block_info=None):
        it = iter(blocks)
        shape = block_info[None]["chunk-shape"][1:]
        vals = [next(it) if s is None else s for s in scalars]
        vals[0] = np.broadcast_to(vals[0], shape)  # the lid from age needs an age everywhere
        return _kernel(
            *vals,
            model=model,
            table=table,
            cooling=cooling,
            lid_isotherm_c=cfg.lithosphere.lid_isotherm_c,
            ambient_c=cfg.model.ambient_potential_temperature_c,
            min_top_km=cfg.model.min_top_of_melting_km,
            method=cfg.compute.method,
            sources=sources,
            clock=clock,
        )

    # with every input constant, the template alone carries the grid's chunks to the kernel
    arrays = [a.rechunk(ref.chunks) for a in arrays] or [ref]
    stacked = dsa.map_blocks(
        block, *arrays, dtype=np.float32, new_axis=0, chunks=((len(VARIABLES) + 1,), *ref.chunks)
    )

    coords = template.coords
    wanted = [v for v in VARIABLES if v in cfg.outputs.variables]
    outputs = {}
    for k, name in enumerate(VARIABLES):
        if name in wanted:
            outputs[name] = xr.DataArray(stacked[k], coords=coords, dims=("y", "x"), name=name)
    flag = xr.DataArray(stacked[-1], coords=coords, dims=("y", "x"), name="validity_flag")
    for da in (*outputs.values(), flag):
        da.rio.write_crs(template.rio.crs, inplace=True)

    area = cell_area_km2(target, chunks=chunks).data.rechunk(ref.chunks)
    out_index = [k for k, name in enumerate(VARIABLES) if name in outputs]

    def band_stats(rows):
        """Sums, counts, minima and maxima of one band (combined over bands below)."""
        thickness, cell_area = stacked[0, rows], area[rows]
        melting = thickness > 0
        parts = [
            dsa.sum(melting),
            dsa.sum(dsa.isfinite(thickness)),
            dsa.sum(dsa.where(melting, cell_area, 0.0)),
            dsa.nansum(thickness * cell_area),
        ]
        for k in out_index:
            band = stacked[k, rows]
            parts += [
                dsa.nanmin(band),
                dsa.nanmax(band),
                dsa.nansum(band.astype(np.float64)),
                dsa.sum(dsa.isfinite(band)),
            ]
        return parts

    tags = _provenance_tags(cfg, model, cooling, provenance)
    items = []
    for name, da in outputs.items():
        units, long_name = VARIABLES[name]
        items.append(
            GeoTiffItem(
                da,
                run_dir / f"{name}.tif",
                long_name,
                units,
                {**tags, "variable": name, "units": units},
            )
        )
    for name, value in inputs.items():
        if isinstance(value, xr.DataArray):
            units, long_name = INPUTS[name]
            da = xr.DataArray(as_dask(value).rechunk(ref.chunks), coords=coords, dims=("y", "x"))
            da.rio.write_crs(template.rio.crs, inplace=True)
            items.append(
                GeoTiffItem(
                    da,
                    run_dir / f"input_{name}.tif",
                    long_name,
                    units,
                    {**tags, "variable": name, "units": units},
                )
            )
    flag_meaning = "; ".join(f"{bit}: {text}" for bit, text in FLAG_MEANINGS.items())
    items.append(
        GeoTiffItem(
            flag,
            run_dir / "validity_flag.tif",
            "validity flag (bit flags)",
            "1",
            {
                **tags,
                "variable": "validity_flag",
                "flag_meanings": flag_meaning,
                "nodata_meaning": f"{FLAG_NODATA}: no input data",
            },
            dtype="uint8",
            nodata=FLAG_NODATA,
        )
    )

    t1 = time.perf_counter()
    with GeoTiffSet(items, cog=True) as out:
        bands = out.compute(
            extra=band_stats,
            band_rows=2 * ref.chunks[0][0],
            num_workers=int(cfg.compute.workers),
            report=_reporter(progress),
        )
    timings["compute_and_write_s"] = time.perf_counter() - t1
    timings.update(clock)  # thread seconds inside the kernel (overlapping the I/O)
    parts = np.array(bands, dtype=float)  # (bands, values)
    stats = {
        "melting_cells": parts[:, 0].sum(),
        "data_cells": parts[:, 1].sum(),
        "melting_area_km2": parts[:, 2].sum(),
        "melt_volume_km3": parts[:, 3].sum(),
    }
    for j, k in enumerate(out_index):
        name = list(VARIABLES)[k]
        col = parts[:, 4 + 4 * j : 8 + 4 * j]
        count = col[:, 3].sum()
        with np.errstate(invalid="ignore"):
            stats[f"{name}.min"] = float(np.nanmin(col[:, 0])) if count else np.nan
            stats[f"{name}.max"] = float(np.nanmax(col[:, 1])) if count else np.nan
        stats[f"{name}.mean"] = col[:, 2].sum() / count if count else np.nan
    files = [item.path for item in items]

    if cfg.run.netcdf:
        from lidmelt.grids.write import write_netcdf

        t2 = time.perf_counter()
        files.append(_write_netcdf(run_dir, outputs, inputs, tags, write_netcdf))
        timings["netcdf_s"] = time.perf_counter() - t2

    summary = _summary(cfg, target, model, cooling, provenance, outputs, inputs, stats)
    _write_json(run_dir / SUMMARY_NAME, summary)
    files.append(run_dir / SUMMARY_NAME)
    timings["total_s"] = time.perf_counter() - t0
    return RunResult(run_dir, files, summary, timings)


def _write_netcdf(run_dir, outputs, inputs, tags, write_netcdf) -> Path:
    """One CF NetCDF of every variable, read back lazily from the finished GeoTIFFs."""
    data = {}
    for name in outputs:
        da = open_grid(run_dir / f"{name}.tif", name=name, chunks=1024)
        da.attrs = {"units": VARIABLES[name][0], "long_name": VARIABLES[name][1]}
        data[name] = da
    for name, value in inputs.items():
        if isinstance(value, xr.DataArray):
            da = open_grid(run_dir / f"input_{name}.tif", name=name, chunks=1024)
            da.attrs = {"units": INPUTS[name][0], "long_name": INPUTS[name][1]}
            data[name] = da
    ds = xr.Dataset(data)
    return write_netcdf(ds, run_dir / "lidmelt.nc", attrs={"title": "lidmelt run", **tags})


def _provenance_tags(cfg, model, cooling, provenance) -> dict[str, Any]:
    return {
        "lidmelt_version": __version__,
        "model": model.name,
        "model_reference": model.reference,
        "model_parameters": model.parameters(),
        "ambient_potential_temperature_c": cfg.model.ambient_potential_temperature_c,
        "min_top_of_melting_km": cfg.model.min_top_of_melting_km,
        "cooling_model": cooling.name if cooling is not None else "none (lid grid)",
        "cooling_parameters": cooling.parameters() if cooling is not None else {},
        "lid_isotherm_c": cfg.lithosphere.lid_isotherm_c if cooling is not None else None,
        "inputs": {
            name: {
                "source": p.get("source"),
                "sha256": p.get("sha256"),
                "constant": p.get("constant"),
            }
            for name, p in provenance.items()
        },
        "workflow": cfg.text,
        "workflow_overrides": list(cfg.overrides),
    }


def _summary(cfg, target, model, cooling, provenance, outputs, inputs, stats) -> dict[str, Any]:
    def clean(v):
        return None if v is None or (isinstance(v, float) and not math.isfinite(v)) else v

    return {
        "lidmelt_run": RUN_FORMAT_VERSION,
        "lidmelt_version": __version__,
        "created_utc": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "grid": {
            "crs_wkt": target.pyproj_crs.to_wkt(),
            "transform": list(target.transform),
            "width": target.width,
            "height": target.height,
            "bounds": list(target.bounds),
        },
        "model": {
            "name": model.name,
            "parameters": model.parameters(),
            "reference": model.reference,
            "sources": dict(model.sources),
        },
        "ambient_potential_temperature_c": cfg.model.ambient_potential_temperature_c,
        "cooling": None
        if cooling is None
        else {
            "name": cooling.name,
            "lid_isotherm_c": cfg.lithosphere.lid_isotherm_c,
            "parameters": cooling.parameters(),
            "reference": cooling.reference,
        },
        "min_top_of_melting_km": cfg.model.min_top_of_melting_km,
        "method": cfg.compute.method,
        "inputs": {
            name: {
                **prov,
                "file": f"input_{name}.tif" if isinstance(inputs[name], xr.DataArray) else None,
            }
            for name, prov in provenance.items()
        },
        "outputs": {
            name: {
                "file": f"{name}.tif",
                "units": VARIABLES[name][0],
                "long_name": VARIABLES[name][1],
            }
            for name in outputs
        },
        "validity_flag": {
            "file": "validity_flag.tif",
            "nodata": FLAG_NODATA,
            "meanings": {str(k): v for k, v in FLAG_MEANINGS.items()},
        },
        "statistics": {
            "data_cells": int(stats["data_cells"]),
            "melting_cells": int(stats["melting_cells"]),
            "melting_area_km2": stats["melting_area_km2"],
            "melt_volume_km3": stats["melt_volume_km3"],
            "variables": {
                name: {k: clean(stats[f"{name}.{k}"]) for k in ("min", "max", "mean")}
                for name in outputs
            },
        },
        "workflow_file": str(cfg.workflow_path),
        "workflow_overrides": list(cfg.overrides),
        "workflow": cfg.text,
    }


def _write_json(path: Path, doc: dict) -> None:
    tmp = path.with_name(f".{path.name}.tmp")
    try:
        tmp.write_text(json.dumps(doc, indent=2, allow_nan=False), encoding="utf-8")
        tmp.replace(path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


__all__ = ["INPUTS", "VARIABLES", "RunResult", "run_basin"]
