"""A run on a dask.distributed cluster: the same files as on local threads, or a clear failure.

Check values: the threaded run of the same workflow is the reference (the issue's requirement:
outputs bit-identical to the threaded run); a failing cluster must leave no output (the run
transaction, DEVELOPERS.md) and name the scheduler (the error rule of the project).
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import distributed
import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin

import runkit
from lidmelt._cluster import SCHEDULER_ENV, check_workers, input_paths, scheduler_address
from lidmelt._engine import run_basin
from lidmelt._errors import ClusterError
from lidmelt.workflow import load_workflow


def _basin(folder: Path, *, extra: str = "") -> Path:
    """The tiny invented basin of :mod:`runkit` on a 640 x 160 age grid at 0.05 degree, so that
    chunks of 64 cells make 10 x 3 chunks and the store pass has two bands of rows."""
    wf = runkit.basin(folder, extra=extra)
    lon = -30 + 0.05 * (np.arange(160) + 0.5)
    age = np.broadcast_to(2.0 * (lon + 30.0) + 0.5, (640, 160)).astype("float32")
    age[:40, :20] = np.nan  # a corner without data
    with rasterio.open(
        folder / "age.tif", "w", driver="GTiff", height=640, width=160, count=1,
        dtype="float32", crs="EPSG:4326", transform=from_origin(-30, 10, 0.05, 0.05),
        nodata=np.nan,
    ) as dst:  # fmt: skip
        dst.write(age, 1)
        dst.units = ("Ma",)
    return wf


def _closed_port() -> int:
    """A local TCP port nothing listens on (bound, then released)."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _cluster(**config):
    """Two worker processes of one thread each (a real cluster on this machine)."""
    import dask

    with dask.config.set(config):
        return distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0"
        )


def test_scheduler_from_workflow_then_environment(tmp_path, monkeypatch):
    wf = _basin(tmp_path)
    monkeypatch.delenv(SCHEDULER_ENV, raising=False)
    assert scheduler_address(load_workflow(wf)) is None
    monkeypatch.setenv(SCHEDULER_ENV, "tcp://10.0.0.5:8786")
    assert scheduler_address(load_workflow(wf)) == "tcp://10.0.0.5:8786"
    cfg = load_workflow(wf, overrides=['compute.scheduler="tcp://10.0.0.6:8786"'])
    assert scheduler_address(cfg) == "tcp://10.0.0.6:8786"  # the workflow wins
    assert input_paths(cfg) == [tmp_path / "age.tif"]  # the only input file of the basin


def test_unreachable_scheduler_fails_clearly_and_writes_nothing(tmp_path, monkeypatch):
    wf = _basin(tmp_path / "in")
    address = f"tcp://127.0.0.1:{_closed_port()}"
    monkeypatch.setenv(SCHEDULER_ENV, address)
    monkeypatch.setenv("DASK_DISTRIBUTED__COMM__TIMEOUTS__CONNECT", "2s")
    out = tmp_path / "out"
    done = runkit.lidmelt("run", str(wf), "-o", str(out), "--quiet")
    assert done.returncode != 0
    assert "cannot reach the dask scheduler" in done.stderr
    assert address in done.stderr
    assert "Traceback" not in done.stderr
    assert not out.exists()
    assert list(tmp_path.glob(".out*")) == []  # no staging folder or lock left


def _read(run_dir: Path) -> dict[str, np.ndarray]:
    out = {}
    for path in sorted(run_dir.glob("*.tif")):
        with rasterio.open(path) as src:
            out[path.name] = src.read()
    return out


@pytest.mark.slow
def test_local_cluster_matches_threads(tmp_path):
    wf = _basin(tmp_path / "in")
    threads = run_basin(load_workflow(wf), output_dir=tmp_path / "threads", progress=False)
    with _cluster() as cluster:
        cfg = load_workflow(wf, overrides=[f'compute.scheduler="{cluster.scheduler_address}"'])
        other = run_basin(cfg, output_dir=tmp_path / "cluster", progress=False)
    a, b = _read(threads.run_dir), _read(other.run_dir)
    assert sorted(a) == sorted(b)
    assert len(a) >= 10  # outputs, the input age and anomaly, the flag
    for name in a:
        np.testing.assert_array_equal(a[name], b[name], err_msg=name)
    assert threads.summary["statistics"] == other.summary["statistics"]


@pytest.mark.slow
def test_lost_worker_fails_the_run_and_writes_nothing(tmp_path):
    wf = _basin(tmp_path / "in")

    class DieOnKernel(distributed.WorkerPlugin):  # local class: sent to the workers by value
        def transition(self, key, start, finish, **kwargs):
            if finish == "executing" and "lidmelt-kernel" in str(key):
                os._exit(1)

    with _cluster(**{"distributed.scheduler.allowed-failures": 0}) as cluster:
        with distributed.Client(cluster) as client:
            client.register_plugin(DieOnKernel())
        cfg = load_workflow(wf, overrides=[f'compute.scheduler="{cluster.scheduler_address}"'])
        with pytest.raises(ClusterError, match="failed during the run"):
            run_basin(cfg, output_dir=tmp_path / "out", progress=False)
    assert not (tmp_path / "out").exists()
    assert list(tmp_path.glob(".out*")) == []


def test_workers_that_cannot_read_an_input_are_refused(tmp_path):
    with (
        distributed.LocalCluster(
            n_workers=1, threads_per_worker=1, processes=False, dashboard_address=":0"
        ) as cluster,
        distributed.Client(cluster, set_as_default=False) as client,
    ):
        assert check_workers(client, [Path(__file__)]) == 1
        with pytest.raises(ClusterError, match="cannot read the input file"):
            check_workers(client, [tmp_path / "elsewhere" / "age.tif"])


def test_workers_read_the_table_from_its_file_where_they_can(tmp_path):
    import copy
    from dataclasses import replace

    from lidmelt._cluster import share
    from lidmelt.physics import get_table

    table = get_table("mckenzie-bickle1988")
    assert table.file is not None  # the session's cache folder holds it
    private = copy.copy(table)  # the same table in a cache folder the workers cannot read
    private.file = replace(table.file, path=str(tmp_path / "private" / "table.npz"))

    def kinds(value):  # on the worker: what each place holds
        return [type(v).__name__ for v in (value[0].table, value[1], value[2]["table"])]

    with (
        distributed.LocalCluster(
            n_workers=1, threads_per_worker=1, processes=False, dashboard_address=":0"
        ) as cluster,
        distributed.Client(cluster, set_as_default=False) as client,
    ):
        # tables in dataclass fields and tuples are named by their file; others stay
        sent = share(client, (_Holder(table), table, {"table": table}))
        assert client.submit(kinds, sent).result() == ["TableFile", "TableFile", "MeltTable"]
        sent = share(client, (_Holder(private), private, {"table": private}))
        assert client.submit(kinds, sent).result() == ["MeltTable", "MeltTable", "MeltTable"]


@pytest.mark.slow
def test_workers_map_the_table_and_load_the_kernel_on_connecting(tmp_path):
    import time

    from lidmelt._cluster import connect
    from lidmelt._run_inputs import load_model

    wf = _basin(tmp_path / "in")

    def prepared():  # on a worker: the tables it mapped, and whether the kernel ran there
        from lidmelt.physics import _table

        return [ref.path for ref in _table._FROM_FILE], "lidmelt._engine" in sys.modules

    with _cluster() as cluster:
        cfg = load_workflow(wf, overrides=[f'compute.scheduler="{cluster.scheduler_address}"'])
        _, table = load_model(cfg)  # the run's table, in the session's cache folder
        with connect(cfg) as client:
            deadline = time.monotonic() + 60
            while time.monotonic() < deadline:
                found = client.run(prepared)
                if all(paths and kernel for paths, kernel in found.values()):
                    break
                time.sleep(0.2)
    assert len(found) == 2
    assert all(paths == [table.file.path] and kernel for paths, kernel in found.values())


@dataclass(frozen=True)
class _Holder:
    table: object


# ---- a malformed address; a worker or the scheduler killed during the run -------------------
@pytest.mark.parametrize(
    ("address", "problem"),
    [
        ("tcp://127.0.0.1:notaport", "invalid literal for int() with base 10: 'notaport'"),
        ("htp://127.0.0.1:8786", "unknown address scheme 'htp'"),
        ("tcp://", "missing port number"),
        ("tcp://127.0.0.1:99999", "a port from 1 to 65535"),
    ],
)
def test_a_malformed_scheduler_address_is_refused_at_once(
    tmp_path, capsys, monkeypatch, address, problem
):
    # refused before any dask client is made (dask took it, hung on shutdown and printed a
    # TimeoutError traceback); both the environment variable and the workflow key
    from lidmelt.cli import main

    wf = runkit.basin(tmp_path / "in")
    made = []
    monkeypatch.setattr(distributed, "Client", lambda *a, **k: made.append(a))
    monkeypatch.setenv(SCHEDULER_ENV, address)
    argv = ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"]
    assert main(argv) == 1
    runkit.refused(
        capsys.readouterr().err, "run", f"LIDMELT_SCHEDULER is {address!r}, not a dask scheduler "
        "address", problem, "expected 'tcp://host:port'", "remove it to run on local threads",
    )  # fmt: skip
    monkeypatch.delenv(SCHEDULER_ENV)
    assert main([*argv, "--set", f'compute.scheduler="{address}"']) == 1
    runkit.refused(
        capsys.readouterr().err, "run", f"'compute.scheduler' in {wf} (from --set compute."
        f'scheduler="{address}") is {address!r}, not a dask scheduler address', problem,
    )  # fmt: skip
    assert made == []
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in"]


def test_a_malformed_scheduler_address_ends_the_process_at_once(tmp_path):
    # the process itself (not just the error): it ended after about a minute with dask's
    # shutdown traceback; the subprocess limit (60 s) would catch a hang
    wf = runkit.basin(tmp_path / "in")
    env = runkit.env()
    env[SCHEDULER_ENV] = "tcp://127.0.0.1:notaport"
    done = subprocess.run(
        runkit.command("run", str(wf), "-o", str(tmp_path / "out"), "--quiet"),
        env=env, capture_output=True, text=True, timeout=60, check=False,
    )  # fmt: skip
    assert done.returncode == 1
    runkit.refused(done.stderr, "run", "not a dask scheduler address")
    assert done.stderr.count("\n") == 1
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in"]


def _dask(*args: str) -> subprocess.Popen:
    """A dask scheduler or worker process of this environment (its output discarded)."""
    module = f"distributed.cli.dask_{args[0]}"
    return subprocess.Popen(
        [sys.executable, "-m", module, *args[1:]], env=runkit.env(),
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )  # fmt: skip


@pytest.mark.slow
@pytest.mark.parametrize("killed", ["worker", "scheduler"])
def test_a_killed_worker_or_scheduler_is_a_lost_cluster(tmp_path, killed):
    # a real cluster of one scheduler and one worker process (no nanny to restart it), killed
    # with SIGKILL while the run writes its GeoTIFFs: a ClusterError, not a file error
    wf = _basin(tmp_path / "in")
    address = f"tcp://127.0.0.1:{_closed_port()}"
    scheduler = _dask("scheduler", "--port", address.rsplit(":", 1)[1], "--dashboard-address", ":0")
    worker = _dask("worker", address, "--no-nanny", "--nthreads", "1")
    try:
        with distributed.Client(address, timeout=60, set_as_default=False) as client:
            client.wait_for_workers(1, timeout=60)
        env = runkit.env()
        env[SCHEDULER_ENV] = address
        run = subprocess.Popen(
            runkit.command("run", str(wf), "-o", str(tmp_path / "out"), "--quiet"), env=env,
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        )  # fmt: skip
        writing = runkit.wait_for(
            lambda: runkit.staged(tmp_path, "out", "*.tif*") or run.poll() is not None
        )
        assert writing
        assert run.poll() is None, "the run ended before it wrote a GeoTIFF"
        (worker if killed == "worker" else scheduler).kill()
        _, err = run.communicate(timeout=180)
    finally:
        for process in (worker, scheduler):
            process.kill()
            process.wait(timeout=30)
    assert run.returncode == 1, err
    runkit.refused(
        err, "run", f"the dask cluster at {address!r} failed during the run",
        "a worker or the scheduler was lost; nothing was written",
        "Look at the workers' and the scheduler's logs",
    )  # fmt: skip
    assert "raster file" not in err
    assert err.count("\n") == 1  # no dask log records either
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in"]
