"""The one atomic write: a temporary file in the target folder, fsync, rename.

Every file lidmelt writes goes through :func:`atomic_path` (or :func:`atomic_paths` for files that
must appear together, such as a GeoPackage and its GeoJSON twin). The temporary file is created
exclusively (``O_EXCL``, through :func:`tempfile.mkstemp`) under an unpredictable name in the
destination folder, so a planted symlink is never followed and a rename never crosses a file
system. Only a complete, flushed file is renamed onto the final name; on any error the temporary
files are removed and the destination is left as it was.
"""

from __future__ import annotations

import contextlib
import json
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any


def fsync_file(path: str | Path) -> None:
    """Flush ``path``'s data to the disk (a no-op where the file system cannot)."""
    fd = os.open(path, os.O_RDONLY)
    try:
        with contextlib.suppress(OSError):
            os.fsync(fd)
    finally:
        os.close(fd)


def fsync_dir(folder: str | Path) -> None:
    """Flush a folder's entries (new names, renames) to the disk, where the system can."""
    with contextlib.suppress(OSError):
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


#: The process's file-creation mask, read once (reading it means setting it).
_UMASK = _umask()


def _reserve(path: Path) -> Path:
    """Create an empty, exclusive temporary file beside ``path`` that keeps its suffix.

    :func:`tempfile.mkstemp` creates it readable by its owner only; it gets the mode an
    ordinary new file would have (0666 less the umask) before anything is written.
    """
    fd, name = tempfile.mkstemp(
        dir=path.parent, prefix=f".{path.name}.", suffix=f".tmp{path.suffix}"
    )
    try:
        os.fchmod(fd, 0o666 & ~_UMASK)
    finally:
        os.close(fd)
    return Path(name)


@contextlib.contextmanager
def atomic_paths(*paths: str | Path) -> Iterator[list[Path]]:
    """Yield temporary paths beside ``paths``; rename them onto ``paths`` when the block succeeds.

    Each temporary path keeps the final suffix (writers that look at it pick the right format)
    and already exists as an empty file that the block may overwrite or delete and recreate.
    The files are flushed to the disk before they are renamed. If the block raises, every
    temporary file is removed and ``paths`` are left untouched.
    """
    finals = [Path(p) for p in paths]
    for p in finals:
        p.parent.mkdir(parents=True, exist_ok=True)
    temps: list[Path] = []
    try:
        temps.extend(_reserve(p) for p in finals)
        yield temps
        for temp in temps:
            fsync_file(temp)
        for temp, final in zip(temps, finals, strict=True):
            temp.replace(final)
        for folder in {p.parent for p in finals}:
            fsync_dir(folder)
    finally:
        for temp in temps:
            temp.unlink(missing_ok=True)


@contextlib.contextmanager
def atomic_path(path: str | Path) -> Iterator[Path]:
    """:func:`atomic_paths` for one file: yield its temporary path."""
    with atomic_paths(path) as (temp,):
        yield temp


def write_text_atomic(path: str | Path, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` atomically; return ``path``."""
    path = Path(path)
    with atomic_path(path) as temp:
        temp.write_text(text, encoding="utf-8")
    return path


def write_json_atomic(path: str | Path, doc: Any) -> Path:
    """Write ``doc`` as indented JSON (no NaN or infinity) to ``path`` atomically."""
    return write_text_atomic(path, json.dumps(doc, indent=2, allow_nan=False) + "\n")
