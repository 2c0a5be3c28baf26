"""The melting tables' disk cache: where it is, content checksums, a size limit, clearing.

Each cached table (``<model>-<key>.npz``) stores the SHA-256 of its arrays' content
(:func:`content_sha256`); a file whose content does not match, or that cannot be read, is
rebuilt with a one-line warning. The folder is kept under a size limit
(``$LIDMELT_CACHE_MAX_MB``, default :data:`DEFAULT_MAX_MB`) by removing the least recently used
tables (a table's modification time is refreshed each time it is loaded).
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import os
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from lidmelt._errors import InputError

#: Default size limit of the cache folder (MB); a Katz table of the default layout is about 220 MB.
DEFAULT_MAX_MB = 1024.0
_PATTERN = "*.npz"


def cache_dir() -> Path:
    """The folder where tables are cached.

    Raises
    ------
    InputError
        If ``$LIDMELT_CACHE_MAX_MB`` is set but not a positive number (checked on every use,
        whether the table is then built or found in the cache).
    """
    cache_limit_bytes()
    if os.environ.get("LIDMELT_CACHE_DIR"):
        return Path(os.environ["LIDMELT_CACHE_DIR"])
    base = os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache"
    return Path(base) / "lidmelt"


def cache_limit_bytes() -> int:
    """The cache's size limit: ``$LIDMELT_CACHE_MAX_MB`` megabytes, else the default.

    Raises
    ------
    InputError
        If the variable is not a positive number.
    """
    text = os.environ.get("LIDMELT_CACHE_MAX_MB", "").strip()
    if not text:
        return int(DEFAULT_MAX_MB * 1e6)
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not (np.isfinite(value) and value > 0):
        msg = (
            f"LIDMELT_CACHE_MAX_MB = {text!r}: expected a positive number of megabytes "
            f"(default {DEFAULT_MAX_MB:g}). Set it to e.g. 2000, or unset it."
        )
        raise InputError(msg)
    return int(value * 1e6)


def content_sha256(arrays: Mapping[str, np.ndarray]) -> str:
    """SHA-256 over each array's name, dtype, shape and bytes, in name order."""
    digest = hashlib.sha256()
    for name in sorted(arrays):
        a = np.ascontiguousarray(arrays[name])
        digest.update(f"{name}:{a.dtype.str}:{a.shape};".encode())
        digest.update(a.tobytes())
    return digest.hexdigest()


def touch(path: Path) -> None:
    """Mark a table as just used (for the least-recently-used eviction)."""
    with contextlib.suppress(OSError):
        os.utime(path)


def _tables(folder: Path) -> list[Path]:
    if not folder.is_dir():
        return []
    return [p for p in folder.glob(_PATTERN) if p.is_file() and not p.is_symlink()]


def enforce_limit(folder: Path, *, keep: Path | None = None) -> list[Path]:
    """Remove the least recently used tables until the folder is under the limit.

    ``keep`` (the table just written) is never removed. Returns the removed files.
    """
    limit = cache_limit_bytes()
    tables = sorted(_tables(folder), key=lambda p: p.stat().st_mtime)
    total = sum(p.stat().st_size for p in tables)
    removed = []
    for path in tables:
        if total <= limit:
            break
        if keep is not None and path == keep:
            continue
        size = path.stat().st_size
        with contextlib.suppress(OSError):
            path.unlink()
            total -= size
            removed.append(path)
    return removed


@dataclass(frozen=True)
class CacheInfo:
    """The cache folder, its tables (name, bytes), their total and the limit (bytes)."""

    folder: Path
    tables: list[tuple[str, int]]
    total_bytes: int
    limit_bytes: int


def cache_info() -> CacheInfo:
    """What the cache holds."""
    folder = cache_dir()
    tables = sorted((p.name, p.stat().st_size) for p in _tables(folder))
    return CacheInfo(folder, tables, sum(n for _, n in tables), cache_limit_bytes())


def clear_cache() -> list[Path]:
    """Remove every cached table (and temporary files left by interrupted writes)."""
    folder = cache_dir()
    removed = []
    if folder.is_dir():
        for path in [*folder.glob(_PATTERN), *folder.glob(".*.tmp*")]:
            if path.is_file() or path.is_symlink():
                path.unlink(missing_ok=True)
                removed.append(path)
    return removed


def file_stamp(fd: int) -> tuple[int, int]:
    """(inode, size) of an open file: which file a path named when it was read. Tables are
    written to a temporary file and renamed into place (:func:`lidmelt._files.atomic_path`),
    so a rebuilt table is another inode; touching a table (:func:`touch`) keeps its stamp."""
    st = os.fstat(fd)
    return (st.st_ino, st.st_size)


def map_npz(path: Path) -> tuple[dict[str, np.ndarray], tuple[int, int]]:
    """The arrays of an uncompressed .npz file (what :func:`numpy.savez` writes) as read-only
    views of the file mapped into memory, and its :func:`file_stamp`.

    Nothing is copied: processes that map the same file share its pages (a cluster's workers
    on one machine hold one copy of a table, not one each). Raises ``ValueError`` for a
    compressed or damaged member, ``OSError`` if the file cannot be read.
    """
    import mmap
    import struct
    import zipfile

    from numpy.lib import format as fmt

    with path.open("rb") as fh:
        stamp = file_stamp(fh.fileno())
        buffer = mmap.mmap(fh.fileno(), 0, access=mmap.ACCESS_READ)
        members = zipfile.ZipFile(fh).infolist()
    arrays = {}
    for info in members:
        if info.compress_type != zipfile.ZIP_STORED or not info.filename.endswith(".npy"):
            msg = f"member {info.filename!r} is compressed or not an array"
            raise ValueError(msg)
        head = buffer[info.header_offset : info.header_offset + 30]
        name_len, extra_len = struct.unpack("<HH", head[26:30])
        start = info.header_offset + 30 + name_len + extra_len
        npy = io.BytesIO(buffer[start : start + min(info.file_size, 65536)])
        version = fmt.read_magic(npy)
        read = fmt.read_array_header_1_0 if version == (1, 0) else fmt.read_array_header_2_0
        shape, fortran, dtype = read(npy)
        arrays[info.filename[:-4]] = np.ndarray(
            shape, dtype, buffer=buffer, offset=start + npy.tell(), order="F" if fortran else "C"
        )
    return arrays, stamp
