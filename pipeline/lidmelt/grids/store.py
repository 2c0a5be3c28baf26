"""Write many GeoTIFFs from one dask computation.

The outputs of a run come from one kernel per chunk. Writing them one file at a time would
recompute the kernel once per file; :class:`GeoTiffSet` opens every destination (under a
temporary name), lets the caller run a single :func:`dask.compute` that stores every output and
evaluates any reductions (summary statistics) in the same pass, then sets the metadata, converts
to Cloud-Optimized layout and renames each file into place. On any error the temporary files are
removed, so no half-written output is ever left under its final name.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import rasterio
import rasterio.shutil
import xarray as xr
from rasterio.crs import CRS as RioCRS
from rasterio.windows import Window

from lidmelt.errors import InputError
from lidmelt.grids.write import (
    _COG_CACHE_MB,
    TILE,
    _check_dtype_nodata,
    _convert_block,
    _ensure_metadata,
    _has_cog_driver,
    _remove,
    _set_metadata,
    _stringify_tags,
    _temporary,
    _tile_aligned,
    _transform_of,
)


@dataclass
class GeoTiffItem:
    """One output: a (y, x) DataArray (dask-backed or not) and where and how to write it."""

    da: xr.DataArray
    path: Path
    description: str
    units: str
    tags: dict[str, Any] = field(default_factory=dict)
    dtype: str = "float32"
    nodata: float = np.nan


class _WindowTarget:
    def __init__(self, dst: Any, lock: threading.Lock) -> None:
        self.dst, self.lock = dst, lock

    def __setitem__(self, key: tuple[slice, slice], value: np.ndarray) -> None:
        ys, xs = key
        window = Window(xs.start, ys.start, xs.stop - xs.start, ys.stop - ys.start)
        with self.lock:
            self.dst.write(value, 1, window=window)


class GeoTiffSet:
    """Context manager that writes several tiled, ZSTD-compressed GeoTIFFs in one dask pass.

    Usage::

        with GeoTiffSet(items, cog=True) as out:
            stats = out.compute(extra=[...])   # stores every item and evaluates ``extra``
        # on leaving the block without error every file is in place

    Creation options are those of :func:`lidmelt.grids.write.write_geotiff` (512 x 512 tiles,
    ZSTD level 1, predictor 3 for floats and 2 for integers, BIGTIFF=IF_SAFER); each file has its
    own lock, so chunks of different outputs are written concurrently.
    """

    def __init__(self, items: list[GeoTiffItem], *, cog: bool = True) -> None:
        self.items = items
        self.cog = cog
        self._handles: list[Any] = []
        self._tmps: list[Path] = []
        self._done = False

    def __enter__(self) -> GeoTiffSet:
        try:
            for item in self.items:
                da = item.da.transpose("y", "x")
                np_dtype = _check_dtype_nodata(item.dtype, item.nodata)
                item.path.parent.mkdir(parents=True, exist_ok=True)
                tmp = _temporary(item.path)
                self._tmps.append(tmp)
                profile = {
                    "driver": "GTiff",
                    "height": da.sizes["y"],
                    "width": da.sizes["x"],
                    "count": 1,
                    "dtype": np_dtype.name,
                    "crs": RioCRS.from_wkt(da.rio.crs.to_wkt()),
                    "transform": _transform_of(da),
                    "nodata": item.nodata,
                    "tiled": True,
                    "blockxsize": TILE,
                    "blockysize": TILE,
                    "compress": "ZSTD",
                    "zstd_level": 1,
                    "predictor": 2 if np_dtype.kind in "iu" else 3,
                    "BIGTIFF": "IF_SAFER",
                }
                self._handles.append(rasterio.open(tmp, "w", **profile))
        except BaseException:
            self._abort()
            raise
        return self

    def compute(
        self, *, extra: list[Any] = (), num_workers: int | None = None, callbacks: list[Any] = ()
    ) -> list[Any]:
        """Store every item and compute ``extra`` (dask objects) in one pass; return ``extra``."""
        import dask
        import dask.array as dsa

        sources, targets = [], []
        for item, dst in zip(self.items, self._handles, strict=True):
            np_dtype = _check_dtype_nodata(item.dtype, item.nodata)
            data = item.da.transpose("y", "x").data
            if not isinstance(data, dsa.Array):
                dst.write(_convert_block(np.asarray(data), np_dtype, item.nodata), 1)
                continue
            data = _tile_aligned(data).map_blocks(
                _convert_block, np_dtype, item.nodata, dtype=np_dtype
            )
            sources.append(data)
            targets.append(_WindowTarget(dst, threading.Lock()))
        delayed = dsa.store(sources, targets, lock=False, compute=False) if sources else None
        with dask.config.set(scheduler="threads", num_workers=num_workers):
            if callbacks:
                with _nested(callbacks):
                    results = dask.compute(delayed, *extra)
            else:
                results = dask.compute(delayed, *extra)
        return list(results[1:])

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is not None:
            self._abort()
            return
        try:
            for item, dst in zip(self.items, self._handles, strict=True):
                _set_metadata(dst, item.description, item.units, _stringify_tags(item.tags))
                dst.close()
            for item, tmp in zip(self.items, list(self._tmps), strict=True):
                final = tmp
                if self.cog and _has_cog_driver():
                    integer = np.dtype(item.dtype).kind in "iu"
                    tmp_cog = _temporary(item.path)
                    self._tmps.append(tmp_cog)
                    with rasterio.Env(GDAL_CACHEMAX=_COG_CACHE_MB):
                        rasterio.shutil.copy(
                            tmp,
                            tmp_cog,
                            driver="COG",
                            COMPRESS="ZSTD",
                            LEVEL=1,
                            PREDICTOR="STANDARD" if integer else "FLOATING_POINT",
                            BLOCKSIZE=TILE,
                            BIGTIFF="IF_SAFER",
                            NUM_THREADS="ALL_CPUS",
                            RESAMPLING="NEAREST" if integer else "AVERAGE",
                        )
                    _ensure_metadata(
                        tmp_cog, item.description, item.units, _stringify_tags(item.tags)
                    )
                    tmp.unlink()
                    final = tmp_cog
                final.replace(item.path)
            self._done = True
        except (rasterio.errors.RasterioError, OSError) as err:
            self._abort()
            msg = (
                f"cannot write the run's GeoTIFFs in {str(self.items[0].path.parent)!r} "
                f"({err}). Check that the folder is writable and the disk has space."
            )
            raise InputError(msg) from err
        except BaseException:
            self._abort()
            raise

    def _abort(self) -> None:
        for dst in self._handles:
            if not dst.closed:
                dst.close()
        _remove(*self._tmps)


class _nested:
    """Enter several dask callbacks as one context."""

    def __init__(self, callbacks: list[Any]) -> None:
        self.callbacks = callbacks

    def __enter__(self) -> None:
        for cb in self.callbacks:
            cb.__enter__()

    def __exit__(self, *exc: Any) -> None:
        for cb in reversed(self.callbacks):
            cb.__exit__(*exc)
