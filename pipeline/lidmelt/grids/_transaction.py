"""A run as a transaction: a lock per destination, a staging folder and one swap.

:class:`RunTransaction` takes the destination's lock (a file ``.<name>.lidmelt-lock`` beside
it, held with ``flock`` so the kernel releases it when its process dies: a lock left by a killed
run is stale and simply taken over), removes what interrupted runs left beside the destination,
creates a fresh staging folder beside it (:func:`tempfile.mkdtemp`: exclusive, unpredictable
name, mode 0700) where the run writes everything, and on :meth:`RunTransaction.commit` swaps the
staging folder into place. The swap is one ``renameat2(RENAME_EXCHANGE)`` where the file system
has it (Linux 3.15+: the destination holds the complete old run, then the complete new one);
elsewhere the old run is renamed aside and the new one into place (between the two renames the
destination is missing and readers are told a run is in progress; a run killed there has its old
run restored by the next run). The old run is removed afterwards. On any error, or an
interruption, the staging folder is removed and the destination is left as it was; what the run
wrote elsewhere and registered (:meth:`RunTransaction.on_abort`: a Zarr store at a URL) is
removed too.
"""

from __future__ import annotations

import contextlib
import ctypes
import errno
import json
import os
import shutil
import signal
import tempfile
import threading
import time
from collections.abc import Iterable
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from lidmelt._errors import RunDirError
from lidmelt._files import fsync_dir

_STAGING = ".staging-"
_OLD = ".old-"
_LOCK = ".lidmelt-lock"


def lock_path(dest: str | Path) -> Path:
    """The lock file of destination ``dest`` (beside it, hidden)."""
    dest = Path(dest)
    return dest.parent / f".{dest.name}{_LOCK}"


@contextlib.contextmanager
def signals_deferred():
    """Hold SIGINT and SIGTERM back during a step that must not be cut in half (creating a
    folder and recording it, a swap, a clean-up); a signal that came is handled when the step
    ends. (Python runs handlers in the main thread, whichever thread the signal reached, so the
    handlers themselves are swapped for a recorder; a no-op outside the main thread.)"""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    pending: list[int] = []
    held = (signal.SIGINT, signal.SIGTERM)
    old = {s: signal.signal(s, lambda signum, frame: pending.append(signum)) for s in held}
    try:
        yield
    finally:
        for s, handler in old.items():
            signal.signal(s, handler)
        if pending:
            handler = old[pending[0]]
            if callable(handler):
                handler(pending[0], None)
            elif handler == signal.SIG_DFL:
                signal.raise_signal(pending[0])


def _pid_alive(pid: Any) -> bool:
    if not isinstance(pid, int) or pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def lock_holder(dest: str | Path) -> dict[str, Any] | None:
    """The live run holding ``dest``'s lock ({``pid``, ``started_utc``}), or None."""
    try:
        fd = os.open(lock_path(dest), os.O_RDONLY | os.O_NOFOLLOW | os.O_CLOEXEC)
    except OSError:
        return None
    try:
        info = _read_info(fd)
    finally:
        os.close(fd)
    return info if _pid_alive(info.get("pid")) else None


def _read_info(fd: int) -> dict[str, Any]:
    with contextlib.suppress(OSError, ValueError):
        info = json.loads(os.pread(fd, 4096, 0).decode("utf-8"))
        if isinstance(info, dict):
            return info
    return {}


def _describe(info: dict[str, Any]) -> str:
    return f"process {info.get('pid', '?')}, started {info.get('started_utc', '?')}"


class RunLock:
    """The lock of one destination; ``wait`` makes a second run wait instead of failing.

    Raises
    ------
    RunDirError
        When another live run holds the lock (and ``wait`` is false), the lock file is a
        symlink or cannot be created, or ``dest`` is the root of the file system (no folder
        beside it; refused when the lock is made, before any file).
    """

    def __init__(self, dest: str | Path, *, wait: bool = False, poll_s: float = 0.2) -> None:
        self.dest = Path(dest)
        if self.dest.absolute().parent == self.dest.absolute():
            msg = (
                f"output folder {str(self.dest)!r} is the root of the file system: a run "
                "replaces its folder as a whole and keeps its lock and staging folder beside "
                "it. Give a new folder, e.g. -o /results/run1."
            )
            raise RunDirError(msg)
        self.path = lock_path(self.dest)
        self.wait = wait
        self.poll_s = poll_s
        self._fd: int | None = None

    def _open(self) -> int:
        try:
            return os.open(self.path, os.O_RDWR | os.O_CREAT | os.O_NOFOLLOW | os.O_CLOEXEC, 0o644)
        except OSError as exc:
            msg = (
                f"cannot create the lock file {str(self.path)!r} ({exc.strerror or exc}). "
                "Check that the output folder's parent is writable and holds no link at that name."
            )
            raise RunDirError(msg) from exc

    def _try(self) -> int | None:
        import fcntl

        fd = self._open()
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            info = _read_info(fd)
            os.close(fd)
            if not self.wait:
                msg = (
                    f"another lidmelt run ({_describe(info)}) is writing {str(self.dest)!r}. "
                    "Wait for it to finish, give another output folder, or add --wait."
                )
                raise RunDirError(msg) from None
            return None
        # the previous holder may have removed the file after this one was opened
        try:
            same = self.path.lstat().st_ino == os.fstat(fd).st_ino
        except FileNotFoundError:
            same = False
        if not same:
            os.close(fd)
            return None
        return fd

    def __enter__(self) -> RunLock:
        self.dest.parent.mkdir(parents=True, exist_ok=True)
        while True:
            with signals_deferred():
                self._fd = self._try()
                if self._fd is not None:
                    self._record()
                    return self
            time.sleep(self.poll_s)

    def _record(self) -> None:
        info = {
            "pid": os.getpid(),
            "started_utc": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
            "destination": str(self.dest),
        }
        os.ftruncate(self._fd, 0)
        os.pwrite(self._fd, json.dumps(info).encode("utf-8"), 0)

    def __exit__(self, *exc: object) -> None:
        if self._fd is None:
            return
        with signals_deferred():
            with contextlib.suppress(OSError):
                self.path.unlink()
            os.close(self._fd)
            self._fd = None


def leftovers(dest: str | Path) -> list[Path]:
    """Staging folders and old runs that interrupted runs left beside ``dest``."""
    dest = Path(dest)
    if not dest.parent.is_dir():
        return []
    stems = (f".{dest.name}{_STAGING}", f".{dest.name}{_OLD}")
    return sorted(p for p in dest.parent.iterdir() if p.name.startswith(stems))


def _remove(path: Path) -> None:
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path)
    else:
        path.unlink(missing_ok=True)


def clean_leftovers(dest: str | Path) -> list[Path]:
    """Remove what interrupted runs left beside ``dest`` (call with its lock held).

    A destination missing while an old run lies aside (a run killed between its two renames)
    gets that old run back first. Returns the paths removed.
    """
    dest = Path(dest)
    found = leftovers(dest)
    aside = [p for p in found if _OLD in p.name and p.is_dir() and not p.is_symlink()]
    if not dest.exists() and not dest.is_symlink() and aside:
        newest = max(aside, key=lambda p: p.stat().st_mtime)
        newest.rename(dest)
        found.remove(newest)
    for path in found:
        _remove(path)
    return found


def _exchange(a: Path, b: Path) -> bool:
    """Swap ``a`` and ``b`` in one step (Linux ``renameat2``); False where not supported."""
    try:
        fn = ctypes.CDLL(None, use_errno=True).renameat2
    except (AttributeError, OSError):
        return False
    at_fdcwd, rename_exchange = -100, 2
    if fn(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), rename_exchange) == 0:
        return True
    err = ctypes.get_errno()
    if err in (errno.EINVAL, errno.ENOSYS, errno.EOPNOTSUPP, errno.ENOTSUP):
        return False
    raise OSError(err, os.strerror(err), str(b))


def swap_into_place(staging: Path, dest: Path) -> None:
    """Make ``staging`` the destination in as few renames as the file system allows.

    With an exchange, ``staging`` holds the old run afterwards (the caller removes it);
    otherwise the old run is renamed aside, the new one into place, and the old one removed.
    """
    if not dest.exists():
        staging.rename(dest)
    elif _exchange(staging, dest):
        pass  # ``staging`` now holds the old run; the caller removes it
    else:
        aside = Path(tempfile.mkdtemp(dir=dest.parent, prefix=f".{dest.name}{_OLD}"))
        dest.rename(aside)  # onto the empty folder just made: no planted name is followed
        staging.rename(dest)
        fsync_dir(dest.parent)
        shutil.rmtree(aside)
    fsync_dir(dest.parent)


def _check_inputs_outside(dest: Path, inputs: Iterable[Path]) -> None:
    """Refuse a destination that holds a file the run reads: the swap would remove it (or the
    run would write its own output over it, and a re-run would read that instead)."""
    real = dest.resolve()
    for path in inputs:
        inside = Path(path).resolve()
        if inside == real or real in inside.parents:
            msg = (
                f"output folder {str(dest)!r} holds {str(path)!r}, which this run reads: a run "
                "replaces its folder as a whole, so the file would be lost or replaced by the "
                "run's own output. Give another output folder (-o OUT_DIR or run.output_dir), "
                "or move the file out of it."
            )
            raise RunDirError(msg)


def _check_destination(dest: Path, marker: str) -> None:
    """Refuse to replace a folder that is neither empty nor a run (a user's own files)."""
    if dest.exists() and not dest.is_dir():
        msg = (
            f"output folder {str(dest)!r} exists and is not a folder. Give a new folder "
            "or a previous run's folder."
        )
        raise RunDirError(msg)
    if dest.is_dir() and any(dest.iterdir()) and not (dest / marker).is_file():
        msg = (
            f"output folder {str(dest)!r} holds files but no {marker}: it is not a lidmelt run, "
            "and a run replaces its folder as a whole. Give a new or empty folder."
        )
        raise RunDirError(msg)


class RunTransaction:
    """Lock ``dest``, clean leftovers, yield a staging folder; :meth:`commit` swaps it in.

    Usage::

        with RunTransaction(dest) as tx:
            write files into tx.staging
            tx.commit()

    Leaving the block without :meth:`commit` (an error, an interruption) removes the staging
    folder; the destination keeps its old run. A destination that holds one of ``inputs`` (the
    files the run reads), the root of the file system (:class:`RunLock`), or a folder that is
    neither empty nor a run is refused before its lock file is made.
    """

    def __init__(
        self,
        dest: str | Path,
        *,
        wait: bool = False,
        marker: str = "summary.json",
        inputs: Iterable[Path] = (),
    ):
        self.dest = Path(dest).absolute()
        if self.dest.is_symlink():  # a link the user chose: the run goes where it points
            self.dest = self.dest.resolve()
        self.marker = marker
        self.inputs = list(inputs)
        self._lock = RunLock(self.dest, wait=wait)
        self.staging: Path | None = None
        self.committed = False
        self._on_abort: list[Any] = []

    def __enter__(self) -> RunTransaction:
        # refused before the lock file is made beside the destination; checked again with it
        _check_destination(self.dest, self.marker)
        _check_inputs_outside(self.dest, self.inputs)
        self._lock.__enter__()
        try:
            with signals_deferred():
                clean_leftovers(self.dest)
                _check_destination(self.dest, self.marker)
                root = tempfile.mkdtemp(dir=self.dest.parent, prefix=f".{self.dest.name}{_STAGING}")
                # the run is staged under the destination's own name (products show that name)
                self.staging = Path(root) / self.dest.name
                self.staging.mkdir()  # the mode of any new folder (the root is 0700)
        except BaseException:
            self.__exit__(None, None, None)
            raise
        return self

    def on_abort(self, undo: Any) -> None:
        """Call ``undo()`` if the run ends without :meth:`commit` (after the staging folder is
        removed): what the run wrote outside its staging folder, e.g. a Zarr store at a URL."""
        self._on_abort.append(undo)

    def commit(self) -> None:
        """Swap the staging folder into place (the lock is still held)."""
        if self.staging is None:
            msg = "RunTransaction.commit() called outside its 'with' block"
            raise RuntimeError(msg)
        with signals_deferred():
            swap_into_place(self.staging, self.dest)
            self.committed = True
        shutil.rmtree(self.staging.parent, ignore_errors=True)  # the old run, if any

    def __exit__(self, *exc: object) -> None:
        with signals_deferred():
            try:
                if self.staging is not None and self.staging.parent.exists():
                    shutil.rmtree(self.staging.parent, ignore_errors=True)
                for undo in [] if self.committed else reversed(self._on_abort):
                    undo()
            finally:
                self._lock.__exit__(*exc)
