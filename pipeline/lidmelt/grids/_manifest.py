"""The manifest of a run directory: every data file with its size and SHA-256, and its checks.

A run records in ``summary.json`` a ``manifest`` {``files`` {relative name: {``size``,
``sha256``}}} of every file it wrote except the summary itself and the figures (``maps/``,
``report.html``, ``report.pdf``: derived products that ``lidmelt map`` and ``lidmelt report``
may redraw in place at any time, so they live outside the manifest; and the STAC Item and
Collection, written after them), and ``summary_sha256``, the
SHA-256 of the summary's canonical JSON (sorted keys, no blanks) without that key. Before a run
is swapped into place, :func:`check_written` checks every file (each GeoTIFF's blocks lie inside
the file, the flag grid read back completely, the NetCDF read variable by variable in row bands,
the JSON parsed) and the manifest's SHA-256 reads every byte; before any product reads a run,
:func:`verify_manifest` checks sizes, checksums and the summary's own checksum, so a mixed,
truncated or tampered folder is refused with a message instead of being read.
"""

from __future__ import annotations

import hashlib
import json
import os
from collections.abc import Iterable, Mapping
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from lidmelt._errors import InputError, RunDirError
from lidmelt._variables import FLAG_NODATA
from lidmelt.grids._geotiff import check_blocks
from lidmelt.grids._zarr import check_store
from lidmelt.grids._zarr import flag_counts as store_flag_counts
from lidmelt.physics._flags import FLAG_INVALID_INPUT, FLAG_WATER_SATURATED

#: The summary's key holding the manifest.
MANIFEST_KEY = "manifest"
#: The summary's key holding its own checksum.
SUMMARY_HASH_KEY = "summary_sha256"
#: Names (first path part) of derived figures, outside the manifest.
FIGURE_NAMES = frozenset({"maps", "report.html", "report.pdf"})
#: The run's STAC Item and (ensemble) Collection (:mod:`lidmelt.grids._stac`): written last,
#: after the seal and the figures, since they list every file of the run (the summary with its
#: manifest included), so they are outside the manifest.
ITEM_NAME = "stac_item.json"
COLLECTION_NAME = "stac_collection.json"
CATALOGUE_NAMES = frozenset({ITEM_NAME, COLLECTION_NAME})
#: Rows per band when a NetCDF variable is read back.
_NC_ROWS = 512
#: Files read back (or hashed) at once: GDAL, HDF5 and hashlib release the GIL while they work.
_READERS = max(1, min(4, os.cpu_count() or 1))
#: GDAL block cache while reading back, MB: blocks read once need no cache, and GDAL's default
#: (5 % of RAM) would hold up to a whole decompressed file, so peak memory would grow with the
#: grid (``benchmarks/bench_basin.py``).
_READ_CACHE_MB = 64

#: Checksums already computed in this process: (path, inode, size, mtime_ns) -> SHA-256.
_HASHES: dict[tuple[str, int, int, int], str] = {}


def file_sha256(path: str | Path) -> str:
    """SHA-256 (hex) of a file's content, read in 1 MiB blocks (cached by inode, size, mtime)."""
    st = Path(path).stat()
    key = (str(path), st.st_ino, st.st_size, st.st_mtime_ns)
    if key not in _HASHES:
        digest = hashlib.sha256()
        with Path(path).open("rb") as f:
            while block := f.read(1 << 20):
                digest.update(block)
        _HASHES[key] = digest.hexdigest()
    return _HASHES[key]


def summary_sha256(doc: Mapping[str, Any]) -> str:
    """SHA-256 of ``doc``'s canonical JSON without :data:`SUMMARY_HASH_KEY`."""
    body = {k: v for k, v in doc.items() if k != SUMMARY_HASH_KEY}
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _manifest_files(folder: Path, summary_name: str) -> list[str]:
    names = []
    for root, dirs, files in os.walk(folder):
        rel_root = Path(root).relative_to(folder)
        dirs[:] = sorted(d for d in dirs if not (rel_root == Path() and d in FIGURE_NAMES))
        for name in sorted(files):
            rel = (rel_root / name).as_posix()
            if rel != summary_name and rel not in FIGURE_NAMES | CATALOGUE_NAMES:
                names.append(rel)
    return names


def build_manifest(folder: str | Path, *, summary_name: str) -> dict[str, Any]:
    """The manifest of every file under ``folder`` but the summary and the figures."""
    folder = Path(folder)
    names = _manifest_files(folder, summary_name)
    with ThreadPoolExecutor(_READERS) as pool:
        hashes = list(pool.map(file_sha256, [folder / rel for rel in names]))
    files = {}
    for rel, digest in zip(names, hashes, strict=True):
        files[rel] = {"size": (folder / rel).stat().st_size, "sha256": digest}
    return {"files": files}


def seal_summary(doc: dict[str, Any], folder: str | Path, *, summary_name: str) -> dict[str, Any]:
    """``doc`` with the manifest of ``folder`` and its own checksum (a new dict)."""
    sealed = {k: v for k, v in doc.items() if k not in (MANIFEST_KEY, SUMMARY_HASH_KEY)}
    sealed[MANIFEST_KEY] = build_manifest(folder, summary_name=summary_name)
    sealed[SUMMARY_HASH_KEY] = summary_sha256(sealed)
    return sealed


def _refuse(folder: Path, what: str) -> RunDirError:
    msg = (
        f"run directory {str(folder)!r} fails its manifest check: {what}. The folder is mixed, "
        "truncated or was changed after the run; run 'lidmelt run' again to rewrite it."
    )
    return RunDirError(msg)


def verify_manifest(
    folder: str | Path, doc: Mapping[str, Any], *, needed: Iterable[str] = ()
) -> dict[str, os.stat_result]:
    """Check ``doc``'s checksum and every manifest file's size and SHA-256.

    ``needed`` are files the summary refers to; each must be in the manifest. Returns the
    ``os.stat`` of every checked file (readers compare it before opening, to notice a run
    swapped into the folder meanwhile).

    Raises
    ------
    RunDirError
        On a missing manifest, a changed summary, or a missing, resized or changed file.
    """
    folder = Path(folder)
    manifest = doc.get(MANIFEST_KEY)
    if not isinstance(manifest, dict) or not isinstance(manifest.get("files"), dict):
        raise _refuse(folder, "summary.json has no manifest (written by an interrupted or old run)")
    if doc.get(SUMMARY_HASH_KEY) != summary_sha256(doc):
        raise _refuse(folder, "summary.json does not match its recorded checksum")
    files = manifest["files"]
    for rel in needed:
        if rel not in files:
            raise _refuse(folder, f"{rel!r} is not in the manifest")
    stats = {}
    for rel, entry in files.items():
        path = folder / rel
        if ".." in Path(rel).parts or Path(rel).is_absolute():
            raise _refuse(folder, f"the manifest names {rel!r}, outside the folder")
        try:
            st = path.stat()
            if not isinstance(entry, dict) or st.st_size != entry.get("size"):
                raise _refuse(
                    folder,
                    f"{rel!r} has {st.st_size} bytes, the manifest says "
                    f"{entry.get('size') if isinstance(entry, dict) else entry!r}",
                )
            if file_sha256(path) != entry.get("sha256"):
                raise _refuse(folder, f"{rel!r} differs from the file the run wrote (SHA-256)")
        except FileNotFoundError as exc:
            raise _refuse(folder, f"{rel!r} is missing") from exc
        stats[rel] = st
    return stats


@dataclass
class FileCheck:
    """What :func:`check_written` read back: per file its size; flag counts by value."""

    sizes: dict[str, int] = field(default_factory=dict)
    flag_counts: dict[int, int] = field(default_factory=dict)


def _check_geotiff(path: Path, *, count_values: bool) -> dict[int, int]:
    """Check a GeoTIFF; with ``count_values`` read it back, a row of blocks at a time (GDAL
    raises on a truncated or corrupt tile), and count the cells of each value.

    Without ``count_values`` only the structure is checked
    (:func:`lidmelt.grids._geotiff.check_blocks`: the header and every block inside the file),
    which is what a full disk or a killed writer leaves wrong, without decompressing: reading
    every float grid back took about 6 s of a global 2-arc-minute run (a third of the raw
    write time, ``benchmarks/bench_basin.py``).
    """
    import rasterio
    from rasterio.windows import Window

    if not count_values:
        check_blocks(path)
        return {}
    counts: dict[int, int] = {}
    with rasterio.open(path) as src:
        step = src.block_shapes[0][0]
        for row in range(0, src.height, step):
            block = src.read(1, window=Window(0, row, src.width, min(step, src.height - row)))
            if block.dtype == np.uint8:  # the flag grid: a histogram, not a sort
                values = np.flatnonzero(n := np.bincount(block.ravel(), minlength=256))
                n = n[values]
            else:
                values, n = np.unique(block, return_counts=True)
            for v, c in zip(values.tolist(), n.tolist(), strict=True):
                counts[int(v)] = counts.get(int(v), 0) + c
    return counts


def _check_netcdf(path: Path) -> None:
    """Read every variable of a NetCDF back in bands of rows (HDF raises on a bad chunk)."""
    import netCDF4

    with netCDF4.Dataset(path) as ds:
        for var in ds.variables.values():
            if var.ndim < 2:
                var[...]
                continue
            for row in range(0, var.shape[0], _NC_ROWS):
                var[row : row + _NC_ROWS, ...]


def check_written(
    folder: str | Path, *, flag_file: str | None = None, store_url: str | None = None
) -> FileCheck:
    """Check every file under ``folder``: GeoTIFFs whole (every block inside the file; the
    ``flag_file`` read back completely), NetCDF and JSON must parse completely, a Zarr store
    (``*.zarr``, and the run's store at ``store_url`` when it has one) must have its consolidated
    metadata and every chunk of every array (its flag array is read back completely where the
    run has no ``flag_file``).

    Returns the files' sizes and, for ``flag_file``, the count of cells per flag value.

    Raises
    ------
    OSError, rasterio.errors.RasterioError, RuntimeError, ValueError
        As raised by the readers for a truncated or corrupt file (the caller reports it).
    """
    folder = Path(folder)
    check = FileCheck()
    paths = sorted(p for p in folder.rglob("*") if p.is_file())
    for path in paths:
        rel = path.relative_to(folder).as_posix()
        check.sizes[rel] = path.stat().st_size
        if check.sizes[rel] == 0:
            msg = f"{str(path)!r} is empty after writing; the disk may be full."
            raise OSError(msg)

    def read(path: Path) -> dict[int, int] | None:
        rel = path.relative_to(folder).as_posix()
        suffix = path.suffix.lower()
        if suffix == ".tif":
            return _check_geotiff(path, count_values=rel == flag_file)
        if suffix == ".nc":
            _check_netcdf(path)
        elif suffix == ".json":
            json.loads(path.read_text(encoding="utf-8"))
        return None

    import rasterio

    # the cache size is global to GDAL: set here, for every reading thread at once
    with rasterio.Env(GDAL_CACHEMAX=_READ_CACHE_MB), ThreadPoolExecutor(_READERS) as pool:
        # the first failure (in path order) is raised
        for path, counts in zip(paths, pool.map(read, paths), strict=True):
            if path.relative_to(folder).as_posix() == flag_file:
                check.flag_counts = counts or {}
    stores = sorted(p for p in folder.glob("*.zarr") if p.is_dir())
    for store in [*stores, *([store_url] if store_url else [])]:
        arrays = check_store(store)  # every chunk of every array there, metadata consolidated
        flag = Path(flag_file).stem if flag_file else None
        if flag in arrays and not (folder / str(flag_file)).is_file():
            check.flag_counts = store_flag_counts(store, flag)
    return check


def check_evaluable(flag_counts: Mapping[int, int], *, sources: Mapping[str, str]) -> None:
    """Refuse a run where no cell has data, or no cell with data can be evaluated.

    ``flag_counts`` are the cells per validity flag value (as read back from the flag grid);
    ``sources`` name where each input came from.

    Raises
    ------
    InputError
        Saying why: every input NaN over the grid, Tp at or below the surface solidus, or the
        source water above saturation, in every cell.
    """
    with_data = {v: n for v, n in flag_counts.items() if v != FLAG_NODATA and n}
    given = ", ".join(f"{k} from {v}" for k, v in sources.items()) or "no inputs"
    if not with_data:
        msg = (
            "no cell of the grid has data: every cell lacks a lid (plate age or lid thickness), "
            f"a thermal anomaly or a water content ({given}). Check that the input grids "
            "overlap the grid's extent and are not all NaN (nodata)."
        )
        raise InputError(msg)
    bad = FLAG_INVALID_INPUT | FLAG_WATER_SATURATED
    if all(v & bad for v in with_data):
        invalid = sum(n for v, n in with_data.items() if v & FLAG_INVALID_INPUT)
        why = (
            "the potential temperature is at or below the surface solidus (or an input is "
            "out of range)"
            if invalid
            else "the source water is above saturation at the onset of melting"
        )
        msg = (
            f"none of the {sum(with_data.values())} cells with data can be evaluated: {why} "
            f"in every cell ({given}). Raise model.ambient_potential_temperature_c or the "
            "thermal anomaly, or lower the water content (wt%)."
        )
        raise InputError(msg)
