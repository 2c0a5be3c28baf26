"""The GeoTIFF layout every lidmelt raster shares: creation profile, band encoding, COG copy, tags.

:func:`~lidmelt.grids._write.write_geotiff` (one file) and :class:`~lidmelt.grids._store.GeoTiffSet`
(many files from one dask pass) both write a tiled GTiff with :func:`gtiff_profile`, encode each
block with :func:`convert_block`, set the band metadata with :func:`set_metadata` and, for a Cloud
Optimized GeoTIFF, stage the GTiff with :func:`staging_path` and copy it with :func:`publish`.
"""

from __future__ import annotations

import contextlib
import json
import logging
import math
import os
import tempfile
import threading
from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

import numpy as np
import rasterio
import rasterio.shutil
import xarray as xr
from rasterio.crs import CRS as RioCRS
from rasterio.windows import Window

from lidmelt._errors import GridError, InputError
from lidmelt.grids._grid import transform_of

#: GeoTIFF tile size (cells); dask chunks are rechunked to multiples of it before writing.
TILE = 512

#: GDAL block cache while writing several files or converting to COG, MB: the default (5 % of
#: RAM) lets GDAL hold up to that much; 256 MB keeps memory flat (benchmarks/bench_write.py).
COG_CACHE_MB = 256
# GDAL sizes its block cache (default 5 % of RAM, 1.2 GB here) once, when a thread first reads
# or writes, so per-call settings come too late: capping it when lidmelt's grids are imported
# keeps a run's peak memory flat (a global 1' run: 1290 -> 624 MB, benchmarks/bench_basin.py).
# A value the user set in the environment wins.
os.environ.setdefault("GDAL_CACHEMAX", str(COG_CACHE_MB))

#: Data types lidmelt writes to GeoTIFF.
DTYPES = ("float32", "float64", "uint8", "uint16", "int16", "int32")


# --------------------------------------------------------------------------------------------
# Profile and band encoding
# --------------------------------------------------------------------------------------------


def gtiff_profile(
    da: xr.DataArray, np_dtype: np.dtype, nodata: float, *, threads: bool = True
) -> dict[str, Any]:
    """Creation options of every lidmelt GeoTIFF.

    512 x 512 tiles, ZSTD level 1, predictor 3 for floats and 2 for integers,
    ``BIGTIFF=IF_SAFER`` (GDAL GTiff driver options, https://gdal.org/drivers/raster/gtiff.html;
    the fastest of the settings measured in ``benchmarks/bench_write.py``). ``threads`` adds
    ``NUM_THREADS=ALL_CPUS`` (compression threads inside GDAL).
    """
    profile = {
        "driver": "GTiff",
        "height": da.sizes["y"],
        "width": da.sizes["x"],
        "count": 1,
        "dtype": np_dtype.name,
        "crs": RioCRS.from_wkt(da.rio.crs.to_wkt()),
        "transform": transform_of(da),
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


def check_dtype_nodata(dtype: str, nodata: float) -> np.dtype:
    """The numpy dtype of ``dtype``; GridError unless it is in DTYPES and holds ``nodata``."""
    if str(dtype) not in DTYPES:
        msg = f"dtype={dtype!r} is not supported for GeoTIFF output; expected one of {DTYPES}."
        raise GridError(msg)
    np_dtype = np.dtype(dtype)
    number = isinstance(nodata, int | float | np.number) and not isinstance(nodata, bool)
    if np_dtype.kind == "f":
        if not (number and (math.isnan(nodata) or math.isfinite(nodata))):
            msg = f"nodata={nodata!r} must be NaN or a finite number for dtype {dtype!r}."
            raise GridError(msg)
        return np_dtype
    info = np.iinfo(np_dtype)
    if (
        not number
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


def convert_block(block: np.ndarray, np_dtype: np.dtype, nodata: float) -> np.ndarray:
    """One block in the output dtype, NaN replaced by nodata; GridError if values do not fit."""
    block = np.asarray(block)
    if np_dtype.kind == "f":
        out = block.astype(np_dtype, copy=False)
        if not math.isnan(nodata):
            out = np.where(np.isnan(out), np_dtype.type(nodata), out)
        return out
    missing = np.isnan(block) if block.dtype.kind == "f" else None
    values = block[~missing] if missing is not None else block.ravel()
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


def tile_aligned(data: Any) -> Any:
    """Rechunk a dask array so every chunk boundary falls on a tile boundary (multiples of TILE)."""
    chunks = []
    aligned = True
    for sizes in data.chunks:
        if any(size % TILE for size in sizes[:-1]):
            aligned = False
        chunks.append(max(TILE, round(sizes[0] / TILE) * TILE))
    return data if aligned else data.rechunk(tuple(chunks))


class BandWindows:
    """A :func:`dask.array.store` target that writes ``(y, x)`` blocks into band 1 of ``dst``.

    Writes to one file are serialised by its lock (``lock``, or a new one). ``row0`` shifts the
    rows (a band of rows stored on its own). When a store fails, dask returns the error while
    other threads may still be writing blocks: :meth:`close` waits for the write in progress,
    and blocks that arrive after it are dropped (the file is being discarded).
    """

    def __init__(self, dst: Any, *, row0: int = 0, lock: threading.Lock | None = None) -> None:
        self.dst, self.row0 = dst, row0
        self.lock = lock if lock is not None else threading.Lock()

    def shifted(self, row0: int) -> BandWindows:
        """The same file and lock with rows shifted by ``row0``."""
        return BandWindows(self.dst, row0=row0, lock=self.lock)

    def __setitem__(self, key: tuple[slice, slice], value: np.ndarray) -> None:
        ys, xs = key
        window = Window(xs.start, ys.start + self.row0, xs.stop - xs.start, ys.stop - ys.start)
        with self.lock:
            if not self.dst.closed:
                self.dst.write(value, 1, window=window)

    def close(self) -> None:
        """Close the file once no block is being written into it."""
        with self.lock:
            if not self.dst.closed:
                self.dst.close()


# --------------------------------------------------------------------------------------------
# Staging and Cloud Optimized GeoTIFF
# --------------------------------------------------------------------------------------------


def has_cog_driver() -> bool:
    """True if this GDAL build has the COG driver (GDAL >= 3.1)."""
    with rasterio.Env() as env:
        return "COG" in env.drivers()


@contextlib.contextmanager
def staging_path(final_tmp: Path, *, cog: bool) -> Iterator[Path]:
    """Where to write the tiled GTiff that becomes ``final_tmp``.

    Without ``cog`` that is ``final_tmp`` itself (a temporary path from
    :func:`lidmelt._files.atomic_path`). With ``cog`` it is a scratch file in a private folder
    beside it, removed when the block ends; :func:`publish` copies it to ``final_tmp``.
    """
    if not cog:
        yield final_tmp
        return
    with tempfile.TemporaryDirectory(dir=final_tmp.parent, prefix=f".{final_tmp.name}.") as d:
        yield Path(d) / "tiled.tif"


def publish(
    staged: Path,
    final_tmp: Path,
    *,
    integer: bool,
    description: str,
    units: str,
    tags: dict[str, str],
    verify: bool = True,
) -> None:
    """Make ``final_tmp`` the finished file: a COG copy of ``staged`` unless they are the same.

    ``verify`` reads the finished file back completely (:func:`read_back`); a caller that reads
    every file back later anyway (a run, :func:`lidmelt.grids._rundir.seal_run`) passes False,
    and the file's structure alone is checked (:func:`check_blocks`, no decompression).
    """
    if staged == final_tmp:
        (read_back if verify else check_blocks)(final_tmp)
        return
    copy_to_cog(staged, final_tmp, integer=integer, verify=verify)
    ensure_metadata(final_tmp, description, units, tags)


def copy_to_cog(src: Path, dst: Path, *, integer: bool, verify: bool = True) -> None:
    """Copy a finished tiled GTiff to Cloud-Optimized layout (ZSTD, 512 blocks, overviews).

    GDAL COG driver options (https://gdal.org/drivers/raster/cog.html): overviews resampled by
    average, or nearest for integers. Copying the finished GTiff is faster and leaner than
    writing COG directly; the copy runs with ``GDAL_CACHEMAX`` = :data:`COG_CACHE_MB`, since
    GDAL's default cache (5 % of RAM) let it grow to that size (``benchmarks/bench_write.py``).
    """
    with rasterio.Env(GDAL_CACHEMAX=COG_CACHE_MB), gdal_checked(dst):
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
    # the copy may return without raising on a failed write (disk full)
    (read_back if verify else check_blocks)(dst)


class _ErrorRecords(logging.Handler):
    """Collects the GDAL errors rasterio logs instead of raising."""

    def __init__(self) -> None:
        super().__init__(level=logging.ERROR)
        self.messages: list[str] = []

    def emit(self, record: logging.LogRecord) -> None:
        self.messages.append(record.getMessage())


@contextlib.contextmanager
def gdal_checked(path: str | Path) -> Iterator[None]:
    """Raise an OSError naming ``path`` if GDAL reported an error in the block without raising.

    rasterio logs (and does not raise) the errors GDAL reports inside some calls, such as a
    failed write during a copy; they are collected from the ``rasterio`` logger here.
    """
    handler = _ErrorRecords()
    logger = logging.getLogger("rasterio")
    logger.addHandler(handler)
    try:
        yield
    finally:
        logger.removeHandler(handler)
    if handler.messages:
        msg = f"GDAL reported an error while writing it: {handler.messages[0]}"
        raise OSError(0, msg, str(path))


def read_back(path: str | Path) -> None:
    """Read every block of a written GeoTIFF; raise if it is empty, truncated or damaged."""
    path = Path(path)
    if path.stat().st_size == 0:
        raise OSError(0, "the written GeoTIFF is empty (disk full?)", str(path))
    with gdal_checked(path), rasterio.open(path) as src:
        for _, window in src.block_windows(1):
            src.read(1, window=window)


def check_blocks(path: str | Path) -> None:
    """Open a written GeoTIFF and check that every block of band 1 lies inside the file.

    Catches what a full disk leaves (an empty file, a header or directory not written, blocks
    cut off at the end) without decompressing anything; :func:`read_back` reads every block.
    Block offsets and sizes are GDAL's ``TIFF`` metadata ``BLOCK_OFFSET_<col>_<row>`` and
    ``BLOCK_SIZE_<col>_<row>`` (https://gdal.org/drivers/raster/gtiff.html).
    """
    path = Path(path)
    size = path.stat().st_size
    if size == 0:
        raise OSError(0, "the written GeoTIFF is empty (disk full?)", str(path))
    with gdal_checked(path), rasterio.open(path) as src:
        rows, cols = src.block_shapes[0]
        for row in range(-(-src.height // rows)):
            for col in range(-(-src.width // cols)):
                offset = src.get_tag_item(f"BLOCK_OFFSET_{col}_{row}", "TIFF", bidx=1)
                count = src.get_tag_item(f"BLOCK_SIZE_{col}_{row}", "TIFF", bidx=1)
                if not offset or not count or int(offset) + int(count) > size:
                    msg = f"block ({row}, {col}) of the written GeoTIFF is missing (disk full?)"
                    raise OSError(0, msg, str(path))


def write_failed(exc: BaseException, *, what: str, where: str | Path) -> InputError:
    """The error for files that could not be written: ``what`` (e.g. "GeoTIFF") at ``where``."""
    msg = (
        f"cannot write {what} {str(where)!r} ({exc}). Check that the folder is writable and the "
        "disk has space."
    )
    return InputError(msg)


# --------------------------------------------------------------------------------------------
# Band metadata and tags
# --------------------------------------------------------------------------------------------


def set_metadata(dst: Any, description: str, units: str, tags: dict[str, str]) -> None:
    """Set band 1's description and unit and the dataset tags of an open rasterio dataset."""
    dst.set_band_description(1, str(description))
    dst.units = (str(units),)
    if tags:
        dst.update_tags(**tags)


def ensure_metadata(path: Path, description: str, units: str, tags: dict[str, str]) -> None:
    """Check the COG kept description, unit and tags; re-set the ones that were lost."""
    with rasterio.open(path) as src:
        kept = (
            src.descriptions[0] == str(description)
            and src.units[0] == str(units)
            and all((src.tags().get(k) or "").strip() == v.strip() for k, v in tags.items())
        )
    if not kept:  # GDAL 3.10 keeps them (tested); this only guards other GDAL versions
        with rasterio.open(path, "r+", IGNORE_COG_LAYOUT_BREAK="YES") as dst:
            set_metadata(dst, description, units, tags)


def _json_default(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, Path):
        return str(value)
    msg = f"{type(value).__name__} is not JSON serialisable"
    raise TypeError(msg)


def to_json(value: Any, *, key: str, where: str) -> str:
    """``value`` as JSON text (numpy scalars and arrays, paths allowed); InputError if it can't."""
    try:
        return json.dumps(value, default=_json_default, allow_nan=True)
    except (TypeError, ValueError) as exc:
        msg = (
            f"{where}: value of {key!r} ({type(value).__name__}) cannot be written as JSON "
            f"({exc}). Give str, numbers, lists or dicts of them."
        )
        raise InputError(msg) from exc


def stringify_tags(tags: Mapping[str, Any]) -> dict[str, str]:
    """GeoTIFF tags as text: strings as they are, other values as JSON; InputError on bad names."""
    out = {}
    for key, value in tags.items():
        if not isinstance(key, str) or not key or "=" in key or key != key.strip():
            msg = (
                f"tag name {key!r} is not valid; expected a non-empty string without '=' or "
                "surrounding spaces."
            )
            raise InputError(msg)
        out[key] = value if isinstance(value, str) else to_json(value, key=key, where="tags")
    return out
