"""Where numba keeps lidmelt's compiled code: numba's own places, else a private temporary folder.

numba caches a compiled function beside its module (``__pycache__``), in ``$NUMBA_CACHE_DIR``,
or in the user's cache folder under HOME; where none of these is writable (a read-only
installation and a read-only HOME) it refuses ``cache=True`` with "no locator available".
:func:`njit` then keeps the code in a folder of the system's temporary folder that only this
user can write (``lidmelt-numba-<uid>``), and where there is none it compiles in memory, once
per process. Either way :func:`cache_note` gives one line saying so, which the command line
prints.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import Any

try:
    import numba
except ImportError:  # pragma: no cover - lidmelt.physics._kernel uses numpy paths without it
    numba = None

#: The note of this process (set once, by the first function that needed a fallback).
_NOTE: list[str] = []


def _private_temp_folder() -> str | None:
    """``<tmp>/lidmelt-numba-<uid>``, made with mode 0700 if missing, if it is a real folder
    owned by this user that no one else can write and this process can; else None (numba
    loads pickled code from its cache, so a folder another user can write is never used)."""
    uid = os.getuid() if hasattr(os, "getuid") else 0
    path = Path(tempfile.gettempdir()) / f"lidmelt-numba-{uid}"
    try:
        path.mkdir(mode=0o700)
    except FileExistsError:
        pass
    except OSError:
        return None
    try:
        info = path.lstat()
        if path.is_symlink() or not path.is_dir():
            return None
        if info.st_uid != uid or info.st_mode & 0o022:
            return None
        tempfile.TemporaryFile(dir=path).close()
    except OSError:
        return None
    return str(path)


def _note(text: str) -> None:
    if not _NOTE:
        _NOTE.append(text)


def njit(func: Callable, **options: Any) -> Any:
    """``numba.njit(cache=True, **options)(func)``, cached in a private temporary folder where
    numba finds no writable place, or compiled in memory where there is none either."""
    try:
        return numba.njit(cache=True, **options)(func)
    except RuntimeError:  # no writable cache location (read-only installation and HOME)
        pass
    folder = _private_temp_folder()
    if folder is not None:
        before = numba.config.CACHE_DIR
        numba.config.CACHE_DIR = folder  # numba picks the folder when the function is made
        try:
            compiled = numba.njit(cache=True, **options)(func)
        except RuntimeError:
            compiled = None
        finally:
            numba.config.CACHE_DIR = before
        if compiled is not None:
            _note(
                f"compiled code is cached in {folder}: the installation's folder and HOME are "
                "not writable (set NUMBA_CACHE_DIR to keep it elsewhere)"
            )
            return compiled
    _note(
        "compiled code is not cached: neither the installation's folder, HOME nor a private "
        "temporary folder is writable, so each run compiles it again (5-20 s); set "
        "NUMBA_CACHE_DIR to a writable folder"
    )
    return numba.njit(**options)(func)


def cache_note() -> str | None:
    """One line on where compiled code went when numba's own places were not writable, or
    None when they were."""
    return _NOTE[0] if _NOTE else None


def compiled_function(func: Callable, **options: Any) -> Any:
    """``func`` compiled without the GIL (:func:`njit`, numpy's error model: a division by zero
    gives inf or NaN as in numpy), or ``func`` itself where numba is missing."""
    if numba is None:  # pragma: no cover - numba is a dependency
        return func
    return njit(func, nogil=True, error_model="numpy", **options)
