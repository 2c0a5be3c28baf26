"""Expected failures outside lidmelt's own errors, as one message each (for the CLI handler).

The disk full, a folder without write permission, a damaged GeoTIFF or NetCDF, too little
memory: each names the file (or what was being done) and what to do. Anything else is a bug and
keeps its traceback.
"""

from __future__ import annotations

import contextlib
import errno
import re
import signal
from typing import Any

#: The longest error message the command line prints (characters); a longer one (a hostile
#: value echoed by a library) keeps its start and its end, where the file and the fix are.
MESSAGE_CHARS = 2000

#: What to do, per errno of an OSError.
_ADVICE = {
    errno.ENOSPC: "free some disk space (or give an output folder on another disk) and try again",
    errno.EDQUOT: "free some space within your disk quota and try again",
    errno.EACCES: "check the permissions of the file and its folder, or choose another folder",
    errno.EPERM: "check the permissions of the file and its folder, or choose another folder",
    errno.EROFS: "the file system is read-only; choose an output folder on a writable disk",
    errno.ENOENT: "check the path (does the folder exist?)",
    errno.ENOTDIR: "a part of the path is a file, not a folder; check the path",
    errno.EISDIR: "the path is a folder; give a file name",
    errno.ENAMETOOLONG: "use a shorter path",
    errno.ELOOP: "the path is (or passes through) a symbolic link loop; check the path",
    errno.EEXIST: "remove the existing file or choose another name",
    errno.EIO: "the disk reported an I/O error; check the disk and try again",
}


def _oserror(exc: OSError) -> str:
    name = exc.filename if exc.filename is not None else "a file"
    what = exc.strerror or str(exc)
    code = errno.errorcode.get(exc.errno or 0)
    advice = _ADVICE.get(exc.errno or -1, "check the file and its folder, then try again")
    return f"{what}{f' ({code})' if code else ''}: {name!s}. What to do: {advice}."


def _gdal_types() -> tuple[type[BaseException], ...]:
    import rasterio.errors
    from rasterio._err import CPLE_BaseError

    return (rasterio.errors.RasterioError, CPLE_BaseError)


def bounded(message: str) -> str:
    """``message`` of at most about :data:`MESSAGE_CHARS` characters: each run of more than
    200 characters without a space (a hostile value echoed whole) is cut in its middle, then a
    message still too long loses its middle."""
    if len(message) <= MESSAGE_CHARS:
        return message
    message = re.sub(
        r"\S{201,}", lambda m: f"{m[0][:80]}...[{len(m[0])} characters]...{m[0][-80:]}", message
    )
    if len(message) <= MESSAGE_CHARS:
        return message
    keep = MESSAGE_CHARS // 2 - 40
    left = len(message) - 2 * keep
    return f"{message[:keep]} [... {left} characters left out ...] {message[-keep:]}"


def describe_failure(exc: BaseException) -> str | None:
    """One message for an expected failure, or None for anything else (a bug)."""
    if isinstance(exc, MemoryError):
        return (
            "not enough memory. What to do: lower compute.chunk_size in the workflow, run a "
            "smaller grid (grid.resolution, grid.extent), or close other programs."
        )
    if isinstance(exc, _gdal_types()):
        return (
            f"a raster file could not be read or written ({exc}). What to do: check that the "
            "file is complete (not truncated or damaged) and the disk has space; write it again."
        )
    if isinstance(exc, OSError):
        return _oserror(exc)
    text = str(exc)
    if isinstance(exc, RuntimeError) and ("NetCDF" in text or "HDF" in text):
        return (
            f"a NetCDF/HDF5 file could not be read or written ({text}). What to do: check that "
            "the file is complete (not truncated or damaged) and the disk has space."
        )
    if isinstance(exc, RuntimeError) and "home directory" in text:
        return f"{text}. What to do: give the path without '~user', or an existing user's home."
    if isinstance(exc, ValueError) and "null byte" in text:
        return "a path holds a NUL character. What to do: give the path without it."
    return None


class Terminated(KeyboardInterrupt):
    """SIGTERM, raised in the main thread so that clean-up code runs as for Ctrl-C."""


def _on_sigterm(signum, frame) -> None:
    raise Terminated


@contextlib.contextmanager
def termination_as_interrupt() -> Any:
    """Within the block, SIGTERM raises :class:`Terminated` (a KeyboardInterrupt: the same
    clean-up as Ctrl-C); the previous handler is restored afterwards."""
    try:
        previous = signal.signal(signal.SIGTERM, _on_sigterm)
    except ValueError:  # not the main thread: leave signals alone
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)
