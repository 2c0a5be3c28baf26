"""Read input grids (GeoTIFF or any GDAL raster, CF NetCDF, x y value text) into checked
2-D DataArrays.

Every grid lidmelt reads goes through :func:`open_grid`, which returns one layout whatever the
file: a 2-D ``(y, x)`` float DataArray, NaN for nodata, ``y`` descending (north up), a CRS and
an affine transform written with rioxarray, no leftover on-disk encoding, and ``attrs`` holding
``units``, ``long_name`` and ``source`` (the path).
"""

from __future__ import annotations

import hashlib
import logging
import warnings
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import rasterio.errors
import rioxarray
import xarray as xr
from pyproj import CRS

from lidmelt._errors import GridError, InputError
from lidmelt.grids._grid import finalise_grid
from lidmelt.grids._netcdf import CRS_FIX, given_crs, open_netcdf
from lidmelt.grids._textgrid import TEXT_GRID_SUFFIXES, open_text_grid
from lidmelt.grids._units import canonical_unit, dlnvs_to_kelvin, unit_factor

_log = logging.getLogger(__name__)

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
    crs: str | None = None,
    x_name: str | None = None,
    y_name: str | None = None,
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
    crs : str, optional
        The CRS of a file that states none (``"EPSG:4326"``, WKT...); a file that states a
        different one is an error.
    x_name, y_name : str, optional
        NetCDF and text grids: the names of the x and y coordinates, where the file's are not
        recognisable (CF units, lat/lon names).

    Returns
    -------
    xarray.DataArray
        Dims ``("y", "x")``, float32 (float32 and small-integer files) or float64, NaN where the
        file has nodata (``mask_and_scale``: fill values masked, scale and offset applied),
        ``y`` descending, a CRS (EPSG:4326 for CF lat/lon without one) and transform written
        by rioxarray, ``encoding`` empty, ``attrs`` = {``units``, ``long_name``, ``source``}.
        Longitudes are kept as stored (0..360 stays 0..360); :func:`lidmelt.grids._align.align`
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
    hints = {k: v for k, v in {"crs": crs, "x_name": x_name, "y_name": y_name}.items() if v}
    da, file_units, long_name = reader.open(
        path, variable=variable, name=name, chunks=chunks, **hints
    )
    units = _check_units(file_units, units_expected, name=name, path=path)
    da.name = name
    stated = {k: da.attrs[k] for k in ("node_offset",) if k in da.attrs}
    da.attrs = {"units": units or "", "long_name": long_name or name, "source": str(path)}
    da.attrs.update(stated)
    da.encoding = {}
    return da


def open_input(
    spec: Any,
    *,
    name: str,
    units_expected: str,
    chunks: int | str | Mapping[str, int] | None = None,
) -> xr.DataArray:
    """Read the grid of a workflow input, with its per-input keys applied.

    Parameters
    ----------
    spec : InputSpec
        A :class:`lidmelt._config.InputSpec` (any object with its fields): ``path``,
        ``variable``, ``crs``, ``x_name``, ``y_name`` are handed to :func:`open_grid`;
        ``nodata`` (a value in the file, after the file's own packing) becomes NaN; then
        ``value * scale + offset``; then the unit (``file_units``, the workflow key units,
        else the file's, else ``units_expected``) is converted to ``units_expected``
        (:func:`lidmelt.grids._units.unit_factor`). With ``dlnvs_dt_per_k`` the grid holds
        shear-velocity anomalies in percent, turned into kelvin
        (:func:`lidmelt.grids._units.dlnvs_to_kelvin`). Each conversion is logged.
    name : str
        The input's variable name (``plate_age_ma``...).
    units_expected : str
        The unit of the input in the variable registry.
    chunks : optional
        As for :func:`open_grid`.

    Returns
    -------
    xarray.DataArray
        As :func:`open_grid`, values in ``units_expected``; ``attrs["conversion"]`` says what
        was done.

    Raises
    ------
    GridError
        For an unknown or unconvertible unit (the message lists the known ones), a CRS that
        contradicts the file's, or axes that cannot be found.
    """
    opt = {k: getattr(spec, k, None) for k in ("crs", "x_name", "y_name")}
    da = open_grid(spec.path, variable=spec.variable, name=name, chunks=chunks, **opt)
    attrs = dict(da.attrs)
    key = f"inputs.{getattr(spec, 'name', name)}"
    where = f"grid {str(spec.path)!r} ({key})"
    steps = []
    nodata, scale, offset = (getattr(spec, k, None) for k in ("nodata", "scale", "offset"))
    if nodata is not None:
        da = da.where(da != nodata)
        steps.append(f"{nodata:g} as nodata")
    if scale is not None or offset is not None:
        da = da * (1.0 if scale is None else scale) + (0.0 if offset is None else offset)
        steps.append(f"value * {scale if scale is not None else 1:g} + {offset or 0:g}")
    units = getattr(spec, "file_units", None) or attrs.get("units") or None
    dlnvs = getattr(spec, "dlnvs_dt_per_k", None)
    if dlnvs is not None:
        if canonical_unit(units) not in (None, "%"):
            msg = (
                f"{where} has units {units!r}, but dlnvs_dt_per_k is set, which reads the grid "
                'as a shear-velocity anomaly in percent. Give units = "%" or convert the file.'
            )
            raise GridError(msg)
        factor = dlnvs_to_kelvin(dlnvs)
        steps.append(f"Vs anomaly % * {factor:g} K/% (dlnvs_dt_per_k = {dlnvs:g} per K)")
    elif units is None:
        factor = 1.0
        steps.append(f"no units stated: taken as {units_expected}")
    else:
        factor = unit_factor(units, units_expected, where=where)
        if factor != 1.0:
            steps.append(f"{units} -> {units_expected} (x {factor:.6g})")
    if factor != 1.0:
        da = da * factor
    for step in steps:
        _log.info("%s: %s", key, step)
    da.attrs = {**attrs, "units": units_expected, "conversion": "; ".join(steps) or "none"}
    da.name = name
    return da


def detect_format(path: str | Path, *, name: str = "grid") -> str:
    """The format :func:`open_grid` reads ``path`` as: ``"netcdf"``, ``"text"`` or ``"gdal"``.

    Parameters
    ----------
    path : str or Path
        The file.
    name : str
        What the file is for (used in messages).

    Returns
    -------
    str
        One of :data:`GRID_FORMATS`: the first reader whose magic bytes start the file (NetCDF),
        ``"text"`` for an x y value file (suffix ``.xyz``, ``.txt``, ``.csv``, ``.dat`` or
        ``.tsv``), GDAL (which recognises its many formats itself) for everything else.

    Raises
    ------
    InputError
        If the file does not exist, is a folder or cannot be read.
    """
    magic = _first_bytes(Path(path), name=name)
    suffix = Path(path).suffix.lower()
    return next(fmt for fmt, reader in _READERS.items() if reader.recognises(magic, suffix))


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
    path: Path,
    *,
    variable: str | None,
    name: str,
    chunks: Any,
    crs: str | None = None,
    x_name: str | None = None,
    y_name: str | None = None,
) -> tuple[xr.DataArray, str | None, str]:
    """Band 1 of a GDAL raster, lazily with ``chunks``; (grid, units, long_name)."""
    if x_name or y_name:
        msg = (
            f"x_name/y_name were given for {str(path)!r}, a GeoTIFF or other GDAL raster, "
            "whose axes are fixed by its transform. Remove them (they are for NetCDF and "
            "text grids)."
        )
        raise GridError(msg)
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

    stated = None if da.rio.crs is None else CRS.from_user_input(da.rio.crs.to_wkt())
    found = given_crs(crs, stated, source=f"grid file {str(path)!r} for {name!r}")
    if found is None:
        msg = (
            f"grid file {str(path)!r} for {name!r} has no CRS (coordinate reference system). "
            'Give it with the input key crs (e.g. crs = "EPSG:4326"), or '
        )
        raise GridError(msg + CRS_FIX[0].lower() + CRS_FIX[1:])
    transform = da.rio.transform()
    if transform.b != 0 or transform.d != 0:
        msg = (
            f"grid file {str(path)!r} for {name!r} is rotated or sheared (transform "
            f"{tuple(transform)[:6]}); lidmelt needs a north-up grid. Warp it first, e.g. "
            "'gdalwarp IN OUT.tif'."
        )
        raise GridError(msg)
    units = da.attrs.get("units") or None
    long_name = da.attrs.get("long_name") or name
    da = finalise_grid(da, found)
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
    """One input format: the first bytes or file suffixes that identify it, and its reader.

    ``open(path, *, variable, name, chunks, crs=None, x_name=None, y_name=None)`` returns the
    grid (north up, CRS and transform written), the units the file states (or None) and a long
    name.
    """

    magic: tuple[bytes, ...]  # empty with no suffixes: any file (the fallback, listed last)
    open: Callable[..., tuple[xr.DataArray, str | None, str]]
    suffixes: tuple[str, ...] = ()

    def recognises(self, first_bytes: bytes, suffix: str = "") -> bool:
        if self.suffixes:
            return suffix in self.suffixes and not first_bytes.startswith(_NETCDF_MAGIC)
        return not self.magic or first_bytes.startswith(self.magic)


_READERS: dict[str, _Reader] = {
    "netcdf": _Reader(_NETCDF_MAGIC, open_netcdf),
    "text": _Reader((), open_text_grid, TEXT_GRID_SUFFIXES),
    "gdal": _Reader((), _open_raster),
}

#: Formats :func:`detect_format` returns, in the order they are tried.
GRID_FORMATS = tuple(_READERS)
