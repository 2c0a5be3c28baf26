"""The run's Zarr store seen from the engine: which arrays it holds, their CF attributes, the
layers further stages add, and the formats a workflow may combine.

The store itself (metadata first, then chunk by chunk where the chunks are computed) is
:mod:`lidmelt.grids._zarr`; its name in the run folder comes from :mod:`lidmelt.grids._rundir`.
"""

from __future__ import annotations

import functools
from pathlib import Path
from typing import Any

import numpy as np

from lidmelt._errors import WorkflowError
from lidmelt._variables import FLAG_VARIABLE, INPUTS, OUTPUTS
from lidmelt.grids import _rundir as rundir
from lidmelt.grids._objstore import list_store, new_store_url, remove_store
from lidmelt.grids._runnetcdf import cf_classes
from lidmelt.grids._store import GeoTiffItem
from lidmelt.grids._zarr import ZARR_FORMAT, RunStore, StoreLayer, is_url
from lidmelt.physics._flags import FLAG_KEYS


def check_formats(cfg) -> None:
    """Refuse what a run without GeoTIFFs (``[outputs] geotiff = false``) cannot write: the
    NetCDF and the layers of an ensemble or a history are made from the finished GeoTIFFs."""
    if cfg.outputs.geotiff:
        return
    needs = [
        what
        for what, given in (
            ("run.netcdf = true", cfg.run.netcdf),
            ("an [ensemble] table", getattr(cfg, "ensemble", None) is not None),
            ("a [motion] table", getattr(cfg, "motion", None) is not None),
        )
        if given
    ]
    if needs:
        msg = (
            f"outputs.geotiff is false, but the workflow has {' and '.join(needs)}, which lidmelt "
            "makes from the run's GeoTIFFs. Set outputs.geotiff = true (the Zarr store is "
            "written as well), or remove " + " and ".join(needs) + "."
        )
        raise WorkflowError(msg)


def _attrs(item: GeoTiffItem, name: str) -> dict[str, Any]:
    """CF attributes of one array: units, long name, and the flags' masks or the classes'
    values with their meanings (CF conventions 1.8, section 3.5 "Flags", from memory)."""
    attrs: dict[str, Any] = {"units": item.units, "long_name": item.description}
    if name == FLAG_VARIABLE.name:
        bits = sorted(FLAG_KEYS)
        attrs["flag_masks"] = np.array(bits, dtype=np.uint8)
        attrs["flag_meanings"] = " ".join(FLAG_KEYS[b] for b in bits)
        return attrs
    var = OUTPUTS.get(name) or INPUTS.get(name)
    if var is not None:
        attrs.update(cf_classes(var))
    return attrs


def store_location(cfg, tx) -> str | None:
    """The URL of the run's new store under ``[outputs] zarr_url``
    (:func:`lidmelt.grids._objstore.new_store_url`, named after the run folder), its removal
    registered with the run's transaction ``tx`` (on any failure before the swap); None for a
    store in the run folder or no store."""
    folder = getattr(cfg.outputs, "zarr_url", None)
    if not cfg.outputs.zarr or not folder:
        return None
    url = new_store_url(folder, tx.dest.name)
    tx.on_abort(functools.partial(remove_store, url))
    return url


def plan_store(
    cfg,
    run_dir: Path,
    items: list[GeoTiffItem],
    *,
    tags: dict[str, Any],
    at: str | None = None,
    stacked: Any = None,
):
    """The run's :class:`RunStore` with its metadata written (every array of ``items``, named
    by its ``variable`` tag), or None when the workflow asks no Zarr store. The store is
    ``run_dir / lidmelt.zarr``, or at the URL ``at`` (:func:`store_location`); ``stacked``, the
    kernel's (outputs and flag, y, x) dask array, gives the outputs' and the flag's blocks."""
    if not cfg.outputs.zarr:
        return None
    order = [*OUTPUTS, FLAG_VARIABLE.name]
    layers = [
        StoreLayer(
            name, item.da, _attrs(item, name), dtype=item.dtype, nodata=item.nodata,
            index=order.index(name) if name in order and stacked is not None else None,
        )
        for item, name in ((i, i.tags["variable"]) for i in items)
    ]  # fmt: skip
    where = at or run_dir / rundir.ZARR_NAME
    store = RunStore(where, layers, chunks=int(cfg.compute.chunk_size), stacked=stacked)
    return store.create(tags)


def add_stage_layers(store: RunStore | None, run_dir: Path, entries: dict[str, Any]) -> None:
    """Add the layers of further stages (an ensemble's, a history's), read from the GeoTIFFs
    they wrote, to the store, chunked like it; then consolidate its metadata."""
    if store is None:
        return
    from lidmelt.grids._io import open_grid

    extra = []
    for name, entry in (entries.get("outputs") or {}).items():
        path = run_dir / str((entry or {}).get("file") or "")
        if path.suffix == ".tif" and path.is_file():
            da = open_grid(path, name=name, chunks=store.chunks)
            item = GeoTiffItem(
                da, path, entry.get("long_name", name), entry.get("units", ""), {"variable": name}
            )
            extra.append(StoreLayer(name, da, _attrs(item, name)))
    store.append(extra)
    store.finish()


def flag_source(cfg, run_dir: Path, store: RunStore | None = None) -> Path | str:
    """Where the run's validity flags are read back: the GeoTIFF, else the store."""
    if cfg.outputs.geotiff or store is None:
        return run_dir / rundir.FLAG_FILE
    return store.store if is_url(store.store) else Path(store.store)


def local_files(store: RunStore | None) -> list[Path]:
    """The store as a file of the run folder (none for a store at a URL, or no store)."""
    return [] if store is None or is_url(store.store) else [Path(store.store)]


def record_formats(doc: dict[str, Any], store: Any, geotiff: bool) -> dict[str, Any]:
    """``doc`` with its ``zarr`` entry {``store``, ``zarr_format``, ``variables``} when the run
    wrote a Zarr store (:class:`lidmelt.grids._zarr.RunStore`, or None); a store at a URL adds
    ``url`` and what it holds (:func:`lidmelt.grids._objstore.list_store`: chunks and bytes per
    array, the root metadata's bytes). Without GeoTIFFs the ``file`` of every output, input and
    the flags is null (readers take the store)."""
    if store is None:
        return doc
    doc = dict(doc)
    names = [layer.name for layer in store.layers]
    doc["zarr"] = {"store": rundir.ZARR_NAME, "zarr_format": ZARR_FORMAT, "variables": names}
    if is_url(store.store):
        doc["zarr"] = {**doc["zarr"], "store": store.store, "url": store.store}
        doc["zarr"].update(list_store(store.store))
    if not geotiff:
        for group in ("outputs", "inputs"):
            doc[group] = {
                k: {**v, "file": None} if isinstance(v, dict) and k in names else v
                for k, v in doc[group].items()
            }
        doc["validity_flag"] = {**doc["validity_flag"], "file": None}
    return doc
