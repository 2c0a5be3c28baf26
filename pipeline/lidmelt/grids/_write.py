"""Write grids: tiled, compressed GeoTIFF (optionally COG) and CF NetCDF, atomically.

Both writers write to a temporary path from :func:`lidmelt._files.atomic_path` that is renamed
onto the destination only when the file is complete, so a reader never sees a half-written file
and a failed write leaves nothing behind. The GeoTIFF layout (profile, band encoding, COG copy,
tags) lives in :mod:`lidmelt.grids._geotiff`. Dask-backed grids are written chunk by chunk
through one open file handle, so memory stays flat however large the grid (see
``benchmarks/bench_write.py``).
"""

from __future__ import annotations

import math
import os
import warnings
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import rasterio
import rasterio.errors
import xarray as xr
from pyproj import CRS

from lidmelt import __version__
from lidmelt._errors import GridError, InputError
from lidmelt._files import atomic_path
from lidmelt.grids._geotiff import (
    TILE,
    BandWindows,
    check_dtype_nodata,
    convert_block,
    gtiff_profile,
    has_cog_driver,
    publish,
    set_metadata,
    staging_path,
    stringify_tags,
    tile_aligned,
    to_json,
    write_failed,
)
from lidmelt.grids._grid import check_dataarray, transform_of


def write_geotiff(
    da: xr.DataArray,
    path: str | Path,
    *,
    description: str,
    units: str,
    tags: Mapping[str, Any] | None = None,
    cog: bool = True,
    dtype: str = "float32",
    nodata: float = np.nan,
) -> Path:
    """Write a ``(y, x)`` grid to a single-band tiled, ZSTD-compressed GeoTIFF.

    Parameters
    ----------
    da : xarray.DataArray
        North-up ``(y, x)`` grid with a CRS (numpy- or dask-backed). NaN marks nodata.
    path : str or Path
        Destination; its folder is created if missing. An existing file is replaced.
    description : str
        Band description (shown by GIS software as the band name).
    units : str
        Band unit (GDAL band metadata, e.g. ``"km"``; ``"1"`` for dimensionless).
    tags : mapping, optional
        Dataset tags. Strings are written as they are, other values as JSON text.
    cog : bool
        If True and GDAL has the COG driver, the finished GTiff is converted to Cloud Optimized
        GeoTIFF layout (512 tiles, ZSTD, overviews) keeping tags, description and unit; else
        the tiled GTiff is kept.
    dtype : {"float32", "float64", "uint8", "uint16", "int16", "int32"}
        Data type on disk.
    nodata : float
        Nodata value: NaN for float types; for integer types a value of that type (e.g. 255
        for a uint8 flag grid), written wherever ``da`` is NaN.

    Returns
    -------
    pathlib.Path
        ``path``.

    Raises
    ------
    GridError
        If ``da`` is not a north-up ``(y, x)`` grid with a CRS, if ``dtype``/``nodata`` are not
        supported or do not fit, or if (integer dtypes) values are not whole numbers in range.
    InputError
        If a tag value cannot be written as JSON, or the file cannot be written (disk full,
        permissions).

    Notes
    -----
    Creation options are :func:`lidmelt.grids._geotiff.gtiff_profile`'s; the COG is a copy of the
    finished GTiff (:func:`lidmelt.grids._geotiff.copy_to_cog`). A dask-backed grid is rechunked
    to multiples of the tile and stored with :func:`dask.array.store` into one open rasterio
    handle (writes serialised by a lock, chunks computed by the threaded scheduler); with a
    dask.distributed client active the chunks are computed on the cluster a few at a time and
    written locally. On the 5400 x 10800 benchmark grid: GTiff 1.7-2.4 s and COG 5-9 s, peak
    RSS about 100 MB above the baseline for both (``benchmarks/bench_write.py``).
    """
    check_dataarray(da, what=f"grid {da.name!r}" if isinstance(da, xr.DataArray) else "grid")
    if "band" in da.dims:
        da = da.squeeze("band", drop=True)
    da = da.transpose("y", "x")
    np_dtype = check_dtype_nodata(dtype, nodata)
    meta = {"description": description, "units": units, "tags": stringify_tags(tags or {})}
    path = Path(path)
    profile = gtiff_profile(da, np_dtype, nodata)
    try:
        with atomic_path(path) as tmp, staging_path(tmp, cog=cog and has_cog_driver()) as staged:
            with rasterio.open(staged, "w", **profile) as dst:
                _write_band(dst, da, np_dtype, nodata)
                set_metadata(dst, **meta)
            publish(staged, tmp, integer=np_dtype.kind in "iu", **meta)
    except (rasterio.errors.RasterioError, OSError) as exc:
        raise write_failed(exc, what="GeoTIFF", where=path) from exc
    return path


def write_netcdf(
    ds: xr.Dataset | xr.DataArray,
    path: str | Path,
    *,
    attrs: Mapping[str, Any] | None = None,
) -> Path:
    """Write grids on one ``(y, x)`` grid to a CF-1.8 NetCDF-4 file.

    Parameters
    ----------
    ds : xarray.Dataset or xarray.DataArray
        Data variables, all ``(y, x)`` on the same grid with a CRS (numpy- or dask-backed).
        Each needs ``attrs["units"]``; ``long_name`` defaults to the variable name.
    path : str or Path
        Destination; its folder is created if missing. An existing file is replaced.
    attrs : mapping, optional
        Global attributes (e.g. ``title``, provenance). Strings and numbers are written as
        they are, other values as JSON text.

    Returns
    -------
    pathlib.Path
        ``path``, now holding the complete file.

    Raises
    ------
    GridError
        If a variable is not ``(y, x)``, the variables are on different grids, or there is no
        CRS.
    InputError
        If a variable has no units, an attribute cannot be written, or the file cannot be
        written.

    Notes
    -----
    Layout (CF conventions 1.8, common practice for gridded products): geographic grids get
    coordinates ``lat``/``lon`` (``standard_name`` latitude/longitude, ``units``
    degrees_north/degrees_east, ``axis`` Y/X); projected grids keep ``y``/``x`` with
    ``standard_name`` projection_y/x_coordinate and the CRS's axis unit. Either way a scalar
    ``crs`` grid_mapping variable carries the CF projection attributes from
    :meth:`pyproj.CRS.to_cf` plus ``crs_wkt``/``spatial_ref`` and GDAL's ``GeoTransform``, and
    each data variable names it in ``grid_mapping``. Variables are zlib-compressed (level 1,
    shuffle) with NaN as ``_FillValue`` for floats; integer variables keep the fill value found
    in ``attrs``/``encoding`` (``_FillValue``) or their rio nodata. Dask-backed data are written
    chunk by chunk.
    """
    ds = _as_dataset(ds)
    first_name = next(iter(ds.data_vars))
    first = ds[first_name]
    check_dataarray(first, what=f"variable {first_name!r}")
    crs = CRS.from_wkt(first.rio.crs.to_wkt())
    ydim, xdim, coords = _cf_coords(crs, first["y"].values, first["x"].values)
    variables = {}
    encoding: dict[str, dict[str, Any]] = {ydim: {"_FillValue": None}, xdim: {"_FillValue": None}}
    for var_name, var in ds.data_vars.items():
        var = _on_grid(var, name=var_name, first=first, first_name=first_name)
        variables[var_name] = ((ydim, xdim), var.data, _variable_attrs(var, name=var_name))
        encoding[var_name] = _variable_encoding(var)
    out = xr.Dataset(variables, coords=coords)
    out["crs"] = xr.DataArray(np.int32(0), attrs=_crs_attrs(crs, transform_of(first)))
    encoding["crs"] = {"dtype": "int32"}
    out.attrs = _global_attrs(attrs)
    path = Path(path)
    try:
        with atomic_path(path) as tmp:
            out.to_netcdf(tmp, engine="netcdf4", format="NETCDF4", encoding=encoding)
    except (OSError, RuntimeError) as exc:
        raise write_failed(exc, what="NetCDF", where=path) from exc
    return path


# --------------------------------------------------------------------------------------------
# GeoTIFF band writing
# --------------------------------------------------------------------------------------------


def _write_band(dst: Any, da: xr.DataArray, np_dtype: np.dtype, nodata: float) -> None:
    data = da.data
    if not _is_dask(data):
        dst.write(convert_block(np.asarray(data), np_dtype, nodata), 1)
        return
    data = tile_aligned(data).map_blocks(convert_block, np_dtype, nodata, dtype=np_dtype)
    windows = BandWindows(dst)
    try:
        if _distributed_client() is not None:
            _store_in_batches(data, windows)
        else:
            import dask.array as dsa

            dsa.store(data, windows, lock=False, scheduler="threads")
    except BaseException:
        windows.close()  # before the file is discarded: dask threads may still be writing
        raise


def _store_in_batches(data: Any, target: Any) -> None:
    """Compute blocks a few at a time with the active scheduler and write them here."""
    import dask

    starts = [np.concatenate([[0], np.cumsum(c)]) for c in data.chunks]
    keys = [(i, j) for i in range(data.numblocks[0]) for j in range(data.numblocks[1])]
    batch = 2 * (os.cpu_count() or 1)
    for k in range(0, len(keys), batch):
        group = keys[k : k + batch]
        values = dask.compute(*[data.blocks[i, j] for i, j in group])
        for (i, j), value in zip(group, values, strict=True):
            ys = slice(int(starts[0][i]), int(starts[0][i + 1]))
            xs = slice(int(starts[1][j]), int(starts[1][j + 1]))
            target[ys, xs] = value


def _distributed_client() -> Any:
    try:
        from distributed import default_client
    except ImportError:
        return None
    try:
        return default_client()
    except ValueError:
        return None


def _is_dask(data: Any) -> bool:
    return type(data).__module__.startswith("dask")


# --------------------------------------------------------------------------------------------
# NetCDF helpers
# --------------------------------------------------------------------------------------------

# attributes xarray's NetCDF encoder owns (set through the encoding) or this writer sets itself
_ENCODER_ATTRS = ("_FillValue", "missing_value", "grid_mapping", "coordinates")


def _as_dataset(ds: Any) -> xr.Dataset:
    if isinstance(ds, xr.DataArray):
        ds = ds.to_dataset(name=ds.name or "data")
    if not isinstance(ds, xr.Dataset) or not ds.data_vars:
        msg = f"write_netcdf needs a Dataset with data variables, got {type(ds).__name__}."
        raise GridError(msg)
    return ds


def _on_grid(var: xr.DataArray, *, name: Any, first: xr.DataArray, first_name: Any) -> xr.DataArray:
    """``var`` as ``(y, x)``; GridError unless it lies on the grid of the first variable."""
    if set(var.dims) != {"y", "x"}:
        msg = (
            f"variable {name!r} has dims {tuple(var.dims)}; expected ('y', 'x') like "
            f"{first_name!r}. Write other variables to their own file."
        )
        raise GridError(msg)
    var = var.transpose("y", "x")
    if var.shape != first.shape or not (
        np.array_equal(var["y"].values, first["y"].values)
        and np.array_equal(var["x"].values, first["x"].values)
    ):
        msg = (
            f"variable {name!r} is not on the grid of {first_name!r} (shapes "
            f"{var.shape} and {first.shape}). Align them first with "
            "lidmelt.grids._align.align."
        )
        raise GridError(msg)
    return var


def _variable_attrs(var: xr.DataArray, *, name: Any) -> dict[str, Any]:
    """CF attributes of one data variable: its own (NetCDF-safe), long_name, units, grid_mapping."""
    units = var.attrs.get("units")
    if units is None or str(units).strip() == "":
        msg = (
            f"variable {name!r} has no 'units' attribute; CF needs one. Set it, e.g. "
            f"ds[{name!r}].attrs['units'] = 'km' ('1' for dimensionless)."
        )
        raise InputError(msg)
    own = {k: v for k, v in var.attrs.items() if k not in _ENCODER_ATTRS}
    out = _stringify_attrs(own, where=f"variable {name!r}")
    out.setdefault("long_name", str(name))
    out["units"] = str(units)
    out["grid_mapping"] = "crs"
    return out


def _variable_encoding(var: xr.DataArray) -> dict[str, Any]:
    """zlib level 1 with shuffle, tile-sized chunks, NaN (floats) or the integer fill value."""
    return {
        "zlib": True,
        "complevel": 1,
        "shuffle": True,
        "chunksizes": (min(TILE, var.sizes["y"]), min(2 * TILE, var.sizes["x"])),
        "_FillValue": np.nan if var.dtype.kind == "f" else _integer_fill(var),
    }


def _cf_coords(crs: CRS, ys: np.ndarray, xs: np.ndarray) -> tuple[str, str, dict[str, Any]]:
    """Names of the y and x dimensions and their CF coordinate variables (CF-1.8 section 4)."""
    if crs.is_geographic:
        axes = (
            ("lat", ys, "latitude", "latitude", "degrees_north", "Y"),
            ("lon", xs, "longitude", "longitude", "degrees_east", "X"),
        )
    else:
        unit = _axis_unit(crs)
        axes = (
            ("y", ys, "projection_y_coordinate", "y coordinate of projection", unit, "Y"),
            ("x", xs, "projection_x_coordinate", "x coordinate of projection", unit, "X"),
        )
    coords = {
        dim: (dim, values, {"standard_name": std, "long_name": long, "units": u, "axis": axis})
        for dim, values, std, long, u, axis in axes
    }
    return axes[0][0], axes[1][0], coords


def _global_attrs(attrs: Mapping[str, Any] | None) -> dict[str, Any]:
    out: dict[str, Any] = {"Conventions": "CF-1.8", "source": f"lidmelt {__version__}"}
    out.update(_stringify_attrs(dict(attrs or {}), where="global attributes"))
    out["Conventions"] = "CF-1.8"
    return out


def _stringify_attrs(attrs: Mapping[str, Any], *, where: str) -> dict[str, Any]:
    """NetCDF-safe attributes: str, finite-or-not numbers and 1-D numeric arrays kept."""
    out: dict[str, Any] = {}
    for key, value in attrs.items():
        if isinstance(value, str):
            out[key] = value
        elif isinstance(value, bool | np.bool_) or value is None:
            out[key] = to_json(value if value is None else bool(value), key=key, where=where)
        elif isinstance(value, int | float | np.number):
            out[key] = value
        elif (
            isinstance(value, list | tuple | np.ndarray)
            and len(value)
            and all(
                isinstance(v, int | float | np.number) and not isinstance(v, bool) for v in value
            )
        ):
            out[key] = np.asarray(value)
        else:
            out[key] = to_json(value, key=key, where=where)
    return out


def _integer_fill(var: xr.DataArray) -> Any:
    if var.dtype.kind not in "iu":
        return None
    for candidate in (var.attrs.get("_FillValue"), var.encoding.get("_FillValue"), var.rio.nodata):
        if candidate is not None and not (isinstance(candidate, float) and math.isnan(candidate)):
            return var.dtype.type(candidate)
    return None


def _axis_unit(crs: CRS) -> str:
    unit = crs.axis_info[0].unit_name if crs.axis_info else "metre"
    return {
        "metre": "m",
        "meter": "m",
        "kilometre": "km",
        "US survey foot": "US_survey_foot",
        "foot": "ft",
    }.get(unit, unit)


def _crs_attrs(crs: CRS, transform: Any) -> dict[str, Any]:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # projections CF has no name for
        attrs: dict[str, Any] = dict(crs.to_cf())
    wkt = crs.to_wkt()
    attrs["crs_wkt"] = wkt
    attrs["spatial_ref"] = wkt
    attrs["GeoTransform"] = " ".join(
        repr(float(v))
        for v in (transform.c, transform.a, transform.b, transform.f, transform.d, transform.e)
    )
    return {k: v for k, v in attrs.items() if v is not None}
