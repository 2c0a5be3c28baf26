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
