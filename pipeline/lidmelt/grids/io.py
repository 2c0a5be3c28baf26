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

import numpy as np
import rasterio.errors
import rioxarray
import xarray as xr
from pyproj import CRS
from pyproj.exceptions import CRSError
from rasterio.crs import CRS as RioCRS

from lidmelt.errors import GridError, InputError
from lidmelt.grids.grid import transform_of

__all__ = ["GRID_FORMATS", "detect_format", "normalise_units", "open_grid", "sha256_file"]

# First bytes of the file formats read through xarray's netCDF4 engine: netCDF classic, 64-bit
# offset, CDF-5 (NetCDF Users Guide, "File Format Specifications") and netCDF-4/HDF5 (the HDF5
# format signature). Everything else goes to GDAL through rasterio.
_NETCDF_MAGIC = (b"CDF\x01", b"CDF\x02", b"CDF\x05", b"\x89HDF\r\n\x1a\n")
_MAGIC_BYTES = 8

_LAT_NAMES = {"lat", "latitude", "lats", "nav_lat"}
_LON_NAMES = {"lon", "long", "longitude", "lons", "nav_lon"}
_LAT_UNITS = {"degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"}
_LON_UNITS = {"degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"}

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

_CRS_FIX = (
    "Write a CRS into the file (GeoTIFF: 'gdal_edit.py -a_srs EPSG:4326 FILE'; in Python: "
    "da.rio.write_crs('EPSG:4326')) or, for NetCDF, add CF coordinates named lat/lon with "
    "units 'degrees_north'/'degrees_east' (or a grid_mapping variable for projected x/y)."
)


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
        raise GridError(msg + _CRS_FIX)
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
    da = _finalise(da, crs)
    return da, units, long_name


# --------------------------------------------------------------------------------------------
# CF NetCDF
# --------------------------------------------------------------------------------------------


def _classify(dim: str, coord: xr.DataArray | None) -> str | None:
    """Return 'lat', 'lon', 'y', 'x' or None for one dimension of a NetCDF variable."""
    low = dim.lower()
    attrs = coord.attrs if coord is not None else {}
    units = str(attrs.get("units", "")).strip().lower().replace(" ", "_")
    standard = str(attrs.get("standard_name", "")).strip().lower()
    axis = str(attrs.get("axis", "")).strip().upper()
    if standard == "latitude" or units in _LAT_UNITS or low in _LAT_NAMES:
        return "lat"
    if standard == "longitude" or units in _LON_UNITS or low in _LON_NAMES:
        return "lon"
    # plain "degrees" on a y/x axis: latitude/longitude (unless a rotated-pole grid)
    degrees = units in {"degree", "degrees"} and not standard.startswith("grid_")
    if standard in {"projection_y_coordinate", "grid_latitude"} or axis == "Y" or low == "y":
        return "lat" if degrees else "y"
    if standard in {"projection_x_coordinate", "grid_longitude"} or axis == "X" or low == "x":
        return "lon" if degrees else "x"
    return None


def _spatial_dims(var: xr.DataArray, ds: xr.Dataset) -> dict[str, str] | None:
    """Map role ('lat'/'lon' or 'y'/'x') to dim name for a variable, or None if not spatial."""
    dims = [d for d in var.dims if var.sizes[d] > 1]
    if len(dims) != 2:
        return None
    roles = {}
    for dim in dims:
        role = _classify(dim, ds[dim] if dim in ds.variables else None)
        if role is None:
            return None
        roles[role] = dim
    if set(roles) in ({"lat", "lon"}, {"y", "x"}):
        return roles
    return None


def _open_netcdf(
    path: Path, *, variable: str | None, name: str, chunks: Any
) -> tuple[xr.DataArray, str | None, str]:
    """One 2-D variable of a CF NetCDF file, lazily with ``chunks``; (grid, units, long_name)."""
    ds = _open_dataset(path, name=name, chunks=chunks)
    try:
        variable = _pick_variable(ds, variable, path=path, name=name)
        var, crs = _located_variable(ds, variable, path=path)
    except BaseException:
        ds.close()
        raise
    units = var.attrs.get("units")
    long_name = var.attrs.get("long_name") or var.attrs.get("standard_name") or variable
    var.attrs = {}
    var.encoding = {}
    if chunks is None:
        var = _load(var, ds, variable=variable, path=path)
    var = _finalise(var, crs)
    if chunks is not None:
        var = var.chunk(chunks if isinstance(chunks, Mapping) else {"y": chunks, "x": chunks})
    return var, units, long_name


def _open_dataset(path: Path, *, name: str, chunks: Any) -> xr.Dataset:
    try:
        return xr.open_dataset(
            path,
            engine="netcdf4",
            mask_and_scale=True,
            decode_coords="all",
            decode_times=False,
            chunks={} if chunks is not None else None,
        )
    except (OSError, RuntimeError, ValueError, KeyError, TypeError) as exc:
        msg = (
            f"cannot read grid file {str(path)!r} for {name!r} as NetCDF ({exc}). The file is "
            "corrupt or truncated; re-export it, or convert it with "
            "'gdal_translate -of GTiff IN OUT.tif'."
        )
        raise InputError(msg) from exc


def _pick_variable(ds: xr.Dataset, variable: str | None, *, path: Path, name: str) -> str:
    """``variable``, or the file's one 2-D gridded variable; GridError if absent or ambiguous."""
    listing = ", ".join(f"{k}{tuple(v.dims)}" for k, v in ds.data_vars.items()) or "none"
    if variable is None:
        candidates = [k for k, v in ds.data_vars.items() if _spatial_dims(v, ds) is not None]
        if len(candidates) != 1:
            found = "no" if not candidates else f"{len(candidates)} ({', '.join(candidates)})"
            msg = (
                f"NetCDF file {str(path)!r} for {name!r} has {found} 2-D gridded variables; "
                f"expected exactly one. Its variables: {listing}. Choose one with "
                "variable=NAME (workflow: 'variable = \"NAME\"')."
            )
            raise GridError(msg)
        return str(candidates[0])
    if variable not in ds.data_vars:
        msg = (
            f"NetCDF file {str(path)!r} has no data variable {variable!r}. Its variables: "
            f"{listing}. Give one of these names."
        )
        raise GridError(msg)
    return variable


def _located_variable(ds: xr.Dataset, variable: str, *, path: Path) -> tuple[xr.DataArray, CRS]:
    """The variable as a (lazy) ``(y, x)`` grid on exactly regular coordinates, and its CRS."""
    var = ds[variable]
    roles = _spatial_dims(var, ds)
    if roles is None:
        msg = (
            f"variable {variable!r} in {str(path)!r} has dims {dict(var.sizes)}; expected "
            "exactly two spatial dimensions (lat/lon, latitude/longitude or y/x, each longer "
            "than 1, with CF units such as 'degrees_north'/'degrees_east'). Select one 2-D "
            "slice (e.g. 'ncks -d time,0') or give the right variable."
        )
        raise GridError(msg)
    squeeze = [d for d in var.dims if var.sizes[d] == 1]
    var = var.squeeze(squeeze, drop=True) if squeeze else var
    geographic = "lat" in roles
    ydim, xdim = (roles["lat"], roles["lon"]) if geographic else (roles["y"], roles["x"])
    crs = _netcdf_crs(ds, var, path=path, geographic=geographic)
    if crs is None:
        msg = (
            f"variable {variable!r} in {str(path)!r} has projected-looking coordinates "
            f"({ydim!r}, {xdim!r}) but no CRS: no grid_mapping variable and no lat/lon "
            "units. "
        )
        raise GridError(msg + _CRS_FIX)
    for dim in (ydim, xdim):
        if dim not in ds.variables:
            msg = (
                f"dimension {dim!r} of {variable!r} in {str(path)!r} has no coordinate "
                "values, so the grid cannot be located. Add a coordinate variable with the "
                "cell-centre positions. " + _CRS_FIX
            )
            raise GridError(msg)
    var = var.drop_vars([c for c in var.coords if c not in (ydim, xdim)])
    var = var.rename({ydim: "y", xdim: "x"}).transpose("y", "x")
    regular = {
        dim: _regular_coords(
            np.asarray(var[dim].values, dtype=np.float64), dim=dim, variable=variable, path=path
        )
        for dim in ("y", "x")
    }
    return var.assign_coords(regular), crs


def _load(var: xr.DataArray, ds: xr.Dataset, *, variable: str, path: Path) -> xr.DataArray:
    """The values read into memory; the file is closed either way."""
    try:
        return var.load()
    except (OSError, RuntimeError, ValueError) as exc:
        msg = (
            f"cannot read the values of {variable!r} from {str(path)!r} ({exc}). The "
            "file is corrupt or truncated; re-export it."
        )
        raise InputError(msg) from exc
    finally:
        ds.close()


def _netcdf_crs(ds: xr.Dataset, var: xr.DataArray, *, path: Path, geographic: bool) -> CRS | None:
    gm = var.encoding.get("grid_mapping") or var.attrs.get("grid_mapping")
    if gm and " " not in str(gm) and gm in ds.variables:
        attrs = ds[gm].attrs
        try:
            wkt = attrs.get("crs_wkt") or attrs.get("spatial_ref")
            crs = CRS.from_wkt(wkt) if wkt else CRS.from_cf(dict(attrs))
        except CRSError as exc:
            msg = (
                f"the grid_mapping variable {gm!r} in {str(path)!r} does not describe a CRS "
                f"({exc}). Fix its attributes (CF grid_mapping_name and parameters, or "
                "crs_wkt)."
            )
            raise GridError(msg) from exc
        if crs.is_geographic and crs.to_epsg() is None:
            # CF latitude_longitude with the WGS84 ellipsoid and no datum: taken as WGS 84
            # (common practice).
            ell = crs.ellipsoid
            if (
                ell is not None
                and abs(ell.semi_major_metre - 6378137.0) < 1e-3
                and abs(ell.inverse_flattening - 298.257223563) < 1e-6
            ):
                return CRS.from_epsg(4326)
        return crs
    if geographic:
        return CRS.from_epsg(4326)
    return None


def _regular_coords(values: np.ndarray, *, dim: str, variable: str, path: Path) -> np.ndarray:
    """Check a coordinate is evenly spaced; return it recomputed exactly from its end points."""
    n = values.size
    if not np.all(np.isfinite(values)):
        msg = (
            f"coordinate {dim!r} of {variable!r} in {str(path)!r} has NaN or infinite "
            "values. Fix the coordinate variable."
        )
        raise GridError(msg)
    step = (values[-1] - values[0]) / (n - 1)
    regular = values[0] + step * np.arange(n)
    # 1 % of a cell absorbs float32 rounding of stored coordinates (common practice)
    if step == 0 or np.max(np.abs(values - regular)) > 0.01 * abs(step):
        worst = float(np.max(np.abs(np.diff(values) - step)))
        msg = (
            f"coordinate {dim!r} of {variable!r} in {str(path)!r} is not evenly spaced "
            f"(mean step {step!r}, steps differ by up to {worst!r}); lidmelt needs a regular "
            "grid. Resample it onto a regular grid first (e.g. 'gdalwarp' or xarray interp)."
        )
        raise GridError(msg)
    return regular


# --------------------------------------------------------------------------------------------
# Shared
# --------------------------------------------------------------------------------------------


def _finalise(da: xr.DataArray, crs: CRS) -> xr.DataArray:
    """North up, x ascending, float dtype, a fresh spatial_ref with CRS and transform."""
    if da.sizes["y"] > 1 and float(da["y"][0]) < float(da["y"][-1]):
        da = da.isel(y=slice(None, None, -1))
    if da.sizes["x"] > 1 and float(da["x"][0]) > float(da["x"][-1]):
        da = da.isel(x=slice(None, None, -1))
    if da.dtype.kind != "f":
        da = da.astype(np.float32 if np.dtype(da.dtype).itemsize <= 2 else np.float64)
    transform = transform_of(da)
    da = da.drop_vars("spatial_ref", errors="ignore")
    da.attrs = {}
    da.encoding = {}
    da = da.rio.write_crs(RioCRS.from_wkt(crs.to_wkt()))
    return da.rio.write_transform(transform)


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
    "netcdf": _Reader(_NETCDF_MAGIC, _open_netcdf),
    "gdal": _Reader((), _open_raster),
}

#: Formats :func:`detect_format` returns, in the order they are tried.
GRID_FORMATS = tuple(_READERS)
