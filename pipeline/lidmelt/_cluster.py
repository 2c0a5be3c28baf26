"""A run on a dask.distributed cluster: where its scheduler is, the connection, its failures.

One home for the scheduler of a run, used by :func:`lidmelt._engine.run_basin` (the kernel, the
GeoTIFFs and the statistics) and by the ensemble stage. The address comes from ``[compute]
scheduler`` in the workflow, else from the environment variable :data:`SCHEDULER_ENV`; without
either the run uses local threads. :func:`connect` opens the client for the whole run, checks
that the workers can run lidmelt and read the run's input files, and turns a lost worker or
scheduler into a :class:`lidmelt._errors.ClusterError` (the run then writes nothing).

Where the work runs: the workers evaluate the chunks (reading their windows of the input files
themselves, at the same paths as the run's process); the run's process (the client) builds the
melting table once and each worker reads it once from its cache file, or gets it sent once
where a worker cannot read that file (:func:`share`); the run's process writes every GeoTIFF
itself, so the workers need no access to the output folder (the chunks of a Zarr store are
written by the workers: :mod:`lidmelt.grids._zarr`, into the staging folder or at
``[outputs] zarr_url``, whose fsspec file system each worker must import,
:func:`check_store_workers`).
"""

from __future__ import annotations

import contextlib
import dataclasses
import logging
import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from lidmelt._errors import ClusterError, LidmeltError
from lidmelt.physics._table import MeltTable

#: Environment variable naming a dask.distributed scheduler when the workflow gives none.
SCHEDULER_ENV = "LIDMELT_SCHEDULER"
#: Seconds to wait for a first worker on a scheduler that has none.
WORKER_WAIT_S = 20.0


def scheduler_address(cfg) -> str | None:
    """``cfg.compute.scheduler``, else the :data:`SCHEDULER_ENV` variable, else None; checked
    by :func:`check_address`."""
    given = getattr(cfg.compute, "scheduler", None)
    address = (given or os.environ.get(SCHEDULER_ENV, "")).strip()
    if not address:
        return None
    return check_address(address, where="compute.scheduler" if given else SCHEDULER_ENV)


def check_address(address: str, *, where: str) -> str:
    """``address`` if dask.distributed can connect to it (``scheme://host:port``, a known
    scheme, a port 1-65535), else a ClusterError naming ``where`` (the key or variable).

    Checked before any client is made: dask takes a malformed address only to fail in its
    connection loop, then hangs on shutdown.
    """
    from distributed.comm.addressing import parse_address, parse_host_port
    from distributed.comm.registry import get_backend

    shown = address if len(address) <= 80 else f"{address[:77]}..."
    try:
        scheme, location = parse_address(address)
        get_backend(scheme)
        if scheme != "inproc":
            host, port = parse_host_port(location)
            if not host or not 0 < int(port) < 65536:
                msg = f"expected a host and a port from 1 to 65535, found {location!r}"
                raise ValueError(msg)
    except (ValueError, TypeError) as exc:
        msg = (
            f"{where} is {shown!r}, not a dask scheduler address ({exc}); expected "
            "'tcp://host:port', e.g. 'tcp://127.0.0.1:8786' (dask scheduler prints it when it "
            "starts). Fix the address, or remove it to run on local threads."
        )
        raise ClusterError(msg) from None
    return address


def input_paths(cfg) -> list[Path]:
    """Every input file of ``cfg``: the grids of ``[inputs]`` and a lid's bathymetry grid."""
    paths = [spec.path for spec in cfg.inputs.given().values() if spec.path is not None]
    lid = cfg.inputs.lid_thickness
    if lid is not None and getattr(lid, "bathymetry", None) is not None:
        paths.append(lid.bathymetry)
    return [Path(p) for p in paths]


def worker_report(paths: list[str]) -> dict[str, Any]:
    """Run on each worker by :func:`check_workers`: its lidmelt version and unreadable paths."""
    import lidmelt

    missing = [p for p in paths if not os.access(p, os.R_OK)]
    return {"version": lidmelt.__version__, "missing": missing}


def check_workers(client, paths: list[Path]) -> int:
    """The number of workers; ClusterError unless every one runs this lidmelt and reads
    every path in ``paths`` (the workers read their windows of the input files)."""
    import lidmelt

    try:
        reports = client.run(worker_report, [str(p) for p in paths])
    except Exception as exc:  # a worker without lidmelt fails to unpickle worker_report
        msg = (
            f"the workers of the dask scheduler could not run lidmelt ({type(exc).__name__}: "
            f"{exc}); expected lidmelt {lidmelt.__version__} installed in every worker's "
            "environment. Install it there (the same version and dependencies as here)."
        )
        raise ClusterError(msg) from exc
    for worker, report in sorted(reports.items()):
        if report["version"] != lidmelt.__version__:
            msg = (
                f"worker {worker} runs lidmelt {report['version']}, this run "
                f"{lidmelt.__version__}; expected the same version everywhere. Install "
                f"lidmelt {lidmelt.__version__} in the workers' environment."
            )
            raise ClusterError(msg)
        if report["missing"]:
            msg = (
                f"worker {worker} cannot read the input file(s) {report['missing']}; the "
                "workers read the inputs at the same paths as this run. Mount the shared file "
                "system at the same path on every worker (or copy the inputs there)."
            )
            raise ClusterError(msg)
    return len(reports)


def prepare_workers(client, cfg) -> None:
    """Start, on every worker and without waiting, what it needs before its first chunk:
    importing the kernel's modules (1.5 s), mapping the run's melting table from its cache file
    when this process can name it, and loading the compiled kernel and the table's lookups by
    evaluating a tiny chunk (0.4 s); meanwhile this process loads its own table and inputs
    (benchmarks/bench_zarr.py: the first chunk of a worker took 1.2-2.4 s before, 0.06 s
    after). Best effort: a worker that cannot do it does it with its first chunk, where any
    failure is reported.
    """
    from lidmelt.physics import get_model
    from lidmelt.physics._table import TableLayout, table_path
    from lidmelt.physics._tablecache import cache_dir

    path = None
    if cfg.compute.method == "table":
        model = get_model(cfg.model.name, **dict(cfg.model.parameters))
        found = table_path(model, TableLayout(), cache_dir())
        path = str(found) if found.is_file() else None
    client.run(_start_preparing, path, cfg, wait=False)


async def _start_preparing(path: str | None, cfg) -> None:
    """Run on a worker by :func:`prepare_workers` (dask.distributed runs a coroutine without
    waiting for it): :func:`_prepare_worker` on a thread of its own, so the worker keeps
    answering its scheduler meanwhile (a chunk that needs the table waits for it:
    :func:`lidmelt.physics._table.read_table_file`)."""
    import threading

    threading.Thread(target=_prepare_worker, args=(path, cfg), daemon=True).start()


def _prepare_worker(path: str | None, cfg) -> None:
    """Import the kernel, map the table (:func:`lidmelt.physics._table.read_table_file`) and
    evaluate a 2 x 2 chunk of ``cfg``'s settings on invented constant inputs (float32 age
    and anomaly grids, as read from GeoTIFFs; the workflow's water if constant, whose slice
    of the table is kept), which loads the compiled kernel (:func:`prepare_workers`)."""
    import numpy as np

    from lidmelt._engine import ChunkInputs, evaluate_chunk, kernel_settings
    from lidmelt._run_inputs import RunInputs, lid_cooling_model
    from lidmelt.physics import get_model
    from lidmelt.physics._table import TableLayout, read_table_file

    model = get_model(cfg.model.name, **dict(cfg.model.parameters))
    table = None if path is None else read_table_file(path, model, TableLayout())
    if table is None and cfg.compute.method == "table":
        return
    inputs = RunInputs(values={"plate_age_ma": 0.0}, provenance={})
    cooling = lid_cooling_model(cfg, inputs=inputs)
    settings = kernel_settings(cfg, inputs=inputs, model=model, table=table, cooling=cooling)
    age, anomaly = np.full((2, 2), 50.0, np.float32), np.full((2, 2), 100.0, np.float32)
    water = cfg.inputs.water.constant
    water = 0.0 if water is None else float(water)
    evaluate_chunk(ChunkInputs(age, np.nan, anomaly, water), settings=settings)


def store_report(protocol: str) -> str | None:
    """Run on each worker by :func:`check_store_workers`: None when it can import the fsspec
    file system of ``protocol``, else what is wrong."""
    from lidmelt.grids._objstore import filesystem_problem

    return filesystem_problem(protocol)


def check_store_workers(client, url: str | None) -> None:
    """ClusterError unless every worker can write the run's Zarr store at ``url`` (``[outputs]
    zarr_url``: the workers write its chunks): each must import the URL's fsspec file system;
    a ``memory://`` store lives in one process and is refused. Nothing without ``url``."""
    from lidmelt.grids._objstore import url_protocol

    protocol = url_protocol(url or "")
    if protocol is None:
        return
    if protocol == "memory":
        msg = (
            f"outputs.zarr_url is {url!r}: a memory:// file system lives in one process, and on "
            "a dask cluster the workers write the store's chunks. Give a URL every worker "
            "reaches (s3://..., a shared file:// folder), or run on local threads."
        )
        raise ClusterError(msg)
    for worker, problem in sorted(client.run(store_report, protocol).items()):
        if problem is not None:
            msg = (
                f"worker {worker} cannot write the Zarr store at {url!r} (outputs.zarr_url): "
                f"{problem}; the workers write the store's chunks themselves. Install the "
                "file system's package in every worker's environment, and give the workers the "
                "store's credentials (docs/cluster.md)."
            )
            raise ClusterError(msg)


def _open_client(address: str):
    """A client of the scheduler at ``address`` with at least one worker; ClusterError if not."""
    from distributed import Client

    where = f"compute.scheduler or {SCHEDULER_ENV}"
    try:
        client = Client(address, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        msg = (
            f"cannot reach the dask scheduler {address!r} ({where}): {exc}; expected a running "
            "scheduler at 'tcp://host:port'. Start it (dask scheduler), check the address and "
            f"the network, or remove the setting to run on local threads."
        )
        raise ClusterError(msg) from exc
    try:
        client.wait_for_workers(1, timeout=WORKER_WAIT_S)
    except (OSError, TimeoutError) as exc:
        client.close()
        msg = (
            f"the dask scheduler {address!r} ({where}) has no worker after {WORKER_WAIT_S:g} "
            "s; expected at least one. Start workers (dask worker " + address + ")."
        )
        raise ClusterError(msg) from exc
    return client


def _lost(exc: BaseException, client) -> bool:
    """True for a failure of the cluster itself (a lost worker, scheduler or connection): a
    failure of the kind, or any failure once the client has lost its scheduler."""
    from distributed import KilledWorker
    from distributed.client import FutureCancelledError
    from distributed.comm import CommClosedError

    if isinstance(exc, KilledWorker | FutureCancelledError | CommClosedError):
        return True
    return not isinstance(exc, LidmeltError) and client.status != "running"


def _short(exc: BaseException) -> str:
    """The first line of ``exc``'s message, at most 200 characters."""
    text = (str(exc).strip().splitlines() or [""])[0]
    return text if len(text) <= 200 else f"{text[:197]}..."


@contextlib.contextmanager
def _quiet_dask_logs() -> Iterator[None]:
    """No log records of dask.distributed in this process within the block: a lost worker or
    scheduler is reported once, as lidmelt's ClusterError, not also as dask's tracebacks of its
    reconnection attempts (the scheduler's and the workers' own logs keep theirs)."""
    known = list(logging.root.manager.loggerDict)
    names = ["distributed", *(n for n in known if n.startswith("distributed."))]
    loggers = [logging.getLogger(n) for n in names]
    levels = [lg.level for lg in loggers]
    for lg in loggers:
        lg.setLevel(logging.CRITICAL + 1)
    try:
        yield
    finally:
        for lg, level in zip(loggers, levels, strict=True):
            lg.setLevel(level)


@contextlib.contextmanager
def connect(cfg, *, paths: list[Path] | None = None) -> Iterator[Any]:
    """The dask.distributed client of ``cfg``'s scheduler for the block, or None (threads).

    The workers are checked (:func:`check_workers`) against ``paths`` (default: every input
    file of ``cfg``). Inside the block, a lost worker, scheduler or connection becomes a
    ClusterError; errors raised by lidmelt on a worker (an input out of range) pass as they are.
    """
    address = scheduler_address(cfg)
    if address is None:
        yield None
        return
    with _quiet_dask_logs():
        client = _open_client(address)
        try:
            check_workers(client, input_paths(cfg) if paths is None else paths)
            check_store_workers(client, getattr(cfg.outputs, "zarr_url", None))
            prepare_workers(client, cfg)
            yield client
        except Exception as exc:
            if not _lost(exc, client):
                raise
            msg = (
                f"the dask cluster at {address!r} failed during the run ({type(exc).__name__}: "
                f"{_short(exc)}): a worker or the scheduler was lost; nothing was written. Look "
                "at the workers' and the scheduler's logs (a worker killed for memory: lower "
                "compute.chunk_size or give each worker more memory), then run again."
            )
            raise ClusterError(msg) from exc
        finally:
            client.close(timeout=5)


def share(client, value: Any) -> Any:
    """``value`` on every worker of ``client`` (scattered to each once: one future), with each
    melting table it holds (in a dataclass field, or a tuple of them) replaced by its
    :class:`lidmelt.physics._table.TableFile` where every worker can read the table's cache
    file, which each worker then maps into memory once (:meth:`TableFile.load`).

    Sending a 220 MB table to each of two workers took 2.4 s of a 21 s global run
    (benchmarks/bench_zarr.py); mapping the file takes a worker milliseconds.
    A worker that cannot read the file (another machine, a private cache folder) gets the table.
    """
    readable: dict[str, bool] = {}

    def by_file(table: MeltTable) -> Any:
        ref = table.file
        if ref is None:
            return table
        if ref.path not in readable:
            found = client.run(os.access, ref.path, os.R_OK)
            readable[ref.path] = bool(found) and all(found.values())
        return ref if readable[ref.path] else table

    return client.scatter(_swap_tables(value, by_file), broadcast=True, hash=False)


def _swap_tables(value: Any, swap) -> Any:
    """``value`` with ``swap(table)`` in place of each MeltTable in its dataclass fields and
    tuples (nested); the same object where nothing changes."""
    if isinstance(value, MeltTable):
        return swap(value)
    if isinstance(value, tuple) and not hasattr(value, "_fields"):
        items = tuple(_swap_tables(v, swap) for v in value)
        return value if all(a is b for a, b in zip(items, value, strict=True)) else items
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        changed = {}
        for f in dataclasses.fields(value):
            old = getattr(value, f.name)
            new = _swap_tables(old, swap)
            if new is not old:
                changed[f.name] = new
        return dataclasses.replace(value, **changed) if changed else value
    return value
