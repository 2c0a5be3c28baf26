"""The run's Zarr store at an fsspec URL (``[outputs] zarr_url``): its name, its record in the
summary, its checks and its removal.

An object store (S3, GCS, Azure, ...) has no rename, so the run folder's swap
(:mod:`lidmelt.grids._transaction`) cannot cover a store there. Such stores are immutable
instead: each run writes a new store ``<zarr_url>/<run>-<UTC time>-<token>.zarr``
(:func:`new_store_url`) and never touches another, so the store a previous run refers to is
intact by construction. A store is finished when its consolidated metadata exists (written
last, :meth:`lidmelt.grids._zarr.RunStore.finish`). The run folder, still swapped into place,
records the store's URL and, per array, its chunks and their bytes (:func:`list_store`); products
compare the store with that record when they open the run (:func:`check_recorded`). Reading
every chunk back to hash it would download the whole store, so the record holds counts and
sizes, not checksums. A run that fails after it created its store removes it
(:func:`remove_store`); a killed run leaves a store without consolidated metadata that no run
refers to (docs/workflow.md: how to find and remove one).
"""

from __future__ import annotations

import contextlib
import re
import secrets
from collections.abc import Mapping
from datetime import UTC, datetime
from typing import Any

from lidmelt._errors import RunDirError, WorkflowError

#: ``scheme://`` at the start of a URL (RFC 3986 scheme characters).
_SCHEME = re.compile(r"^([A-Za-z][A-Za-z0-9+.-]*)://")
#: Characters kept from the run's name in a store's name (others become "_").
_UNSAFE = re.compile(r"[^A-Za-z0-9._-]")
#: The root metadata document of a Zarr format 3 store (holds the consolidated metadata).
ROOT_META = "zarr.json"


def url_protocol(text: str) -> str | None:
    """The scheme of an fsspec URL (``"s3"`` for ``s3://bucket/x``), None for a plain path."""
    found = _SCHEME.match(str(text))
    return found.group(1).lower() if found else None


def filesystem_problem(protocol: str) -> str | None:
    """None when fsspec has a file system for ``protocol`` and its package imports here, else
    what is wrong and what to install (fsspec's own advice, e.g. "Install s3fs to access S3")."""
    import fsspec

    try:
        fsspec.get_filesystem_class(protocol)
    except ImportError as exc:
        return f"its file system is not installed ({exc})"
    except ValueError:
        known = ", ".join(sorted(fsspec.available_protocols())[:12])
        return f"fsspec knows no file system {protocol!r} (known: {known}, ...)"
    return None


def check_store_url(url: str, *, where: str) -> str:
    """``url`` (without a trailing ``/``) if it is an fsspec folder URL whose file system is
    installed; a WorkflowError naming ``where`` otherwise (a plain path, an unknown scheme, a
    missing package such as s3fs)."""
    protocol = url_protocol(url)
    if protocol is None:
        msg = (
            f"{where} is {url!r}, not an fsspec URL; expected 'scheme://folder', e.g. "
            "'s3://bucket/lidmelt-runs' or 'file:///data/stores'. A store in the run folder is "
            "the default (zarr = true without zarr_url): remove zarr_url for that."
        )
        raise WorkflowError(msg)
    problem = filesystem_problem(protocol)
    if problem is not None:
        msg = (
            f"{where} is {url!r}, but {problem}; expected a URL of an installed fsspec file "
            "system. Install the package named (e.g. pip install s3fs for s3://) or fix the "
            "scheme."
        )
        raise WorkflowError(msg)
    if not url[len(protocol) + 3 :].strip("/"):
        msg = f"{where} is {url!r}: it names no folder; expected e.g. 's3://bucket/lidmelt-runs'."
        raise WorkflowError(msg)
    return url.rstrip("/")


def new_store_url(folder_url: str, run_name: str, *, now: datetime | None = None) -> str:
    """A new store's URL under ``folder_url``: ``<run>-<YYYYmmddTHHMMSSZ>-<8 hex>.zarr`` (the
    token, 32 random bits, keeps two runs of the same second apart)."""
    when = (now or datetime.now(UTC)).strftime("%Y%m%dT%H%M%SZ")
    name = _UNSAFE.sub("_", run_name) or "run"
    return f"{folder_url.rstrip('/')}/{name}-{when}-{secrets.token_hex(4)}.zarr"


def store_options(url: str) -> dict[str, Any]:
    """fsspec options of a store's file system: a local one makes its folders as it writes
    (an object store has no folders to make)."""
    return {"auto_mkdir": True} if url_protocol(url) in ("file", "local") else {}


def _filesystem(url: str):
    """The fsspec file system of ``url`` and the path in it."""
    import fsspec

    return fsspec.core.url_to_fs(url, **store_options(url))


def store_url(summary: Mapping[str, Any]) -> str | None:
    """The URL of a run's store, from its summary's ``zarr`` entry (None: none, or local)."""
    entry = summary.get("zarr")
    url = entry.get("url") if isinstance(entry, dict) else None
    return str(url) if url else None


def list_store(url: str) -> dict[str, Any]:
    """What the store at ``url`` holds now: per array the chunk objects (``chunks``) and their
    bytes (``bytes``), and the bytes of the root metadata (``metadata_bytes``, 0 if none)."""
    fs, root = _filesystem(url)
    root = root.rstrip("/")
    arrays: dict[str, dict[str, int]] = {}
    meta = 0
    for path, info in sorted(fs.find(root, detail=True).items()):
        parts = path.rstrip("/")[len(root) :].strip("/").split("/")
        size = int(info.get("size") or 0)
        if parts == [ROOT_META]:
            meta = size
        elif len(parts) >= 3 and parts[1] == "c":  # <array>/c/<i>/<j>: one chunk
            entry = arrays.setdefault(parts[0], {"chunks": 0, "bytes": 0})
            entry["chunks"] += 1
            entry["bytes"] += size
    return {"arrays": arrays, "metadata_bytes": meta}


def _refuse(url: str, what: str) -> RunDirError:
    msg = (
        f"the run's Zarr store {url!r} {what}: it was removed or changed after the run, or "
        "the run's record does not belong to it. Run 'lidmelt run' again to write a new store."
    )
    return RunDirError(msg)


def check_recorded(summary: Mapping[str, Any]) -> None:
    """Compare a run's store at a URL with what its summary records (:func:`list_store`);
    nothing for a run without one.

    Raises
    ------
    RunDirError
        If the store is missing, has no consolidated metadata, or an array's chunk count or
        bytes differ from the record.
    """
    url = store_url(summary)
    if url is None:
        return
    recorded = summary["zarr"]
    try:
        now = list_store(url)
    except (OSError, ValueError) as exc:
        raise _refuse(url, f"cannot be listed ({exc})") from exc
    if not now["metadata_bytes"]:
        raise _refuse(url, f"is missing (no {ROOT_META})")
    if now["metadata_bytes"] != recorded.get("metadata_bytes"):
        what = f"has {now['metadata_bytes']} bytes of {ROOT_META}, the run recorded "
        raise _refuse(url, what + f"{recorded.get('metadata_bytes')}")
    arrays = recorded.get("arrays") or {}
    none = {"chunks": 0, "bytes": 0}
    for name in sorted(set(arrays) | set(now["arrays"])):
        want, got = arrays.get(name) or none, now["arrays"].get(name) or none
        if want != got:
            what = (
                f"differs in array {name!r}: {got['chunks']} chunks of {got['bytes']} bytes "
                f"found, {want.get('chunks')} chunks of {want.get('bytes')} bytes recorded"
            )
            raise _refuse(url, what)


def remove_store(url: str) -> None:
    """Remove the store at ``url`` (best effort: a store that is not there, or a file system
    that fails, is left; the leftover has no consolidated metadata and no run refers to it)."""
    with contextlib.suppress(Exception):
        fs, path = _filesystem(url)
        if fs.exists(path):
            fs.rm(path, recursive=True)
