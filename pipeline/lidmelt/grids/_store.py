"""Write many GeoTIFFs from one dask computation.

The outputs of a run come from one kernel per chunk. Writing them one file at a time would
recompute the kernel once per file; :class:`GeoTiffSet` opens every destination (at temporary
paths from :func:`lidmelt._files.atomic_paths`), lets the caller run a single :func:`dask.compute`
that stores every output and evaluates any reductions (summary statistics) in the same pass, then
sets the metadata, converts to Cloud-Optimized layout (when asked: a second full pass over every
file) and only then renames the files into place. On any error every temporary file is removed
and no file is written under its final name.
"""

from __future__ import annotations

import contextlib
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import rasterio
import rasterio.errors
import xarray as xr

from lidmelt._files import atomic_paths
from lidmelt.grids._geotiff import (
    COG_CACHE_MB,
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
    write_failed,
)
from lidmelt.grids._remote import compute_on_client, store_on_client


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


class GeoTiffSet:
    """Context manager that writes several tiled, ZSTD-compressed GeoTIFFs in one dask pass.

    Usage::

        with GeoTiffSet(items, cog=True) as out:
            stats = out.compute(extra=lambda rows: [...], band_rows=1024)
        # on leaving the block without error every file is in place

    Creation options are :func:`lidmelt.grids._geotiff.gtiff_profile`'s (512 x 512 tiles,
    ZSTD level 1, predictor 3 for floats and 2 for integers, BIGTIFF=IF_SAFER); each file has its
    own lock, so chunks of different outputs are written concurrently. ``cog`` copies each
    finished file to Cloud-Optimized layout (overviews; a second full pass over the file).
    ``verify`` reads every finished file back before it is renamed into place; a caller that
    reads them back later anyway (a run: :func:`lidmelt.grids._rundir.seal_run`, before the run
    is swapped into place) passes False and spares a full pass.
    """

    def __init__(self, items: list[GeoTiffItem], *, cog: bool = True, verify: bool = True) -> None:
        self.items = items
        self.cog = cog
        self.verify = verify
        self._windows: list[BandWindows] = []  # each open file, with its lock
        self._finals: list[Path] = []  # temporary paths renamed onto the items' paths
        self._staged: list[Path] = []  # where each tiled GTiff is written
        self._stack = contextlib.ExitStack()

    def __enter__(self) -> GeoTiffSet:
        stack = self._stack
        try:
            # GDAL's block cache defaults to 5 % of RAM and fills with written tiles of every
            # open file; a fixed cap keeps peak memory independent of the grid size
            stack.enter_context(rasterio.Env(GDAL_CACHEMAX=COG_CACHE_MB))
            cog = self.cog and has_cog_driver()
            self._finals = stack.enter_context(atomic_paths(*(i.path for i in self.items)))
            for item, tmp in zip(self.items, self._finals, strict=True):
                da = item.da.transpose("y", "x")
                np_dtype = check_dtype_nodata(item.dtype, item.nodata)
                self._staged.append(stack.enter_context(staging_path(tmp, cog=cog)))
                # one file per output is written at once: threads come from dask, not GDAL
                profile = gtiff_profile(da, np_dtype, item.nodata, threads=False)
                self._windows.append(BandWindows(rasterio.open(self._staged[-1], "w", **profile)))
        except BaseException as exc:
            self._abort(type(exc), exc, exc.__traceback__)
            raise
        return self

    def compute(
        self,
        *,
        extra: Callable[[slice], list[Any]] | None = None,
        band_rows: int | None = None,
        num_workers: int | None = None,
        report: Callable[[int, int], None] | None = None,
        scheduler: Any = None,
        height: int | None = None,
    ) -> list[list[Any]]:
        """Store every item band by band, computing ``extra(rows)`` with each band.

        Each band of ``band_rows`` rows (default: everything at once) is one :func:`dask.compute`
        that stores the band of every item and evaluates the dask objects ``extra(rows)``
        returns, so shared inputs are computed once and at most one band of chunks is held in
        memory, whatever the grid size. Returns the computed ``extra`` of every band;
        ``report(done, total)`` is called after each band. With ``scheduler``, a
        dask.distributed client, its workers compute and this process writes each block as it
        arrives (:func:`lidmelt.grids._remote.store_on_client`). ``height``: the rows of the
        grid (default: the first item's; needed without items, when only ``extra`` is computed).
        """
        import dask
        import dask.array as dsa

        sources, targets = [], []
        for item, windows in zip(self.items, self._windows, strict=True):
            dst = windows.dst
            np_dtype = check_dtype_nodata(item.dtype, item.nodata)
            data = item.da.transpose("y", "x").data
            if not isinstance(data, dsa.Array):
                dst.write(convert_block(np.asarray(data), np_dtype, item.nodata), 1)
                continue
            data = tile_aligned(data).map_blocks(
                convert_block, np_dtype, item.nodata, dtype=np_dtype
            )
            sources.append(data)
            targets.append(windows)
        height = height or self.items[0].da.sizes["y"]
        step = height if not band_rows else max(TILE, band_rows // TILE * TILE)
        bands = [slice(r, min(r + step, height)) for r in range(0, height, step)]
        if scheduler is not None and not sources:  # nothing written here: no band waits
            return compute_on_client(scheduler, [extra(rows) for rows in bands], report)
        results = []
        with dask.config.set(scheduler="threads", num_workers=num_workers):
            for k, rows in enumerate(bands):
                parts = [src[rows] for src in sources]
                shifted = [t.shifted(rows.start) for t in targets]
                extras = extra(rows) if extra else []
                with warnings.catch_warnings():  # all-NaN bands (land) have NaN min/max
                    warnings.simplefilter("ignore", RuntimeWarning)
                    if scheduler is not None:  # its workers compute, this process writes
                        done = [None, *store_on_client(scheduler, parts, shifted, extras)]
                    else:
                        stored = dsa.store(parts, shifted, lock=False, compute=False)
                        done = dask.compute(stored if parts else None, *extras)
                results.append(list(done[1:]))
                if report:
                    report(k + 1, len(bands))
        return results

    def write_rows(self, row0: int, blocks: list[np.ndarray]) -> None:
        """Write computed (rows, width) blocks, one per item in order, from row ``row0``.

        For results computed elsewhere (e.g. on a dask.distributed cluster) instead of by
        :meth:`compute`.
        """
        for item, windows, block in zip(self.items, self._windows, blocks, strict=True):
            np_dtype = check_dtype_nodata(item.dtype, item.nodata)
            rows, width = block.shape
            target = windows.shifted(row0)
            target[slice(0, rows), slice(0, width)] = convert_block(block, np_dtype, item.nodata)

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is not None:
            self._abort(exc_type, exc, tb)
            return
        try:
            self._finish()
            self._stack.close()  # renames every file into place
        except (rasterio.errors.RasterioError, OSError) as err:
            self._abort(type(err), err, err.__traceback__)
            where = self.items[0].path.parent
            raise write_failed(err, what="the run's GeoTIFFs in", where=where) from err
        except BaseException as err:
            self._abort(type(err), err, err.__traceback__)
            raise

    def _finish(self) -> None:
        """Set each file's metadata, close it and, for COG, copy it to its temporary path."""
        metas = [
            {"description": i.description, "units": i.units, "tags": stringify_tags(i.tags)}
            for i in self.items
        ]
        for windows, meta in zip(self._windows, metas, strict=True):
            set_metadata(windows.dst, **meta)
            windows.close()
        for item, staged, tmp, meta in zip(
            self.items, self._staged, self._finals, metas, strict=True
        ):
            integer = np.dtype(item.dtype).kind in "iu"
            publish(staged, tmp, integer=integer, verify=self.verify, **meta)

    def _abort(self, exc_type: Any, exc: BaseException | None, tb: Any) -> None:
        """Close the files and remove every temporary file (no final file is written)."""
        for windows in self._windows:
            windows.close()  # waits for a block being written by a dask thread
        self._stack.__exit__(exc_type, exc, tb)
