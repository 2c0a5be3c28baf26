"""Write grids: tiled, compressed GeoTIFF (optionally COG) and CF NetCDF, atomically.

Both writers put the file under a temporary name in the destination folder and rename it when
it is complete, so a reader never sees a half-written file and a failed write leaves nothing
behind. Dask-backed grids are written chunk by chunk through one open file handle, so memory
stays flat however large the grid (see ``benchmarks/bench_write.py``).
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import threading
import uuid
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import rasterio
import rasterio.errors
import rasterio.shutil
import xarray as xr
from pyproj import CRS
from rasterio.crs import CRS as RioCRS
from rasterio.windows import Window

from lidmelt import __version__
from lidmelt.errors import GridError, InputError
from lidmelt.grids.align import _check_dataarray, _transform_of

__all__ = ["TILE", "write_geotiff", "write_netcdf"]

#: GeoTIFF tile size (cells); dask chunks are rechunked to multiples of it before writing.
TILE = 512

# GDAL block cache while converting to COG, MB: the default (5 % of RAM) lets the copy hold up
# to that much; 256 MB keeps memory flat (measured in benchmarks/bench_write.py).
_COG_CACHE_MB = 256

_DTYPES = ("float32", "float64", "uint8", "uint16", "int16", "int32")


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
    Creation options: 512 x 512 tiles, ZSTD level 1 with predictor 3 (floating point) or 2
    (integers), ``NUM_THREADS=ALL_CPUS``, ``BIGTIFF=IF_SAFER``. A dask-backed grid is rechunked
    to multiples of the tile and stored with :func:`dask.array.store` into one open rasterio
    handle (writes serialised by a lock, chunks computed by the threaded scheduler); with a
    dask.distributed client active the chunks are computed on the cluster a few at a time and
    written locally. The COG is made by copying the finished GTiff
    (:func:`rasterio.shutil.copy`, ``driver="COG"``, overviews resampled by average, or
    nearest for integers), which is faster and leaner than writing COG directly; the copy runs
    with ``GDAL_CACHEMAX`` = 256 MB, since GDAL's default cache (5 % of RAM) let it grow to
    that size. On the 5400 x 10800 benchmark grid: GTiff 1.7-2.4 s and COG 5-9 s, peak RSS
    about 100 MB above the baseline for both (``benchmarks/bench_write.py``).
    """
    _check_dataarray(da, what=f"grid {da.name!r}" if isinstance(da, xr.DataArray) else "grid")
    if "band" in da.dims:
        da = da.squeeze("band", drop=True)
    da = da.transpose("y", "x")
    np_dtype = _check_dtype_nodata(dtype, nodata)
    text_tags = _stringify_tags(tags or {})
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    integer = np_dtype.kind in "iu"
    profile = gtiff_profile(da, np_dtype, nodata)
    tmp = _temporary(path)
    tmp_cog = _temporary(path)
    try:
        with rasterio.open(tmp, "w", **profile) as dst:
            _write_band(dst, da, np_dtype, nodata)
            _set_metadata(dst, description, units, text_tags)
        final = tmp
        if cog and _has_cog_driver():
            copy_to_cog(tmp, tmp_cog, integer=integer)
            _ensure_metadata(tmp_cog, description, units, text_tags)
            tmp.unlink()
            final = tmp_cog
        final.replace(path)
    except (rasterio.errors.RasterioError, OSError) as exc:
        _remove(tmp, tmp_cog)
        msg = (
            f"cannot write GeoTIFF {str(path)!r} ({exc}). Check that the folder is writable "
            "and the disk has space."
        )
        raise InputError(msg) from exc
    except BaseException:
        _remove(tmp, tmp_cog)
        raise
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
        ``path``.

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
    if isinstance(ds, xr.DataArray):
        ds = ds.to_dataset(name=ds.name or "data")
    if not isinstance(ds, xr.Dataset) or not ds.data_vars:
        msg = f"write_netcdf needs a Dataset with data variables, got {type(ds).__name__}."
        raise GridError(msg)
    first_name = next(iter(ds.data_vars))
    first = ds[first_name]
    _check_dataarray(first, what=f"variable {first_name!r}")
    crs = CRS.from_wkt(first.rio.crs.to_wkt())
    transform = _transform_of(first)
    ys, xs = first["y"].values, first["x"].values

    variables = {}
    encoding = {}
    for var_name, var in ds.data_vars.items():
        if set(var.dims) != {"y", "x"}:
            msg = (
                f"variable {var_name!r} has dims {tuple(var.dims)}; expected ('y', 'x') like "
                f"{first_name!r}. Write other variables to their own file."
            )
            raise GridError(msg)
        var = var.transpose("y", "x")
        if var.shape != first.shape or not (
            np.array_equal(var["y"].values, ys) and np.array_equal(var["x"].values, xs)
        ):
            msg = (
                f"variable {var_name!r} is not on the grid of {first_name!r} (shapes "
                f"{var.shape} and {first.shape}). Align them first with "
                "lidmelt.grids.align.align."
            )
            raise GridError(msg)
        units = var.attrs.get("units")
        if units is None or str(units).strip() == "":
            msg = (
                f"variable {var_name!r} has no 'units' attribute; CF needs one. Set it, e.g. "
                f"ds[{var_name!r}].attrs['units'] = 'km' ('1' for dimensionless)."
            )
            raise InputError(msg)
        fill = _integer_fill(var)
        var_attrs = _stringify_attrs(
            {
                k: v
                for k, v in var.attrs.items()
                if k not in ("_FillValue", "missing_value", "grid_mapping", "coordinates")
            },
            where=f"variable {var_name!r}",
        )
        var_attrs.setdefault("long_name", str(var_name))
        var_attrs["units"] = str(units)
        var_attrs["grid_mapping"] = "crs"
        data = var.data
        variables[var_name] = (("y", "x"), data, var_attrs)
        enc: dict[str, Any] = {
            "zlib": True,
            "complevel": 1,
            "shuffle": True,
            "chunksizes": (min(TILE, var.sizes["y"]), min(2 * TILE, var.sizes["x"])),
        }
        if var.dtype.kind == "f":
            enc["_FillValue"] = np.nan
        elif fill is not None:
            enc["_FillValue"] = fill
        else:
            enc["_FillValue"] = None
        encoding[var_name] = enc

    if crs.is_geographic:
        ydim, xdim = "lat", "lon"
        coords = {
            "lat": (
                "lat",
                ys,
                {
                    "standard_name": "latitude",
                    "long_name": "latitude",
                    "units": "degrees_north",
                    "axis": "Y",
                },
            ),
            "lon": (
                "lon",
                xs,
                {
                    "standard_name": "longitude",
                    "long_name": "longitude",
                    "units": "degrees_east",
                    "axis": "X",
                },
            ),
        }
    else:
        ydim, xdim = "y", "x"
        unit = _axis_unit(crs)
        coords = {
            "y": (
                "y",
                ys,
                {
                    "standard_name": "projection_y_coordinate",
                    "long_name": "y coordinate of projection",
                    "units": unit,
                    "axis": "Y",
                },
            ),
            "x": (
                "x",
                xs,
                {
                    "standard_name": "projection_x_coordinate",
                    "long_name": "x coordinate of projection",
                    "units": unit,
                    "axis": "X",
                },
            ),
        }
    for coord in (ydim, xdim):
        encoding[coord] = {"_FillValue": None}
    crs_attrs = _crs_attrs(crs, transform)
    out = xr.Dataset(
        {name: ((ydim, xdim), data, a) for name, (_, data, a) in variables.items()},
        coords=coords,
    )
    out["crs"] = xr.DataArray(np.int32(0), attrs=crs_attrs)
    encoding["crs"] = {"dtype": "int32"}
    global_attrs: dict[str, Any] = {"Conventions": "CF-1.8", "source": f"lidmelt {__version__}"}
    global_attrs.update(_stringify_attrs(dict(attrs or {}), where="global attributes"))
    global_attrs["Conventions"] = "CF-1.8"
    out.attrs = global_attrs

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = _temporary(path, suffix=".nc")
    try:
        out.to_netcdf(tmp, engine="netcdf4", format="NETCDF4", encoding=encoding)
        tmp.replace(path)
    except (OSError, RuntimeError) as exc:
        _remove(tmp)
        msg = (
            f"cannot write NetCDF {str(path)!r} ({exc}). Check that the folder is writable "
            "and the disk has space."
        )
        raise InputError(msg) from exc
    except BaseException:
        _remove(tmp)
        raise
    return path


# --------------------------------------------------------------------------------------------
# GeoTIFF helpers
# --------------------------------------------------------------------------------------------


def _check_dtype_nodata(dtype: str, nodata: float) -> np.dtype:
    if str(dtype) not in _DTYPES:
        msg = f"dtype={dtype!r} is not supported for GeoTIFF output; expected one of {_DTYPES}."
        raise GridError(msg)
    np_dtype = np.dtype(dtype)
    if np_dtype.kind == "f":
        if not (
            isinstance(nodata, int | float | np.number)
            and not isinstance(nodata, bool)
            and (math.isnan(nodata) or math.isfinite(nodata))
        ):
            msg = f"nodata={nodata!r} must be NaN or a finite number for dtype {dtype!r}."
            raise GridError(msg)
        return np_dtype
    info = np.iinfo(np_dtype)
    if (
        isinstance(nodata, bool)
        or not isinstance(nodata, int | float | np.number)
        or not math.isfinite(nodata)
        or nodata != int(nodata)
        or not info.min <= nodata <= info.max
    ):
        msg = (
            f"nodata={nodata!r} does not fit dtype {dtype!r}; integer grids need a whole "
            f"number in {info.min}..{info.max} (e.g. 255 for a uint8 flag grid)."
        )
        raise GridError(msg)
    return np_dtype


def _convert_block(block: np.ndarray, np_dtype: np.dtype, nodata: float) -> np.ndarray:
    """One block in the output dtype, NaN replaced by nodata; GridError if values do not fit."""
    block = np.asarray(block)
    if np_dtype.kind == "f":
        out = block.astype(np_dtype, copy=False)
        if not math.isnan(nodata):
            out = np.where(np.isnan(out), np_dtype.type(nodata), out)
        return out
    if block.dtype.kind == "f":
        missing = np.isnan(block)
        values = block[~missing]
    else:
        missing = None
        values = block.ravel()
    if values.size:
        info = np.iinfo(np_dtype)
        if (
            values.min() < info.min
            or values.max() > info.max
            or (block.dtype.kind == "f" and np.any(values != np.round(values)))
        ):
            msg = (
                f"grid values from {values.min()!r} to {values.max()!r} (or non-integer "
                f"values) do not fit {np_dtype.name}; convert the grid or choose another "
                "dtype (float32 keeps fractions)."
            )
            raise GridError(msg)
    out = np.where(missing, nodata, block) if missing is not None else block
    return out.astype(np_dtype)


def _write_band(dst: Any, da: xr.DataArray, np_dtype: np.dtype, nodata: float) -> None:
    data = da.data
    if not _is_dask(data):
        dst.write(_convert_block(np.asarray(data), np_dtype, nodata), 1)
        return
    data = _tile_aligned(data).map_blocks(_convert_block, np_dtype, nodata, dtype=np_dtype)

    class _Target:
        def __setitem__(self, key: tuple[slice, slice], value: np.ndarray) -> None:
            ys, xs = key
            window = Window(xs.start, ys.start, xs.stop - xs.start, ys.stop - ys.start)
            dst.write(value, 1, window=window)

    if _distributed_client() is not None:
        _store_in_batches(data, _Target())
    else:
        import dask.array as dsa

        dsa.store(data, _Target(), lock=threading.Lock(), scheduler="threads")


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


def _tile_aligned(data: Any) -> Any:
    """Rechunk so that every chunk boundary falls on a tile boundary (multiples of TILE)."""
    chunks = []
    aligned = True
    for sizes in data.chunks:
        if any(size % TILE for size in sizes[:-1]):
            aligned = False
        chunks.append(max(TILE, round(sizes[0] / TILE) * TILE))
    return data if aligned else data.rechunk(tuple(chunks))


def _is_dask(data: Any) -> bool:
    return type(data).__module__.startswith("dask")


def _set_metadata(dst: Any, description: str, units: str, tags: dict[str, str]) -> None:
    dst.set_band_description(1, str(description))
    dst.units = (str(units),)
    if tags:
        dst.update_tags(**tags)


def gtiff_profile(
    da: xr.DataArray, np_dtype: np.dtype, nodata: float, *, threads: bool = True
) -> dict[str, Any]:
    """Creation options of every lidmelt GeoTIFF: 512 x 512 tiles, ZSTD level 1, predictor 3
    for floats and 2 for integers, BIGTIFF=IF_SAFER (GEOSTACK notes: fastest at this size)."""
    profile = {
        "driver": "GTiff",
        "height": da.sizes["y"],
        "width": da.sizes["x"],
        "count": 1,
        "dtype": np_dtype.name,
        "crs": RioCRS.from_wkt(da.rio.crs.to_wkt()),
        "transform": _transform_of(da),
        "nodata": nodata,
        "tiled": True,
        "blockxsize": TILE,
        "blockysize": TILE,
        "compress": "ZSTD",
        "zstd_level": 1,
        "predictor": 2 if np_dtype.kind in "iu" else 3,
        "BIGTIFF": "IF_SAFER",
    }
    if threads:
        profile["NUM_THREADS"] = "ALL_CPUS"
    return profile


def copy_to_cog(src: Path, dst: Path, *, integer: bool) -> None:
    """Copy a finished tiled GTiff to Cloud-Optimized layout (ZSTD, 512 blocks, overviews)."""
    with rasterio.Env(GDAL_CACHEMAX=_COG_CACHE_MB):
        rasterio.shutil.copy(
            src,
            dst,
            driver="COG",
            COMPRESS="ZSTD",
            LEVEL=1,
            PREDICTOR="STANDARD" if integer else "FLOATING_POINT",
            BLOCKSIZE=TILE,
            BIGTIFF="IF_SAFER",
            NUM_THREADS="ALL_CPUS",
            RESAMPLING="NEAREST" if integer else "AVERAGE",
        )


def _ensure_metadata(path: Path, description: str, units: str, tags: dict[str, str]) -> None:
    """Check the COG kept description, unit and tags; re-set the ones that were lost."""
    with rasterio.open(path) as src:
        kept = (
            src.descriptions[0] == str(description)
            and src.units[0] == str(units)
            and all((src.tags().get(k) or "").strip() == v.strip() for k, v in tags.items())
        )
    if not kept:  # GDAL 3.10 keeps them (tested); this only guards other GDAL versions
        with rasterio.open(path, "r+", IGNORE_COG_LAYOUT_BREAK="YES") as dst:
            _set_metadata(dst, description, units, tags)


def _has_cog_driver() -> bool:
    with rasterio.Env() as env:
        return "COG" in env.drivers()


def _json_default(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, Path):
        return str(value)
    msg = f"{type(value).__name__} is not JSON serialisable"
    raise TypeError(msg)


def _to_json(value: Any, *, key: str, where: str) -> str:
    try:
        return json.dumps(value, default=_json_default, allow_nan=True)
    except (TypeError, ValueError) as exc:
        msg = (
            f"{where}: value of {key!r} ({type(value).__name__}) cannot be written as JSON "
            f"({exc}). Give str, numbers, lists or dicts of them."
        )
        raise InputError(msg) from exc


def _stringify_tags(tags: Mapping[str, Any]) -> dict[str, str]:
    out = {}
    for key, value in tags.items():
        if not isinstance(key, str) or not key or "=" in key or key != key.strip():
            msg = (
                f"tag name {key!r} is not valid; expected a non-empty string without '=' or "
                "surrounding spaces."
            )
            raise InputError(msg)
        out[key] = value if isinstance(value, str) else _to_json(value, key=key, where="tags")
    return out


def _temporary(path: Path, suffix: str | None = None) -> Path:
    suffix = suffix if suffix is not None else path.suffix or ".tif"
    return path.with_name(f".{path.name}.{uuid.uuid4().hex[:8]}.tmp{suffix}")


def _remove(*paths: Path) -> None:
    for p in paths:
        with contextlib.suppress(FileNotFoundError):
            p.unlink()


# --------------------------------------------------------------------------------------------
# NetCDF helpers
# --------------------------------------------------------------------------------------------


def _stringify_attrs(attrs: Mapping[str, Any], *, where: str) -> dict[str, Any]:
    """NetCDF-safe attributes: str, finite-or-not numbers and 1-D numeric arrays kept."""
    out: dict[str, Any] = {}
    for key, value in attrs.items():
        if isinstance(value, str):
            out[key] = value
        elif isinstance(value, bool | np.bool_) or value is None:
            out[key] = _to_json(value if value is None else bool(value), key=key, where=where)
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
            out[key] = _to_json(value, key=key, where=where)
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
    import warnings

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
