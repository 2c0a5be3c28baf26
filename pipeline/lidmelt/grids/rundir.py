"""The run directory written by ``lidmelt run``: its file names, its summary and its tags.

This module is the one home of the run directory's format: the engine writes it through
:func:`build_summary`, :func:`write_summary` and :func:`provenance_tags`, and every reader opens
it through :class:`RunDir`.

A run directory holds ``summary.json`` (with the marker ``"lidmelt_run": 1``), one GeoTIFF per
output variable (``<variable>.tif``), the run's inputs aligned to the target grid
(``input_<name>.tif``), ``validity_flag.tif`` and optionally ``lidmelt.nc``, ``maps/`` and
``report.html``. The keys of ``summary.json`` that readers may rely on:

``lidmelt_run`` (int, format version), ``lidmelt_version``, ``created_utc``,
``grid`` {``crs_wkt``, ``transform`` (6 affine coefficients a, b, c, d, e, f), ``width``,
``height``, ``bounds`` [west, south, east, north] in the grid CRS, ``registration`` ("pixel"
or "gridline": the node/cell convention of the file that set the grid)},
``model`` {``name``, ``parameters`` {name: value}, ``reference``, ``sources``},
``ambient_potential_temperature_c``, ``cooling`` ({``name``, ``lid_isotherm_c``,
``parameters``, ``reference``, ``sources``} or null when a lid grid was given),
``min_top_of_melting_km``,
``method`` (``"table"`` or ``"direct"``),
``inputs`` {name: {``file`` (aligned grid in this folder, or null for a constant), ``source``
(path or null), ``sha256`` (or null), ``units``, ``long_name``, ...}},
``outputs`` {variable: {``file``, ``units``, ``long_name``}},
``validity_flag`` {``file``, ``nodata``, ``meanings`` {bit: text}},
``statistics`` {``data_cells``, ``melting_cells``, ``melting_area_km2``, ``melt_volume_km3``,
``variables`` {variable: {``min``, ``max``, ``mean``} (null where no cell has data)}},
``workflow_file``, ``workflow_overrides`` (the ``--set`` overrides), ``workflow`` (the
workflow text).

The GeoTIFFs and the NetCDF carry :func:`provenance_tags` (version, model and its parameters,
cooling model, input sources and checksums, workflow text) as metadata.
"""

from __future__ import annotations

import json
from collections.abc import Collection, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from lidmelt import __version__
from lidmelt.errors import RunDirError
from lidmelt.files import write_json_atomic
from lidmelt.grids.io import open_grid
from lidmelt.grids.write import write_netcdf
from lidmelt.physics import FLAG_KEYS, FLAG_MEANINGS
from lidmelt.variables import (
    FLAG_NODATA,
    FLAG_VARIABLE,
    INPUTS,
    OUTPUTS,
    input_for_workflow_key,
)

__all__ = [
    "FLAG_FILE",
    "NETCDF_NAME",
    "RUN_FORMAT_VERSION",
    "SUMMARY_NAME",
    "FlagGrid",
    "RunDir",
    "build_summary",
    "input_file",
    "open_run",
    "output_file",
    "provenance_tags",
    "read_flags",
    "write_run_netcdf",
    "write_summary",
]

#: The run summary (JSON) in a run directory.
SUMMARY_NAME = "summary.json"
#: Version of the run directory format (the ``lidmelt_run`` marker of the summary).
RUN_FORMAT_VERSION = 1
#: The validity bit flags (uint8 GeoTIFF).
FLAG_FILE = f"{FLAG_VARIABLE.name}.tif"
#: The optional CF NetCDF of every output and aligned input.
NETCDF_NAME = "lidmelt.nc"


def output_file(name: str) -> str:
    """File name of output variable ``name`` in a run directory."""
    return f"{name}.tif"


def input_file(name: str) -> str:
    """File name of the aligned input ``name`` in a run directory."""
    return f"input_{name}.tif"


class RunDir:
    """A validated run directory.

    Parameters
    ----------
    path : str or Path
        The folder written by ``lidmelt run``.

    Raises
    ------
    RunDirError
        If the folder does not exist, has no readable ``summary.json`` or lacks the run marker.
    """

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        summary_path = self.path / SUMMARY_NAME
        if not self.path.is_dir():
            msg = (
                f"run directory {str(self.path)!r} does not exist or is not a folder. "
                "Give the output folder of a 'lidmelt run' (its -o OUT_DIR)."
            )
            raise RunDirError(msg)
        if not summary_path.is_file():
            msg = (
                f"{str(self.path)!r} is not a lidmelt run directory: it has no {SUMMARY_NAME}. "
                "Give the output folder of a 'lidmelt run', or run 'lidmelt run WORKFLOW.toml "
                "-o OUT_DIR' first."
            )
            raise RunDirError(msg)
        try:
            summary = json.loads(summary_path.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
            msg = (
                f"{str(summary_path)!r} cannot be read as JSON ({exc}). The run directory is "
                "damaged; run 'lidmelt run' again to rewrite it."
            )
            raise RunDirError(msg) from exc
        if not isinstance(summary, dict) or summary.get("lidmelt_run") != RUN_FORMAT_VERSION:
            msg = (
                f"{str(summary_path)!r} is not a lidmelt run summary (no 'lidmelt_run': "
                f"{RUN_FORMAT_VERSION} marker). Give the output folder of a 'lidmelt run'."
            )
            raise RunDirError(msg)
        self.summary: dict[str, Any] = summary

    @property
    def outputs(self) -> list[str]:
        """Names of the output variables, in the order the run wrote them."""
        return list(self.summary.get("outputs", {}))

    @property
    def inputs(self) -> list[str]:
        """Names of the aligned inputs that have a grid file in this folder."""
        return [k for k, v in self.summary.get("inputs", {}).items() if v.get("file")]

    def file(self, name: str) -> Path:
        """Path of the GeoTIFF holding output variable or aligned input ``name``."""
        for group in ("outputs", "inputs"):
            entry = self.summary.get(group, {}).get(name)
            if entry and entry.get("file"):
                path = self.path / entry["file"]
                if not path.is_file():
                    msg = (
                        f"run directory {str(self.path)!r} lists {name!r} but its file "
                        f"{entry['file']!r} is missing. Run 'lidmelt run' again."
                    )
                    raise RunDirError(msg)
                return path
        valid = ", ".join(self.outputs + self.inputs)
        msg = f"{name!r} is not a variable of this run. Valid names: {valid}."
        raise RunDirError(msg)

    def open(self, name: str) -> xr.DataArray:
        """Load one variable as a 2-D (y, x) float DataArray with NaN nodata and its CRS.

        The DataArray's attrs carry ``units`` and ``long_name`` from the summary.
        """
        import rioxarray  # noqa: F401  (registers the .rio accessor)

        path = self.file(name)
        with xr.open_dataarray(path, engine="rasterio", mask_and_scale=True) as src:
            da = src.squeeze("band", drop=True).load()
        da = da.astype(np.float64)
        da.encoding = {}
        entry = self.summary.get("outputs", {}).get(name) or self.summary["inputs"][name]
        da.attrs = {"units": entry.get("units", ""), "long_name": entry.get("long_name", name)}
        da.name = name
        return da

    def dataset(self, names: list[str] | None = None) -> xr.Dataset:
        """Load several variables (default: every output and input) into one Dataset."""
        names = names or self.outputs + self.inputs
        return xr.Dataset({n: self.open(n) for n in names})


def open_run(path: str | Path) -> RunDir:
    """Open and validate a run directory; see :class:`RunDir`."""
    return RunDir(path)


@dataclass(frozen=True)
class FlagGrid:
    """The validity flag grid of a run.

    Attributes
    ----------
    values : ndarray of uint8
        Bit flags per cell (bits: :data:`lidmelt.physics.FLAG_MEANINGS`); ``nodata`` outside
        the data.
    nodata : int
        The value of cells without input data (255).
    meanings : dict of int to str
        Meaning of each bit, as the run recorded it (this version's where it recorded none).
    """

    values: np.ndarray
    nodata: int
    meanings: dict[int, str]

    @property
    def with_data(self) -> np.ndarray:
        """Cells with input data (boolean grid)."""
        return self.values != self.nodata

    def cells_with(self, bit: int) -> np.ndarray:
        """Cells with data whose flag has ``bit`` set (boolean grid)."""
        return self.with_data & ((self.values & bit) != 0)


def _recorded_meanings(summary: Mapping[str, Any]) -> dict[int, str]:
    recorded = (summary.get("validity_flag") or {}).get("meanings")
    meanings = dict(FLAG_MEANINGS)
    if isinstance(recorded, dict):
        for key, text in recorded.items():
            if str(key).isdigit():
                meanings[int(key)] = str(text)
    return meanings


def read_flags(run: RunDir) -> FlagGrid | None:
    """The run's validity flag grid, or None when the run directory has none.

    Raises
    ------
    RunDirError
        If its shape differs from the grid in ``summary.json``.
    """
    import rasterio

    entry = run.summary.get("validity_flag") or {}
    path = run.path / str(entry.get("file") or FLAG_FILE)
    if not path.is_file():
        return None
    with rasterio.open(path) as src:
        values = src.read(1).astype(np.uint8)
        nodata = src.nodata
    grid = run.summary.get("grid") or {}
    expected = (grid.get("height"), grid.get("width"))
    if values.shape != expected:
        msg = (
            f"{path.name!r} in {str(run.path)!r} has shape {values.shape}, but summary.json gives "
            f"a {expected[0]} x {expected[1]} grid. The run directory is inconsistent: run "
            "'lidmelt run' again."
        )
        raise RunDirError(msg)
    nodata = int(entry.get("nodata", nodata if nodata is not None else FLAG_NODATA))
    return FlagGrid(values=values, nodata=nodata, meanings=_recorded_meanings(run.summary))


# ------------------------------------------------------------------------------------------------
# writing
# ------------------------------------------------------------------------------------------------
def provenance_tags(
    cfg: Any, *, model: Any, cooling: Any | None, provenance: Mapping[str, Mapping[str, Any]]
) -> dict[str, Any]:
    """Metadata written into every GeoTIFF and the NetCDF of a run.

    Parameters
    ----------
    cfg : RunConfig
        The run configuration (``cfg.model``, ``cfg.lithosphere``, ``cfg.text``,
        ``cfg.overrides`` are read).
    model : MeltingModel
        The melting model of the run.
    cooling : cooling model or None
        The lid's cooling model, None when a lid grid was given.
    provenance : mapping
        Per input name: ``source``, ``sha256`` and ``constant`` (others are ignored).
    """
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


def build_summary(
    cfg: Any,
    *,
    grid: Any,
    model: Any,
    cooling: Any | None,
    provenance: Mapping[str, Mapping[str, Any]],
    gridded_inputs: Collection[str],
    outputs: Sequence[str],
    statistics: Mapping[str, Any],
    warnings: Sequence[str] = (),
    extra: Mapping[str, Any] | None = None,
) -> dict[str, Any]:
    """The ``summary.json`` document of a run (keys in the module docstring).

    Parameters
    ----------
    cfg : RunConfig
        The run configuration.
    grid : Grid
        The grid of every output.
    model, cooling
        The melting model and the lid's cooling model (None when a lid grid was given).
    provenance : mapping
        Per input name, the input's provenance (units, long name, source, checksum, ...).
    gridded_inputs : collection of str
        Inputs written as an aligned grid (the others were constants).
    outputs : sequence of str
        The output variables written, in file order.
    statistics : mapping
        The ``statistics`` entry, JSON-ready (no NaN).
    warnings : sequence of str
        The run's warnings (e.g. much of the grid melting at the ambient temperature).
    extra : mapping, optional
        Entries of further stages (e.g. ``"ensemble"``); an ``"outputs"`` entry adds to the
        outputs.
    """
    extra = dict(extra or {})
    doc = {
        "lidmelt_run": RUN_FORMAT_VERSION,
        "lidmelt_version": __version__,
        "created_utc": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "grid": {**grid.to_dict(), "registration": _registration(cfg, provenance)},
        "model": {
            "name": model.name,
            "parameters": model.parameters(),
            "reference": model.reference,
            "sources": dict(model.sources),
        },
        "ambient_potential_temperature_c": cfg.model.ambient_potential_temperature_c,
        "cooling": _cooling_entry(cfg, cooling),
        "min_top_of_melting_km": cfg.model.min_top_of_melting_km,
        "method": cfg.compute.method,
        "inputs": {
            name: {**prov, "file": input_file(name) if name in gridded_inputs else None}
            for name, prov in provenance.items()
        },
        "outputs": {
            name: {
                "file": output_file(name),
                "units": OUTPUTS[name].units,
                "long_name": OUTPUTS[name].long_name,
            }
            for name in outputs
        },
        "validity_flag": {
            "file": FLAG_FILE,
            "nodata": FLAG_NODATA,
            "meanings": {str(k): v for k, v in FLAG_MEANINGS.items()},
        },
        "statistics": dict(statistics),
        "warnings": list(warnings),
        "workflow_file": str(cfg.workflow_path),
        "workflow_overrides": list(cfg.overrides),
        "workflow": cfg.text,
    }
    doc["outputs"].update(extra.pop("outputs", {}))
    return {**doc, **extra}


def _cooling_entry(cfg: Any, cooling: Any | None) -> dict[str, Any] | None:
    """The summary's ``cooling`` entry (None when a lid grid gave the lid everywhere)."""
    if cooling is None:
        return None
    return {
        "name": cooling.name,
        "lid_isotherm_c": cfg.lithosphere.lid_isotherm_c,
        "parameters": cooling.parameters(),
        "reference": cooling.reference,
        "sources": dict(cooling.sources),
    }


def _registration(cfg: Any, provenance: Mapping[str, Mapping[str, Any]]) -> str:
    """The node/cell convention of the grid: that of the ``grid.like`` file; a grid built from
    an extent is made of cells. lidmelt's cells are always centred on the coordinates."""
    if not cfg.grid.like:
        return "pixel"
    return str(provenance.get(input_for_workflow_key(cfg.grid.like).name, {}).get("registration"))


def write_summary(run_dir: str | Path, doc: Mapping[str, Any]) -> Path:
    """Write ``doc`` as the run directory's ``summary.json`` atomically; return its path."""
    return write_json_atomic(Path(run_dir) / SUMMARY_NAME, doc)


def write_run_netcdf(
    run_dir: Path, *, outputs: list[str], gridded_inputs: list[str], tags: dict[str, Any]
) -> Path:
    """One CF NetCDF of every variable, read back lazily from the finished GeoTIFFs."""
    data = {}
    for names, registry, file_of in (
        (outputs, OUTPUTS, output_file),
        (gridded_inputs, INPUTS, input_file),
    ):
        for name in names:
            da = open_grid(run_dir / file_of(name), name=name, chunks=1024)
            da.attrs = {"units": registry[name].units, "long_name": registry[name].long_name}
            data[name] = da
    data[FLAG_VARIABLE.name] = _cf_flag_variable(run_dir)
    ds = xr.Dataset(data)
    return write_netcdf(ds, run_dir / NETCDF_NAME, attrs={"title": "lidmelt run", **tags})


def _cf_flag_variable(run_dir: Path) -> xr.DataArray:
    """The validity flags as a CF flag variable: uint8 bits with ``flag_masks`` and
    ``flag_meanings`` (CF conventions, section "Flags"), fill value the flags' nodata."""
    da = open_grid(run_dir / FLAG_FILE, name=FLAG_VARIABLE.name, chunks=1024)
    da = da.fillna(FLAG_NODATA).astype(np.uint8)
    bits = sorted(FLAG_KEYS)
    da.attrs = {
        "units": FLAG_VARIABLE.units,
        "long_name": FLAG_VARIABLE.long_name,
        "flag_masks": np.array(bits, dtype=np.uint8),
        "flag_meanings": " ".join(FLAG_KEYS[b] for b in bits),
        "_FillValue": np.uint8(FLAG_NODATA),
    }
    return da.rio.write_nodata(FLAG_NODATA, encoded=False)
