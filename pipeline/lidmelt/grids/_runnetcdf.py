"""The optional CF NetCDF of a run directory (``lidmelt.nc``): every output and aligned input,
read back lazily from the run's finished GeoTIFFs, with the validity flags as a CF flag variable.

File names come from :mod:`lidmelt.grids._rundir` (the run directory's one home); units, long
names and the classes of categorical variables from the registry (:mod:`lidmelt._variables`).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from lidmelt._variables import FLAG_NODATA, FLAG_VARIABLE, INPUTS, OUTPUTS
from lidmelt.grids._io import open_grid
from lidmelt.grids._rundir import FLAG_FILE, NETCDF_NAME, input_file, output_file
from lidmelt.grids._write import write_netcdf
from lidmelt.physics._flags import FLAG_KEYS


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
            da.attrs.update(cf_classes(registry[name]))
            data[name] = da
    data[FLAG_VARIABLE.name] = _cf_flag_variable(run_dir)
    ds = xr.Dataset(data)
    return write_netcdf(ds, run_dir / NETCDF_NAME, attrs={"title": "lidmelt run", **tags})


def cf_classes(var: Any) -> dict[str, Any]:
    """CF ``flag_values`` and ``flag_meanings`` of a categorical variable's classes (CF
    conventions, section "Flags"), from the registry; none for other variables."""
    if not var.classes:
        return {}
    return {
        "flag_values": np.array([c.value for c in var.classes], dtype=np.float32),
        "flag_meanings": " ".join(c.key for c in var.classes),
    }


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
