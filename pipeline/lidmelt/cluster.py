"""A run on a dask.distributed cluster: where its scheduler is, the connection, its failures.

One home for the scheduler of a run, used by :func:`lidmelt.engine.run_basin` (the kernel, the
GeoTIFFs and the statistics) and by the ensemble stage. The address comes from ``[compute]
scheduler`` in the workflow, else from the environment variable :data:`SCHEDULER_ENV`; without
either the run uses local threads. :func:`connect` opens the client for the whole run, checks
that the workers can run lidmelt and read the run's input files, and turns a lost worker or
scheduler into a :class:`lidmelt.errors.ClusterError` (the run then writes nothing).

Where the work runs: the workers evaluate the chunks (reading their windows of the input files
themselves, at the same paths as the run's process); the run's process (the client) builds the
melting table once and sends it to each worker once, and writes every output file itself, so
the workers need no access to the output folder.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from lidmelt.errors import ClusterError

__all__ = [
    "SCHEDULER_ENV",
    "check_workers",
    "connect",
    "input_paths",
    "scheduler_address",
    "worker_report",
]

#: Environment variable naming a dask.distributed scheduler when the workflow gives none.
SCHEDULER_ENV = "LIDMELT_SCHEDULER"
#: Seconds to wait for a first worker on a scheduler that has none.
WORKER_WAIT_S = 20.0


def scheduler_address(cfg) -> str | None:
    """``cfg.compute.scheduler``, else the :data:`SCHEDULER_ENV` variable, else None."""
    address = getattr(cfg.compute, "scheduler", None) or os.environ.get(SCHEDULER_ENV, "")
    return address.strip() or None


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


def _lost(exc: BaseException) -> bool:
    """True for a failure of the cluster itself (a lost worker, scheduler or connection)."""
    from distributed import KilledWorker
    from distributed.client import FutureCancelledError
    from distributed.comm import CommClosedError

    return isinstance(exc, KilledWorker | FutureCancelledError | CommClosedError)


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
    client = _open_client(address)
    try:
        check_workers(client, input_paths(cfg) if paths is None else paths)
        yield client
    except Exception as exc:
        if not _lost(exc):
            raise
        msg = (
            f"the dask cluster at {address!r} failed during the run ({type(exc).__name__}: "
            f"{exc}); nothing was written. Look at the workers' logs (a worker killed for "
            "memory: lower compute.chunk_size or give each worker more memory), then run again."
        )
        raise ClusterError(msg) from exc
    finally:
        client.close()
