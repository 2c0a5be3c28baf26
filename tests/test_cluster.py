"""A run on a dask.distributed cluster: the same files as on local threads, or a clear failure.

Check values: the threaded run of the same workflow is the reference (the issue's requirement:
outputs bit-identical to the threaded run); a failing cluster must leave no output (the run
transaction, DEVELOPERS.md) and name the scheduler (the error rule of the project).
"""

from __future__ import annotations

import os
import socket
from pathlib import Path

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin

import runkit
from lidmelt.cluster import SCHEDULER_ENV, check_workers, input_paths, scheduler_address
from lidmelt.engine import run_basin
from lidmelt.errors import ClusterError
from lidmelt.workflow import load_workflow

distributed = pytest.importorskip("distributed")


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
