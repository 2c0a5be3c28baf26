"""Read input grids (GeoTIFF or any GDAL raster, CF NetCDF) into checked 2-D DataArrays.

Every grid lidmelt reads goes through :func:`open_grid`, which returns one layout whatever the
file: a 2-D ``(y, x)`` float DataArray, NaN for nodata, ``y`` descending (north up), a CRS and
an affine transform written with rioxarray, no leftover on-disk encoding, and ``attrs`` holding
``units``, ``long_name`` and ``source`` (the path).
"""

from __future__ import annotations

import hashlib
import warnings
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import rasterio.errors
import rioxarray
import xarray as xr
from pyproj import CRS

from lidmelt.errors import GridError, InputError
from lidmelt.grids.grid import finalise_grid
from lidmelt.grids.netcdf import CRS_FIX, open_netcdf

__all__ = ["GRID_FORMATS", "detect_format", "normalise_units", "open_grid", "sha256_file"]

# First bytes of the file formats read through xarray's netCDF4 engine: netCDF classic, 64-bit
# offset, CDF-5 (NetCDF Users Guide, "File Format Specifications") and netCDF-4/HDF5 (the HDF5
# format signature). Everything else goes to GDAL through rasterio.
_NETCDF_MAGIC = (b"CDF\x01", b"CDF\x02", b"CDF\x05", b"\x89HDF\r\n\x1a\n")
_MAGIC_BYTES = 8


# Spellings of the units lidmelt grids use, mapped to the spelling lidmelt writes (common
# practice; the CF/UDUNITS names plus the abbreviations seen in marine-geoscience grids).
_UNIT_ALIASES = {
    "K": {"k", "kelvin", "kelvins", "degk", "deg_k", "degrees_k"},
    "km": {"km", "kilometer", "kilometers", "kilometre", "kilometres"},
    "m": {"m", "meter", "meters", "metre", "metres"},
    "Ma": {"ma", "myr", "my", "m.y.", "million years", "million_years", "myrs"},
    "wt%": {"wt%", "wt.%", "wt %", "wt_pct", "weight percent", "weight_percent"},
    "1": {"1", "dimensionless", "fraction", "unitless"},
}


def normalise_units(units: str | None) -> str | None:
    """Return lidmelt's spelling of a units string, or the stripped string if it is not known.

    Parameters
    ----------
    units : str or None
        A units label as found in a file (``"kilometers"``, ``"Myr"``, ``"kelvin"``...).

    Returns
    -------
    str or None
        ``"km"``, ``"Ma"``, ``"K"``, ``"m"``, ``"wt%"`` or ``"1"`` for the spellings listed in
        the module (common practice), the stripped input otherwise, None for None or "".
    """
    if units is None:
        return None
    text = str(units).strip()
    if not text:
        return None
    low = text.lower()
    for canonical, spellings in _UNIT_ALIASES.items():
        if low in spellings:
            return canonical
    return text


def sha256_file(path: str | Path) -> str:
    """SHA-256 hex digest of a file, read in 1 MiB blocks.

    Parameters
    ----------
    path : str or Path
        The file.

    Returns
    -------
    str
        64 lowercase hexadecimal characters.

    Raises
    ------
    InputError
        If the file does not exist or cannot be read.
    """
    path = Path(path)
    digest = hashlib.sha256()
    try:
        with path.open("rb") as handle:
            for block in iter(lambda: handle.read(1 << 20), b""):
                digest.update(block)
    except OSError as exc:
        msg = f"cannot read {str(path)!r} to checksum it ({exc}). Check the path and permissions."
        raise InputError(msg) from exc
    return digest.hexdigest()


def open_grid(
    path: str | Path,
    *,
    variable: str | None = None,
    name: str,
    units_expected: str | None = None,
    chunks: int | str | Mapping[str, int] | None = None,
) -> xr.DataArray:
    """Read one 2-D grid from a GeoTIFF (band 1; any GDAL raster works) or a CF NetCDF file.

    Parameters
    ----------
    path : str or Path
        The file. Its reader is chosen by :func:`detect_format`: NetCDF is recognised by its
        first bytes (classic, 64-bit offset, CDF-5 or netCDF-4/HDF5); anything else is opened
        with GDAL.
    variable : str, optional
        NetCDF only: the variable to read. If None, the file must hold exactly one data variable
        with two spatial dimensions (size-1 dimensions such as a single time step are dropped).
    name : str
        Name given to the returned DataArray (e.g. ``"plate_age_ma"``); used in messages.
    units_expected : str, optional
        The units the caller needs (``"Ma"``, ``"km"``, ``"K"``...). If the file states other
        units a :class:`GridError` is raised; if it states none, these are assumed.
        Spellings are compared after :func:`normalise_units`.
    chunks : int, str or mapping, optional
        If given, the data stay lazy (dask) with these chunks over ``y``/``x`` (GeoTIFFs are read
        with ``lock=False``). If None the values are loaded and the file is closed.

    Returns
    -------
    xarray.DataArray
        Dims ``("y", "x")``, float32 (float32 and small-integer files) or float64, NaN where the
        file has nodata (``mask_and_scale``: fill values masked, scale and offset applied),
        ``y`` descending, a CRS (EPSG:4326 for CF lat/lon without one) and transform written
        by rioxarray, ``encoding`` empty, ``attrs`` = {``units``, ``long_name``, ``source``}.
        Longitudes are kept as stored (0..360 stays 0..360); :func:`lidmelt.grids.align.align`
        handles either convention.

    Raises
    ------
    InputError
        If the file is missing or cannot be read (corrupt, truncated, not a raster).
    GridError
        If the variable is not 2-D, not found or ambiguous; if there is neither a CRS nor
        recognisable CF lat/lon coordinates; if coordinates are irregular or the raster is
        rotated; if the units differ from ``units_expected``.

    Notes
    -----
    NetCDF files are read through xarray's netCDF4 engine with its default lock: the HDF5 and
    netCDF-C libraries are not thread-safe, so ``lock=False`` is used for GDAL rasters only.
    """
    path = Path(path)
    reader = _READERS[detect_format(path, name=name)]
    da, file_units, long_name = reader.open(path, variable=variable, name=name, chunks=chunks)
    units = _check_units(file_units, units_expected, name=name, path=path)
    da.name = name
    da.attrs = {"units": units or "", "long_name": long_name or name, "source": str(path)}
    da.encoding = {}
    return da


def detect_format(path: str | Path, *, name: str = "grid") -> str:
    """The format :func:`open_grid` reads ``path`` as: ``"netcdf"`` or ``"gdal"``.

    Parameters
    ----------
    path : str or Path
        The file.
    name : str
        What the file is for (used in messages).

    Returns
    -------
    str
        One of :data:`GRID_FORMATS`: the first reader whose magic bytes start the file; GDAL
        (which recognises its many formats itself) for everything else.

    Raises
    ------
    InputError
        If the file does not exist, is a folder or cannot be read.
    """
    magic = _first_bytes(Path(path), name=name)
    return next(fmt for fmt, reader in _READERS.items() if reader.recognises(magic))


def _first_bytes(path: Path, *, name: str) -> bytes:
    """The first bytes of a grid file; InputError naming ``name`` if there is no such file."""
    if not path.is_file():
        msg = (
            f"grid file {str(path)!r} for {name!r} does not exist. Check the path (relative "
            "paths are resolved from the current folder)."
            if not path.exists()
            else f"grid path {str(path)!r} for {name!r} is a folder, not a file. Give the grid "
            "file."
        )
        raise InputError(msg)
    try:
        with path.open("rb") as handle:
            return handle.read(_MAGIC_BYTES)
    except OSError as exc:
        msg = f"cannot read grid file {str(path)!r} for {name!r} ({exc}). Check its permissions."
        raise InputError(msg) from exc


# --------------------------------------------------------------------------------------------
# GDAL rasters
# --------------------------------------------------------------------------------------------


def _open_raster(
    path: Path, *, variable: str | None, name: str, chunks: Any
) -> tuple[xr.DataArray, str | None, str]:
    """Band 1 of a GDAL raster, lazily with ``chunks``; (grid, units, long_name)."""
    if variable is not None:
        msg = (
            f"variable={variable!r} was given for {str(path)!r}, but that file is not "
            "NetCDF (GDAL rasters have bands, not variables; band 1 is read). Drop the "
            "variable option or give the NetCDF file."
        )
        raise GridError(msg)
    kwargs: dict[str, Any] = {"mask_and_scale": True, "band_as_variable": True}
    if chunks is not None:
        if isinstance(chunks, int):
            chunks = {"y": chunks, "x": chunks}
        kwargs.update(chunks=chunks, lock=False)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)  # per-band scales differ: see band_1
            ds = rioxarray.open_rasterio(path, **kwargs)
            da = ds["band_1"]
            if chunks is None:
                da = da.load()
                ds.close()
    except (rasterio.errors.RasterioError, OSError, RuntimeError, ValueError, KeyError) as exc:
        msg = (
            f"cannot read grid file {str(path)!r} for {name!r} as a raster ({exc}). The file "
            "is corrupt, truncated or not a GeoTIFF/GDAL raster; re-export it (e.g. "
            "'gdal_translate -of GTiff IN OUT.tif') or give a CF NetCDF file."
        )
        raise InputError(msg) from exc

    if da.rio.crs is None:
        msg = f"grid file {str(path)!r} for {name!r} has no CRS (coordinate reference system). "
        raise GridError(msg + CRS_FIX)
    transform = da.rio.transform()
    if transform.b != 0 or transform.d != 0:
        msg = (
            f"grid file {str(path)!r} for {name!r} is rotated or sheared (transform "
            f"{tuple(transform)[:6]}); lidmelt needs a north-up grid. Warp it first, e.g. "
            "'gdalwarp IN OUT.tif'."
        )
        raise GridError(msg)
    crs = CRS.from_user_input(da.rio.crs.to_wkt())
    units = da.attrs.get("units") or None
    long_name = da.attrs.get("long_name") or name
    da = finalise_grid(da, crs)
    return da, units, long_name


# --------------------------------------------------------------------------------------------
# Shared
# --------------------------------------------------------------------------------------------


def _check_units(found: Any, expected: str | None, *, name: str, path: Path) -> str | None:
    if isinstance(found, tuple | list):
        found = found[0] if found else None
    found_n = normalise_units(found)
    expected_n = normalise_units(expected)
    if expected_n is None:
        return found_n
    if found_n is None:
        return expected_n
    if found_n != expected_n:
        msg = (
            f"grid {name!r} in {str(path)!r} has units {found!r}; expected {expected!r}. "
            "Convert the values to the expected units, or, if only the label is wrong, "
            "correct the units metadata (NetCDF: the variable's 'units' attribute; GeoTIFF: "
            "the band unit)."
        )
        raise GridError(msg)
    return expected_n


# --------------------------------------------------------------------------------------------
# Reader registry: the one place that knows the input formats
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Reader:
    """One input format: the first bytes that identify it and the function that opens it.

    ``open(path, *, variable, name, chunks)`` returns the grid (north up, CRS and transform
    written), the units the file states (or None) and a long name.
    """

    magic: tuple[bytes, ...]  # empty: any file (the fallback, listed last)
    open: Callable[..., tuple[xr.DataArray, str | None, str]]

    def recognises(self, first_bytes: bytes) -> bool:
        return not self.magic or first_bytes.startswith(self.magic)


_READERS: dict[str, _Reader] = {
    "netcdf": _Reader(_NETCDF_MAGIC, open_netcdf),
    "gdal": _Reader((), _open_raster),
}

#: Formats :func:`detect_format` returns, in the order they are tried.
GRID_FORMATS = tuple(_READERS)
