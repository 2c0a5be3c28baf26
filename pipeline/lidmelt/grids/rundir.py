"""Read a run directory written by ``lidmelt run``.

A run directory holds ``summary.json`` (with the marker ``"lidmelt_run": 1``), one GeoTIFF per
output variable (``<variable>.tif``), the run's inputs aligned to the target grid
(``input_<name>.tif``) and optionally ``validity_flag.tif``, ``lidmelt.nc``, ``maps/`` and
``report.html``. The keys of ``summary.json`` that readers may rely on:

``lidmelt_run`` (int, format version), ``lidmelt_version``, ``created_utc``,
``grid`` {``crs_wkt``, ``transform`` (6 affine coefficients a, b, c, d, e, f), ``width``,
``height``, ``bounds`` [west, south, east, north] in the grid CRS},
``model`` {``name``, ``parameters`` {name: value}, ``reference``},
``ambient_potential_temperature_c``, ``cooling`` ({``name``, ``lid_isotherm_c``,
``parameters``} or null when a lid grid was given), ``min_top_of_melting_km``,
``inputs`` {name: {``file`` (aligned grid in this folder), ``source`` (path or null),
``sha256`` (or null), ...}}, ``outputs`` {variable: {``file``, ``units``, ``long_name``}},
``statistics`` {``melting_cells``, ``melting_area_km2``, ``melt_volume_km3``,
``variables`` {variable: {``min``, ``max``, ``mean``}}}, ``workflow`` (the workflow text).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from lidmelt.errors import RunDirError

SUMMARY_NAME = "summary.json"
RUN_FORMAT_VERSION = 1


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
