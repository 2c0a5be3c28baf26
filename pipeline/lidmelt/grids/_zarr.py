"""The run's Zarr store (``lidmelt.zarr``): every grid of a run in one store, written where the
chunks are computed.

The store is Zarr format 3 (zarr-python 3.x writes it by default and xarray 2026.9 reads and
writes it; format 2 stays readable by zarr-python 2 but zarr-python 3 keeps it for
compatibility only). Its consolidated metadata (zarr-python's extension of format 3, read by
``xarray.open_zarr``) is written last, so a reader that asks for it finds a finished store.

How it is written (:class:`RunStore`): the run's process creates the store's metadata first
(every array, its CF attributes, the coordinates and the CRS's grid mapping) through
:meth:`xarray.Dataset.to_zarr` with ``compute=False``; then each band of the run adds one task
per chunk to the graph that computes the band, which writes that chunk of every array
(:meth:`RunStore.band`), so on a dask.distributed cluster the workers write their chunks
themselves and no output block travels to the run's process; with local threads the same
tasks run on the threads. The dask chunks are
the store's chunks (the run's ``chunk_size``), so no two tasks write the same chunk and no lock
is needed. Every chunk is written, even one that holds only fill values, so a missing chunk is
a damaged store (:func:`check_store`).

zarr does its I/O on a thread of its own: a write the run's process waits for goes on after an
interrupt, and would make the staging folder again after the run removed it. So the writes of
the run's process (the metadata, the layers of further stages, the consolidation) hold SIGINT
and SIGTERM back until they are done
(:func:`lidmelt.grids._transaction.signals_deferred`), and the chunk writes of dask threads are
waited for, and later ones dropped, when the run stops (:meth:`RunStore.close`).
"""

from __future__ import annotations

import contextlib
import threading
import uuid
import warnings
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from lidmelt._errors import RunDirError
from lidmelt.grids._geotiff import check_dtype_nodata, convert_block, to_json
from lidmelt.grids._grid import transform_of
from lidmelt.grids._objstore import store_options
from lidmelt.grids._transaction import signals_deferred

#: The Zarr format of the run's store (module docstring: why 3).
ZARR_FORMAT = 3
#: The name of the dask tasks that write the store's chunks (:meth:`RunStore.band`).
STORE_TASK = "lidmelt-store"
#: Runtime settings of every array the run writes: chunks of fill values are written too.
_CONFIG = {"write_empty_chunks": True}


@dataclass(frozen=True)
class StoreLayer:
    """One array of the store: a (y, x) DataArray and how it is encoded."""

    name: str
    da: xr.DataArray
    attrs: dict[str, Any]
    dtype: str = "float32"
    nodata: float = np.nan
    #: its index along axis 0 of the run's stacked kernel array (:class:`RunStore`), whose
    #: blocks :meth:`RunStore.band` takes whole; None: the blocks of ``da``
    index: int | None = None


def _fill(dtype: np.dtype, nodata: float) -> Any:
    """The CF ``_FillValue`` of an array: NaN for floats, else the integer nodata."""
    return dtype.type(np.nan) if dtype.kind == "f" else dtype.type(nodata)


def _root_attrs(tags: Mapping[str, Any]) -> dict[str, Any]:
    """The store's global attributes: CF conventions and the run's provenance (JSON text for
    what is not a string or a number)."""
    out: dict[str, Any] = {"Conventions": "CF-1.8", "title": "lidmelt run"}
    for key, value in tags.items():
        plain = isinstance(value, str | int | float) and not isinstance(value, bool)
        out[key] = value if plain else to_json(value, key=key, where="the Zarr store")
    return out


def _dataset(layers: list[StoreLayer], tags: Mapping[str, Any], chunks: int):
    """The store's Dataset (lazy data) and its encoding: chunks, dtypes, fill values."""
    from rioxarray.rioxarray import affine_to_coords

    first = layers[0].da
    crs, transform = first.rio.crs, transform_of(first)
    # the cell centres as rioxarray gives them from a GeoTIFF's transform: the same floats
    coords = affine_to_coords(transform, first.sizes["x"], first.sizes["y"])
    data, encoding = {}, {}
    for layer in layers:
        dtype = np.dtype(layer.dtype)
        da = xr.DataArray(layer.da.data, coords=coords, dims=("y", "x"))
        da.attrs = dict(layer.attrs)
        data[layer.name] = da
        shape = (min(chunks, da.sizes["y"]), min(chunks, da.sizes["x"]))
        encoding[layer.name] = {
            "dtype": dtype,
            "chunks": shape,
            "_FillValue": _fill(dtype, layer.nodata),  # CF: read back as nodata
            "fill_value": _fill(dtype, layer.nodata),  # zarr's own: a missing chunk, nodata
        }
    ds = xr.Dataset(data).rio.write_crs(crs)  # the grid_mapping variable "spatial_ref" (CF)
    ds = ds.rio.write_transform(transform)  # GDAL's GeoTransform, as in the GeoTIFFs
    for name in data:
        ds[name].encoding = {}
        ds[name].attrs["grid_mapping"] = "spatial_ref"
    ds.attrs = _root_attrs(tags)
    return ds, encoding


class _Region:
    """A :func:`dask.array.store` target writing into one array of the store, that can be
    closed: a run interrupted while dask threads write waits for the writes in progress and
    drops later ones (the staging folder is being removed: a late chunk would make it again).
    A copy sent to a worker writes only while the store's folder exists (a path; a URL always).
    """

    def __init__(self, array: Any, root: str) -> None:
        self.array, self.root = array, root
        self._cond = threading.Condition()
        self._busy = 0
        self._closed = False

    def __getstate__(self) -> dict[str, Any]:
        return {"array": self.array, "root": self.root}

    def __setstate__(self, state: dict[str, Any]) -> None:
        self.__init__(state["array"], state["root"])

    def __setitem__(self, key: Any, value: Any) -> None:
        with self._cond:
            if self._closed or not ("://" in self.root or Path(self.root).is_dir()):
                return
            self._busy += 1
        try:
            self.array[key] = value
        finally:
            with self._cond:
                self._busy -= 1
                self._cond.notify_all()

    def close(self) -> None:
        """Wait for the writes in progress; drop any later one."""
        with self._cond:
            self._closed = True
            self._cond.wait_for(lambda: self._busy == 0)


@dataclass(frozen=True, eq=False)
class _ChunkWriter:
    """Writes one chunk of every array of the store (a dask block function over the blocks of
    a band that starts at row ``row0``): ``indices[k]`` is array k's layer of the stacked
    kernel block (the first block, 3-D) or None for the next of its own 2-D blocks;
    ``encodings`` holds each array's numpy dtype and nodata
    (:func:`lidmelt.grids._geotiff.convert_block`)."""

    targets: tuple[_Region, ...]
    encodings: tuple[tuple[np.dtype, float], ...]
    indices: tuple[int | None, ...]
    row0: int

    def __call__(self, *blocks: np.ndarray, block_info=None) -> np.ndarray:
        (r0, r1), (c0, c1) = block_info[0]["array-location"][-2:]
        where = (slice(self.row0 + r0, self.row0 + r1), slice(c0, c1))
        stacked = blocks[0] if blocks[0].ndim == 3 else None
        own = iter(blocks[1:] if stacked is not None else blocks)
        for target, index, (dtype, nodata) in zip(
            self.targets, self.indices, self.encodings, strict=True
        ):
            block = next(own) if index is None else stacked[index]
            target[where] = convert_block(block, dtype, nodata)
        return np.ones((1, 1), np.int8)


def zarr_target(location: str) -> Any:
    """What zarr writes to for ``location``: a path as it is, an fsspec URL as zarr's
    ``FsspecStore`` with its file system's options (:func:`lidmelt.grids._objstore.store_options`).
    """
    if not is_url(location):
        return location
    from zarr.storage import FsspecStore

    options = store_options(location)
    return FsspecStore.from_url(location, storage_options=options or None, read_only=False)


class RunStore:
    """The run's Zarr store at ``store`` (a path or an fsspec URL).

    :meth:`create` writes the metadata; :meth:`band` gives the dask task that writes a band of
    rows of every array; :meth:`finish` consolidates the metadata.
    """

    def __init__(
        self, store: str | Path, layers: list[StoreLayer], *, chunks: int, stacked: Any = None
    ) -> None:
        self.store = str(store)
        self.layers = layers
        self.chunks = chunks
        self.stacked = stacked  # the kernel's (layers, y, x) dask array: StoreLayer.index
        self._targets: list[Any] = []
        self._zarr = zarr_target(self.store)

    def create(self, tags: Mapping[str, Any]) -> RunStore:
        """Write every array's metadata, the coordinates and the grid mapping (no chunk of
        data: xarray's deferred write is dropped, the bands write the data)."""
        import zarr

        ds, encoding = _dataset(self.layers, tags, self.chunks)
        with signals_deferred():  # zarr's I/O thread would finish after an interrupt (below)
            ds.to_zarr(
                self._zarr, mode="w-", compute=False, consolidated=False, zarr_format=ZARR_FORMAT,
                encoding=encoding, write_empty_chunks=True,
            )  # fmt: skip
        arrays = [zarr.open_array(self._zarr, path=x.name, mode="r+") for x in self.layers]
        self._targets = [_Region(a.with_config(_CONFIG), self.store) for a in arrays]
        return self

    def close(self) -> None:
        """Stop writing (an interrupted run): wait for the chunks being written by this
        process's threads, drop later ones."""
        for target in self._targets:
            target.close()

    def band(self, rows: slice) -> Any:
        """A dask array of one task per chunk of rows ``rows`` that writes that chunk of every
        array where it is computed (the blocks in the dtype and fill value of the GeoTIFFs);
        its values (one 1 per chunk) say nothing. One task per chunk, not one per chunk and
        array: a 2\' global run has 66 chunks and 12 arrays, and the 1,650 tasks of the
        arrays one by one cost a cluster's scheduler and workers 2 s (benchmarks/bench_zarr.py).
        """
        import dask.array as dsa

        own = [x for x in self.layers if x.index is None or self.stacked is None]
        parts = [x.da.data[rows] for x in own]
        if len(own) < len(self.layers):  # the kernel's layers: its stacked block, first
            parts.insert(0, self.stacked[:, rows])
        writer = _ChunkWriter(
            tuple(self._targets),
            tuple((check_dtype_nodata(x.dtype, x.nodata), x.nodata) for x in self.layers),
            tuple(None if x in own else x.index for x in self.layers),
            rows.start or 0,
        )
        chunks = tuple((1,) * len(c) for c in parts[-1].chunks[-2:])
        drop = (0,) if parts[0].ndim == 3 else ()
        name = f"{STORE_TASK}-{uuid.uuid4().hex}-{rows.start or 0}"
        return dsa.map_blocks(
            writer, *parts, dtype=np.int8, chunks=chunks, drop_axis=drop, name=name
        )

    def append(self, layers: list[StoreLayer]) -> None:
        """Add arrays (layers written after the run's bands, e.g. an ensemble's) and write
        them whole, on local threads."""
        if not layers:
            return
        ds, encoding = _dataset(layers, {}, self.chunks)
        ds.attrs = {}
        with signals_deferred():
            ds.to_zarr(
                self._zarr, mode="a", consolidated=False, zarr_format=ZARR_FORMAT,
                encoding=encoding, write_empty_chunks=True,
            )  # fmt: skip
        self.layers = [*self.layers, *layers]

    def finish(self) -> None:
        """Consolidate the metadata (the last write: a reader of consolidated metadata sees
        the store only once every chunk is there)."""
        import zarr

        with _quiet(), signals_deferred():
            zarr.consolidate_metadata(self._zarr, zarr_format=ZARR_FORMAT)


@contextlib.contextmanager
def _quiet():
    """No warning that consolidated metadata is zarr-python's extension of format 3 (said in
    the module docstring and docs/workflow.md)."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="Consolidated metadata", category=UserWarning)
        yield


def check_store(path: str | Path) -> dict[str, int]:
    """Check a finished store: consolidated metadata, every array's every chunk present and
    non-empty. Returns the number of chunks per array.

    Raises
    ------
    RunDirError
        If the metadata cannot be read or a chunk is missing or empty.
    """
    import zarr

    try:
        with _quiet():
            group = zarr.open_consolidated(str(path), mode="r", zarr_format=ZARR_FORMAT)
        arrays = dict(group.arrays())
    except (OSError, ValueError, KeyError, TypeError) as exc:
        msg = f"the Zarr store {str(path)!r} cannot be opened ({exc}); the run was interrupted."
        raise RunDirError(msg) from exc
    counts = {}
    for name, array in arrays.items():
        if array.ndim < 2:
            continue
        if array.nchunks_initialized != array.nchunks:
            msg = (
                f"array {name!r} of the Zarr store {str(path)!r} has "
                f"{array.nchunks_initialized} of its {array.nchunks} chunks; the run was "
                "interrupted or the disk is full."
            )
            raise RunDirError(msg)
        counts[name] = array.nchunks
    return counts


def flag_counts(path: str | Path, name: str) -> dict[int, int]:
    """Cells per value of the uint8 array ``name`` of the store, read a chunk row at a time."""
    import zarr

    array = zarr.open_array(str(path), path=name, mode="r")
    counts = np.zeros(256, np.int64)
    step = array.chunks[0]
    for row in range(0, array.shape[0], step):
        counts += np.bincount(np.asarray(array[row : row + step]).ravel(), minlength=256)
    return {int(v): int(counts[v]) for v in np.flatnonzero(counts)}


def open_variable(path: str | Path, name: str) -> xr.DataArray:
    """One array of the store as a (y, x) float64 DataArray with NaN nodata and its CRS."""
    import rioxarray  # noqa: F401  (registers the .rio accessor)

    with _quiet(), xr.open_zarr(str(path), consolidated=True, zarr_format=ZARR_FORMAT) as ds:
        da = ds[name].load()
    da = da.astype(np.float64)
    da.encoding = {}
    return da


def is_url(text: str) -> bool:
    """True for an fsspec URL (``scheme://...``), not a local path."""
    return "://" in text


def store_bands(path: str | Path, name: str, rows: int):
    """Yield ``(rows, block)``: the array ``name`` of the store ``rows`` rows at a time, as
    float32 with NaN where it holds its fill value (the nodata)."""
    import zarr

    array = zarr.open_array(zarr_target(str(path)), path=name, mode="r")
    for row0 in range(0, array.shape[0], rows):
        band = slice(row0, min(row0 + rows, array.shape[0]))
        block = np.asarray(array[band])
        nodata = block == array.fill_value if block.dtype.kind != "f" else None
        block = block.astype(np.float32)
        if nodata is not None:
            block[nodata] = np.nan
        yield band, block


def store_flags(path: str | Path, name: str) -> np.ndarray:
    """The uint8 array ``name`` of the store (the validity flags), raw values."""
    import zarr

    return np.asarray(zarr.open_array(str(path), path=name, mode="r")[...])


def stored_names(summary: Mapping[str, Any]) -> list[str]:
    """The arrays of a run's Zarr store, from its summary's ``zarr`` entry (none without)."""
    entry = summary.get("zarr")
    names = entry.get("variables") if isinstance(entry, dict) else None
    return [str(n) for n in names] if isinstance(names, list) else []


def in_store(summary: Mapping[str, Any], name: str) -> bool:
    """True where a run's variable ``name`` is read from its Zarr store: the run wrote it there
    and no GeoTIFF of it (its ``file`` is null: ``[outputs] geotiff = false``)."""
    if name not in stored_names(summary):
        return False
    entry = summary.get("validity_flag") if name == "validity_flag" else None
    for group in ("outputs", "inputs"):
        found = summary.get(group)
        entry = entry or (found.get(name) if isinstance(found, dict) else None)
    return isinstance(entry, dict) and entry.get("file") is None
