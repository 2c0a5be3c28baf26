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
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import rasterio
import xarray as xr
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
    copy_to_cog,
    gtiff_profile,
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


class _RowOffset:
    """A store target that writes a band's blocks at their rows in the whole grid."""

    def __init__(self, target: _WindowTarget, row0: int) -> None:
        self.target, self.row0 = target, row0

    def __setitem__(self, key: tuple[slice, slice], value: np.ndarray) -> None:
        ys, xs = key
        self.target[slice(ys.start + self.row0, ys.stop + self.row0), xs] = value


class GeoTiffSet:
    """Context manager that writes several tiled, ZSTD-compressed GeoTIFFs in one dask pass.

    Usage::

        with GeoTiffSet(items, cog=True) as out:
            stats = out.compute(extra=lambda rows: [...], band_rows=1024)
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
        # GDAL's block cache defaults to 5 % of RAM and fills with written tiles of every open
        # file; a fixed cap keeps peak memory independent of the grid size
        self._env = rasterio.Env(GDAL_CACHEMAX=_COG_CACHE_MB)
        self._env.__enter__()
        try:
            for item in self.items:
                da = item.da.transpose("y", "x")
                np_dtype = _check_dtype_nodata(item.dtype, item.nodata)
                item.path.parent.mkdir(parents=True, exist_ok=True)
                tmp = _temporary(item.path)
                self._tmps.append(tmp)
                # one file per output is written at once: threads come from dask, not GDAL
                profile = gtiff_profile(da, np_dtype, item.nodata, threads=False)
                self._handles.append(rasterio.open(tmp, "w", **profile))
        except BaseException:
            self._abort()
            raise
        return self

    def compute(
        self,
        *,
        extra: Callable[[slice], list[Any]] | None = None,
        band_rows: int | None = None,
        num_workers: int | None = None,
        report: Callable[[int, int], None] | None = None,
    ) -> list[list[Any]]:
        """Store every item band by band, computing ``extra(rows)`` with each band.

        Each band of ``band_rows`` rows (default: everything at once) is one :func:`dask.compute`
        that stores the band of every item and evaluates the dask objects ``extra(rows)``
        returns, so shared inputs are computed once and at most one band of chunks is held in
        memory, whatever the grid size. Returns the computed ``extra`` of every band;
        ``report(done, total)`` is called after each band.
        """
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
        height = self.items[0].da.sizes["y"]
        step = height if not band_rows else max(TILE, band_rows // TILE * TILE)
        bands = [slice(r, min(r + step, height)) for r in range(0, height, step)]
        results = []
        with dask.config.set(scheduler="threads", num_workers=num_workers):
            for k, rows in enumerate(bands):
                parts = [src[rows] for src in sources]
                shifted = [_RowOffset(t, rows.start) for t in targets]
                delayed = dsa.store(parts, shifted, lock=False, compute=False) if parts else None
                with warnings.catch_warnings():  # all-NaN bands (land) have NaN min/max
                    warnings.simplefilter("ignore", RuntimeWarning)
                    done = dask.compute(delayed, *(extra(rows) if extra else []))
                results.append(list(done[1:]))
                if report:
                    report(k + 1, len(bands))
        return results

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
                    copy_to_cog(tmp, tmp_cog, integer=integer)
                    _ensure_metadata(
                        tmp_cog, item.description, item.units, _stringify_tags(item.tags)
                    )
                    tmp.unlink()
                    final = tmp_cog
                final.replace(item.path)
            self._done = True
            self._close_env()
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
        self._close_env()

    def _close_env(self) -> None:
        if getattr(self, "_env", None) is not None:
            self._env.__exit__(None, None, None)
            self._env = None
