"""The run directory written by ``lidmelt run``: its file names, its summary and its tags.

This module is the one home of the run directory's format: the engine writes it through
:func:`build_summary`, :func:`write_summary` and :func:`provenance_tags`, and every reader opens
it through :class:`RunDir`.

A run directory holds ``summary.json`` (with the marker ``"lidmelt_run": 1``), one GeoTIFF per
output variable (``<variable>.tif``), the run's inputs aligned to the target grid
(``input_<name>.tif``), ``validity_flag.tif`` and optionally ``lidmelt.nc``, ``maps/`` and
``report.html`` (the NetCDF is written by :mod:`lidmelt.grids._runnetcdf`). The keys of
``summary.json`` that readers may rely on:

``lidmelt_run`` (int, format version), ``lidmelt_version``, ``created_utc``,
``grid`` {``crs_wkt``, ``transform`` (6 affine coefficients a, b, c, d, e, f), ``width``,
``height``, ``bounds`` [west, south, east, north] in the grid CRS, ``registration`` ("pixel"
or "gridline": the node/cell convention of the file that set the grid)},
``model`` {``name``, ``parameters`` {name: value}, ``reference``, ``sources``},
``ambient_potential_temperature_c``, ``cooling`` ({``name``, ``top_of_melting`` ("geotherm"
or "isotherm": the rule for the top of melting of a lid from plate age), ``lid_isotherm_c``
(null under the geotherm rule), ``parameters``, ``reference``, ``sources``} or null when a lid
grid was given),
``min_top_of_melting_km``,
``method`` (``"table"`` or ``"direct"``),
``inputs`` {name: {``file`` (aligned grid in this folder, or null for a constant), ``source``
(path or null), ``sha256`` (or null), ``units``, ``long_name``, ...}},
``outputs`` {variable: {``file``, ``units``, ``long_name``}},
``validity_flag`` {``file``, ``nodata``, ``meanings`` {bit: text}},
``statistics`` {``data_cells``, ``melting_cells``, ``melting_area_km2``, ``melt_volume_km3``,
``variables`` {variable: {``min``, ``max``, ``mean``} (null where no cell has data)}},
``workflow_file``, ``workflow_overrides`` (the ``--set`` overrides), ``workflow`` (the
workflow text); with a Zarr store ``zarr`` {``store``, ``zarr_format``, ``variables``; for a
store at ``[outputs] zarr_url`` also ``url``, ``arrays`` {name: {``chunks``, ``bytes``}} and
``metadata_bytes``: :mod:`lidmelt.grids._objstore`}.

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
from lidmelt._errors import RunDirError
from lidmelt._files import write_json_atomic
from lidmelt._variables import (
    FLAG_NODATA,
    FLAG_VARIABLE,
    HISTORY,
    INPUTS,
    OUTPUTS,
    ensemble_variable,
    input_for_workflow_key,
    is_legacy_probability,
    legacy_message,
)
from lidmelt.grids._manifest import check_evaluable, check_written, seal_summary, verify_manifest
from lidmelt.grids._objstore import check_recorded, store_url
from lidmelt.grids._transaction import leftovers, lock_holder
from lidmelt.grids._zarr import in_store, open_variable, store_flags, stored_names
from lidmelt.physics import FLAG_MEANINGS

#: The run summary (JSON) in a run directory.
SUMMARY_NAME = "summary.json"
#: Version of the run directory format (the ``lidmelt_run`` marker of the summary).
RUN_FORMAT_VERSION = 1
#: The validity bit flags (uint8 GeoTIFF).
FLAG_FILE = f"{FLAG_VARIABLE.name}.tif"
#: The optional CF NetCDF of every output and aligned input.
NETCDF_NAME = "lidmelt.nc"
#: The optional Zarr store of every grid of the run (:mod:`lidmelt.grids._zarr`).
ZARR_NAME = "lidmelt.zarr"


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
    shown_as : str or Path, optional
        The path to show users (:attr:`shown_path`): a staged run is read from its staging
        folder but will be at its destination.

    Raises
    ------
    RunDirError
        If the folder does not exist, has no readable ``summary.json``, lacks the run marker,
        or fails its manifest check (:func:`lidmelt.grids._manifest.verify_manifest`).
    """

    def __init__(self, path: str | Path, *, shown_as: str | Path | None = None) -> None:
        self.path = Path(path)
        self.shown_path = Path(shown_as) if shown_as is not None else self.path
        summary_path = self.path / SUMMARY_NAME
        if not self.path.is_dir():
            raise _missing_run(self.path)
        if not summary_path.is_file():
            msg = (
                f"{str(self.path)!r} is not a lidmelt run directory: it has no {SUMMARY_NAME}. "
                "Give the output folder of a 'lidmelt run', or run 'lidmelt run WORKFLOW.toml "
                "-o OUT_DIR' first."
            )
            raise RunDirError(msg)
        try:
            summary = json.loads(summary_path.read_text(encoding="utf-8"))
        except (OSError, ValueError, RecursionError) as exc:
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
        self._stats = verify_manifest(self.path, summary, needed=self._listed_files())
        _check_entries(self.path, summary)
        check_recorded(summary)  # a store at a URL: there, as the run recorded it

    def _listed_files(self) -> list[str]:
        """The files the summary lists (named by the registry, never by the summary)."""
        local = stored_names(self.summary) and not store_url(self.summary)
        store = [f"{ZARR_NAME}/zarr.json"] if local else []
        names = [output_file(n) for n in self.outputs if not in_store(self.summary, n)]
        names += [input_file(n) for n in self.inputs if not in_store(self.summary, n)]
        if self.summary.get("validity_flag") and not in_store(self.summary, FLAG_VARIABLE.name):
            names.append(FLAG_FILE)
        return names + store

    @property
    def outputs(self) -> list[str]:
        """Names of the output variables, in the order the run wrote them: registered ones, the
        layers of an ensemble (:func:`lidmelt._variables.ensemble_variable`) and of a history."""
        return [n for n in _entries(self.summary, "outputs") if _is_output(n)]

    @property
    def inputs(self) -> list[str]:
        """Names of the aligned inputs that have a grid file in this folder."""
        entries, stored = _entries(self.summary, "inputs"), stored_names(self.summary)
        known = [k for k, v in entries.items() if k in INPUTS and isinstance(v, dict)]
        return [k for k in known if entries[k].get("file") or k in stored]

    def file(self, name: str) -> Path:
        """Path of the GeoTIFF holding output variable or aligned input ``name``."""
        for names, file_of in ((self.outputs, output_file), (self.inputs, input_file)):
            if name in names and in_store(self.summary, name):
                msg = (
                    f"{name!r} of run {str(self.shown_path)!r} is in its {ZARR_NAME} only "
                    "(outputs.geotiff = false); this command reads GeoTIFFs: run again with "
                    "outputs.geotiff = true."
                )
                raise RunDirError(msg)
            if name in names:
                return self.checked(file_of(name))
        valid = ", ".join(self.outputs + self.inputs)
        msg = f"{name!r} is not a variable of this run. Valid names: {valid}."
        raise RunDirError(msg)

    def open(self, name: str) -> xr.DataArray:
        """Load one variable as a 2-D (y, x) float DataArray with NaN nodata and its CRS.

        The DataArray's attrs carry ``units`` and ``long_name`` from the summary.
        """
        import rioxarray  # noqa: F401  (registers the .rio accessor)

        if in_store(self.summary, name) and name in self.outputs + self.inputs:
            da = open_variable(self.store(), name)
        else:
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

    def store(self) -> str | Path:
        """The run's Zarr store: its URL (``[outputs] zarr_url``, checked when the run was
        opened), else its folder here (checked unchanged since then)."""
        return store_url(self.summary) or self.checked(f"{ZARR_NAME}/zarr.json").parent

    @property
    def manifest_files(self) -> list[str]:
        """The files of the manifest (relative names), verified when the folder was opened."""
        return list(self._stats)

    def checked(self, rel: str) -> Path:
        """Path of manifest file ``rel``, checked to be the file verified when opened.

        Raises
        ------
        RunDirError
            If the file is missing or was replaced since (a run swapped into the folder).
        """
        path = self.path / rel
        try:
            st = path.stat()
        except FileNotFoundError:
            st = None
        old = self._stats.get(rel)
        if st is None or old is None or (st.st_ino, st.st_size) != (old.st_ino, old.st_size):
            msg = (
                f"{rel!r} in run directory {str(self.path)!r} is missing or was replaced after "
                "the folder was opened (a run finished into it meanwhile). Run the command again."
            )
            raise RunDirError(msg)
        return path


def _check_entries(path: Path, summary: Mapping[str, Any]) -> None:
    """A RunDirError for an entry of the summary's outputs or inputs that no run writes (a name
    outside the registry, or another file than the registry's): a summary changed and resealed
    after the run is refused like any tampered run, not skipped."""
    for group, file_of in (("outputs", output_file), ("inputs", input_file)):
        for name, entry in _entries(summary, group).items():
            renamed = group == "outputs" and not is_legacy_probability(str(name))
            if renamed and (legacy := legacy_message(str(name))):
                msg = f"run directory {str(path)!r} was made by an earlier lidmelt: {legacy}"
                raise RunDirError(msg)
            known = name in INPUTS if group == "inputs" else _is_output(name)
            listed = entry.get("file") if isinstance(entry, dict) else None
            if not known or listed not in (None, file_of(name)):
                msg = (
                    f"run directory {str(path)!r} fails its manifest check: summary.json lists "
                    f"{str(name)[:80]!r} in {group} with the file {str(listed)[:80]!r}, which no "
                    "lidmelt run writes: the summary was changed after the run (tampered). Run "
                    "'lidmelt run' again to rewrite the folder."
                )
                raise RunDirError(msg)


def _is_output(name: str) -> bool:
    """A name a run writes as an output: the kernel's, an ensemble's or a history's."""
    # an ensemble map of an earlier lidmelt passes: products refuse it with "run again"
    ensemble = ensemble_variable(name) is not None or is_legacy_probability(name)
    return name in OUTPUTS or name in HISTORY or ensemble


def _entries(summary: Mapping[str, Any], group: str) -> dict[str, Any]:
    entries = summary.get(group)
    return entries if isinstance(entries, dict) else {}


def _missing_run(path: Path) -> RunDirError:
    """The error for a run directory that is not there: a run in progress, or a wrong path."""
    holder = lock_holder(path)
    if holder is not None or (leftovers(path) and not path.exists()):
        who = f" (process {holder.get('pid')})" if holder else ""
        msg = (
            f"run directory {str(path)!r} is being written by a run in progress{who}. "
            "Run the command again when that run has finished."
        )
        return RunDirError(msg)
    msg = (
        f"run directory {str(path)!r} does not exist or is not a folder. "
        "Give the output folder of a 'lidmelt run' (its -o OUT_DIR)."
    )
    return RunDirError(msg)


def open_run(path: str | Path) -> RunDir:
    """Open and validate a run directory.

    Parameters
    ----------
    path : str or pathlib.Path
        The run folder ``lidmelt run`` wrote (it holds ``summary.json``).

    Returns
    -------
    RunDir
        The run's grids, summary and variables, read on demand.

    Raises
    ------
    InputError
        If the folder is missing, is not a finished run, or was made by an earlier lidmelt.
    """
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
    if in_store(run.summary, FLAG_VARIABLE.name):
        path = Path(run.store())
        values, nodata = store_flags(run.store(), FLAG_VARIABLE.name), FLAG_NODATA
    elif FLAG_FILE not in run.manifest_files:
        return None
    else:
        path = run.checked(FLAG_FILE)
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
        "lid_isotherm_c": _lid_isotherm(cfg, cooling),
        "top_of_melting": cfg.lithosphere.top_of_melting if cooling is not None else None,
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


@dataclass(frozen=True, kw_only=True)
class RunRecord:
    """What a run used and what it wrote, as its ``summary.json`` records them
    (:func:`build_summary`).

    Attributes
    ----------
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
        outputs, a ``"warnings"`` entry to the warnings.
    """

    grid: Any
    model: Any
    cooling: Any | None
    provenance: Mapping[str, Mapping[str, Any]]
    gridded_inputs: Collection[str]
    outputs: Sequence[str]
    statistics: Mapping[str, Any]
    warnings: Sequence[str] = ()
    extra: Mapping[str, Any] | None = None


def build_summary(cfg: Any, record: RunRecord) -> dict[str, Any]:
    """The ``summary.json`` document of a run (keys in the module docstring) from its
    configuration ``cfg`` (RunConfig) and what it used and wrote (:class:`RunRecord`)."""
    r = record
    extra = dict(r.extra or {})
    doc = {
        "lidmelt_run": RUN_FORMAT_VERSION,
        "lidmelt_version": __version__,
        "created_utc": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "grid": {**r.grid.to_dict(), "registration": _registration(cfg, r.provenance)},
        "model": {
            "name": r.model.name,
            "parameters": r.model.parameters(),
            "reference": r.model.reference,
            "sources": dict(r.model.sources),
        },
        "ambient_potential_temperature_c": cfg.model.ambient_potential_temperature_c,
        "cooling": _cooling_entry(cfg, r.cooling),
        "min_top_of_melting_km": cfg.model.min_top_of_melting_km,
        "method": cfg.compute.method,
        "inputs": {
            name: {**prov, "file": input_file(name) if name in r.gridded_inputs else None}
            for name, prov in r.provenance.items()
        },
        "outputs": {
            name: {
                "file": output_file(name),
                "units": OUTPUTS[name].units,
                "long_name": OUTPUTS[name].long_name,
            }
            for name in r.outputs
        },
        "validity_flag": {
            "file": FLAG_FILE,
            "nodata": FLAG_NODATA,
            "meanings": {str(k): v for k, v in FLAG_MEANINGS.items()},
        },
        "statistics": dict(r.statistics),
        "warnings": list(r.warnings),
        "workflow_file": str(cfg.workflow_path),
        "workflow_overrides": list(cfg.overrides),
        "workflow": cfg.text,
    }
    doc["outputs"].update(extra.pop("outputs", {}))
    doc["warnings"] += list(extra.pop("warnings", ()))  # a stage's warnings join the run's
    return {**doc, **extra}


def _cooling_entry(cfg: Any, cooling: Any | None) -> dict[str, Any] | None:
    """The summary's ``cooling`` entry (None when a lid grid gave the lid everywhere)."""
    if cooling is None:
        return None
    return {
        "name": cooling.name,
        "top_of_melting": cfg.lithosphere.top_of_melting,
        "lid_isotherm_c": _lid_isotherm(cfg, cooling),
        "parameters": cooling.parameters(),
        "reference": cooling.reference,
        "sources": dict(cooling.sources),
    }


def _lid_isotherm(cfg: Any, cooling: Any | None) -> float | None:
    """The lid isotherm [deg C] a run used: None without a cooling model or under the geotherm
    rule (which does not read it)."""
    if cooling is None or cfg.lithosphere.top_of_melting != "isotherm":
        return None
    return cfg.lithosphere.lid_isotherm_c


def _registration(cfg: Any, provenance: Mapping[str, Mapping[str, Any]]) -> str:
    """The node/cell convention of the grid: that of the ``grid.like`` file; a grid built from
    an extent is made of cells. lidmelt's cells are always centred on the coordinates."""
    if not cfg.grid.like:
        return "pixel"
    return str(provenance.get(input_for_workflow_key(cfg.grid.like).name, {}).get("registration"))


def write_summary(run_dir: str | Path, doc: Mapping[str, Any]) -> Path:
    """Write ``doc`` as the run directory's ``summary.json`` atomically; return its path.

    The summary is sealed first: the manifest of every file now in ``run_dir`` (but the
    figures) and the summary's own checksum are added (:mod:`lidmelt.grids._manifest`).
    """
    run_dir = Path(run_dir)
    return write_json_atomic(
        run_dir / SUMMARY_NAME, seal_summary(dict(doc), run_dir, summary_name=SUMMARY_NAME)
    )


def seal_run(run_dir: str | Path, doc: Mapping[str, Any], *, sources: Mapping[str, str]) -> Path:
    """Check every file of a staged run, then write its summary with the manifest.

    Every file is checked (:func:`lidmelt.grids._manifest.check_written`: every GeoTIFF block
    inside its file, the flag grid, NetCDF and JSON read back completely) and hashed; a run
    whose cells all lack data or cannot be evaluated is refused (:func:`check_evaluable`).
    Returns the summary's path (read back and verified).
    """
    run_dir = Path(run_dir)
    check = check_written(run_dir, flag_file=FLAG_FILE, store_url=store_url(doc))
    check_evaluable(check.flag_counts, sources=sources)
    path = write_summary(run_dir, doc)
    written = json.loads(path.read_text(encoding="utf-8"))
    verify_manifest(run_dir, written)
    check_recorded(written)  # a store at a URL: every chunk there, as recorded
    return path
