"""A run's Zarr store at an fsspec URL (``[outputs] zarr_url``): a new store per run, the same
bits as the GeoTIFFs, recorded in the run folder, checked by the products, removed when the run
fails, written by the workers of a cluster.

Check values: the run's own GeoTIFFs, read with rasterio (an independent reader of the other
format), are the reference for every array (as in tests/test_zarr.py); the store's name pattern
and the workflow messages are docs/workflow.md's; the exit code of SIGTERM (143) is the CLI's
documented one; the threaded run of the same workflow is the reference of the cluster run (the
issue: identical values); "before" snapshots (every object's bytes) are the reference of "left
unchanged".
"""

from __future__ import annotations

import csv
import hashlib
import json
import re
import signal
import uuid
from pathlib import Path

import fsspec
import numpy as np
import pytest
import rasterio
import xarray as xr
from fsspec.registry import known_implementations

import runkit
from lidmelt import _engine
from lidmelt._engine import run_basin
from lidmelt._errors import ClusterError, RunDirError, WorkflowError
from lidmelt.cli import main
from lidmelt.grids._manifest import check_written
from lidmelt.grids._rundir import ZARR_NAME, open_run
from lidmelt.workflow import load_workflow

#: A store's name under zarr_url (docs/workflow.md): <run>-<UTC time>-<8 hex>.zarr.
STORE_NAME = re.compile(r"^run-\d{8}T\d{6}Z-[0-9a-f]{8}\.zarr$")
#: A run without GeoTIFFs (the basin writes a NetCDF, which needs them).
STORE_ONLY = ["outputs.geotiff=false", "run.netcdf=false"]


def _workflow(folder: Path, url: str) -> Path:
    """The cluster tests' basin (640 x 160 cells, chunks of 64: 10 x 3 chunks) writing its
    store at ``url``."""
    from test_cluster import _basin

    return _basin(folder, extra=f'[outputs]\nzarr = true\nzarr_url = "{url}"\n')


def _run(wf: Path, dest: Path, *overrides: str):
    return run_basin(load_workflow(wf, overrides=list(overrides)), output_dir=dest, progress=False)


def _objects(url: str) -> dict[str, str]:
    """Every object under ``url`` (relative name -> SHA-256 of its bytes)."""
    fs, root = fsspec.core.url_to_fs(url)
    root = root.rstrip("/")
    found = fs.find(root) if fs.exists(root) else []
    return {p[len(root) + 1 :]: hashlib.sha256(fs.cat_file(p)).hexdigest() for p in found}


def _stores(url: str) -> list[str]:
    """The store names directly under ``url``."""
    return sorted({name.split("/")[0] for name in _objects(url)})


def _raw(path: Path) -> np.ndarray:
    with rasterio.open(path) as src:
        return src.read(1)


def _check_bits(run_dir: Path, store: str) -> int:
    """Every GeoTIFF of ``run_dir`` equals its array of the store at ``store``, bit for bit;
    returns the number compared."""
    tifs = sorted(run_dir.glob("*.tif"))
    ds = xr.open_zarr(store, mask_and_scale=False)
    assert sorted(ds.data_vars) == sorted(p.stem.removeprefix("input_") for p in tifs)
    for tif in tifs:
        stored, reference = ds[tif.stem.removeprefix("input_")].values, _raw(tif)
        assert stored.dtype == reference.dtype, tif.name
        assert stored.tobytes() == reference.tobytes(), tif.name  # NaN included
    return len(tifs)


@pytest.fixture(scope="module")
def file_run(tmp_path_factory):
    """A threaded run writing GeoTIFFs and its store at a file:// URL."""
    folder = tmp_path_factory.mktemp("zarr_url")
    url = (folder / "stores").as_uri()
    wf = _workflow(folder / "in", url)
    return wf, url, _run(wf, folder / "run")


@pytest.mark.parametrize("scheme", ["file", "memory"])
def test_a_store_at_a_url_equals_every_geotiff_bit_for_bit(file_run, scheme, tmp_path):
    wf, url, result = file_run
    if scheme == "memory":  # the same workflow, its store in this process's memory
        url = f"memory://lidmelt-test-{uuid.uuid4().hex}"
        result = _run(wf, tmp_path / "run", f'outputs.zarr_url="{url}"')
    run_dir, entry = result.run_dir, result.summary["zarr"]
    (name,) = _stores(url)  # one new store under the folder, named for the run
    assert STORE_NAME.match(name), name
    assert entry["url"] == f"{url}/{name}"
    assert _check_bits(run_dir, entry["url"]) >= 13  # ten outputs, two inputs, the flag
    assert not (run_dir / ZARR_NAME).exists()  # the run folder holds no store
    manifest = open_run(run_dir).summary["manifest"]["files"]
    assert manifest
    assert not [f for f in manifest if f.startswith(ZARR_NAME)]
    sealed = open_run(run_dir).summary["zarr"]
    assert sealed["url"] == entry["url"]
    # per array the chunks (10 x 3 of 64 cells) and their bytes, as the store holds them
    fs, root = fsspec.core.url_to_fs(entry["url"])
    for var in sealed["variables"]:
        chunks = fs.find(f"{root}/{var}/c")
        assert sealed["arrays"][var]["chunks"] == len(chunks) == 10 * 3, var
        assert sealed["arrays"][var]["bytes"] == sum(fs.size(p) for p in chunks), var
    item = json.loads((run_dir / "stac_item.json").read_text())
    assert item["assets"][ZARR_NAME]["href"] == entry["url"]
    assert item["assets"][ZARR_NAME]["type"] == "application/vnd+zarr"


def test_products_read_a_url_run_without_geotiffs(file_run, tmp_path):
    wf, _, both = file_run
    url = (tmp_path / "stores").as_uri()
    only = _run(wf, tmp_path / "only", f'outputs.zarr_url="{url}"', *STORE_ONLY).run_dir
    assert sorted(p.name for p in only.iterdir()) == ["stac_item.json", "summary.json"]
    a, b = open_run(both.run_dir), open_run(only)
    for name in a.outputs + a.inputs:
        xr.testing.assert_identical(a.open(name), b.open(name))
    stations = tmp_path / "stations.csv"
    stations.write_text("name,lon,lat\nA,-25.0,7.0\nB,-27.3,8.1\nC,-29.0,-15.0\n")
    rows = {}
    for run in (both.run_dir, only):
        out = tmp_path / f"{run.name}.csv"
        assert main(["sample", str(run), str(stations), "-o", str(out)]) == 0
        rows[run.name] = list(csv.reader(out.open()))
    assert rows["run"] == rows["only"]
    assert len(rows["only"]) == 4
    maps = tmp_path / "maps"
    assert main(["map", str(only), "--variable", "melt_thickness_km", "-o", str(maps)]) == 0
    assert (maps / "melt_thickness_km.png").stat().st_size > 10_000
    assert main(["report", str(only), "-o", str(tmp_path / "report.html")]) == 0
    assert "melt_thickness_km" in (tmp_path / "report.html").read_text()


def test_two_runs_make_two_stores_and_leave_the_first_unchanged(file_run, tmp_path):
    wf = file_run[0]
    url = f"memory://lidmelt-test-{uuid.uuid4().hex}"
    first = _run(wf, tmp_path / "run", f'outputs.zarr_url="{url}"', *STORE_ONLY)
    before = _objects(url)
    second = _run(wf, tmp_path / "run", f'outputs.zarr_url="{url}"', *STORE_ONLY)
    assert first.summary["zarr"]["url"] != second.summary["zarr"]["url"]
    assert len(_stores(url)) == 2
    after = _objects(url)
    assert {k: v for k, v in after.items() if k in before} == before  # every byte of the first
    assert open_run(tmp_path / "run").store() == second.summary["zarr"]["url"]


@pytest.mark.parametrize("scheme", ["file", "memory"])
def test_a_run_failing_during_its_bands_removes_its_store(file_run, scheme, tmp_path, monkeypatch):
    wf = file_run[0]
    url = f"memory://lidmelt-test-{uuid.uuid4().hex}"
    url = (tmp_path / "stores").as_uri() if scheme == "file" else url
    dest = tmp_path / "run"
    _run(wf, dest, f'outputs.zarr_url="{url}"', *STORE_ONLY)
    old_store, old_run = _objects(url), runkit.snapshot(dest)
    real, calls = _engine.band_parts, []

    def failing(*args, **kwargs):  # the second band fails, after the first band's chunks
        calls.append(1)
        if len(calls) == 2:
            raise OSError("injected: the disk went away")
        return real(*args, **kwargs)

    monkeypatch.setattr(_engine, "band_parts", failing)
    with pytest.raises(OSError, match="injected"):
        _run(wf, dest, f'outputs.zarr_url="{url}"', *STORE_ONLY)
    assert len(calls) == 2
    assert _objects(url) == old_store  # the new store is gone, the old one untouched
    assert runkit.snapshot(dest) == old_run
    open_run(dest)  # the previous run is intact and verified


def _chunks_of_new_store(folder: Path, old: set[str]) -> list[Path]:
    return [p for p in folder.glob("*.zarr/*/c") if p.parents[1].name not in old]


@pytest.mark.slow
@pytest.mark.parametrize("sig_name", ["SIGTERM", "SIGKILL"])
def test_a_killed_run_leaves_the_old_store_intact(file_run, tmp_path, sig_name):
    wf = file_run[0]
    folder = tmp_path / "stores"
    dest = tmp_path / "run"
    at = ["--set", f'outputs.zarr_url="{folder.as_uri()}"', "--set", "outputs.geotiff=false"]
    at += ["--set", "run.netcdf=false", "--quiet"]
    done = runkit.lidmelt("run", str(wf), "-o", str(dest), *at)
    assert done.returncode == 0, done.stderr
    assert f"wrote {open_run(dest).store()} (the run's Zarr store)" in done.stdout
    old_store, old_run = _objects(folder.as_uri()), runkit.snapshot(dest)
    old = set(_stores(folder.as_uri()))
    sig, code = {"SIGTERM": (signal.SIGTERM, 143), "SIGKILL": (signal.SIGKILL, -9)}[sig_name]
    for _ in range(4):  # until the signal lands while the new store is being written
        proc = runkit.start("run", str(wf), "-o", str(dest), *at)
        seen = runkit.wait_for(
            lambda p=proc: bool(_chunks_of_new_store(folder, old)) or p.poll() is not None
        )
        if seen and proc.poll() is None:
            proc.send_signal(sig)
        _, err = proc.communicate(timeout=120)
        if proc.returncode == code:
            break
        assert proc.returncode == 0, err  # it ended first: try again with a fresh store
        new = set(_stores(folder.as_uri())) - old
        for name in new:
            fsspec.filesystem("file").rm(str(folder / name), recursive=True)
        old_run = runkit.snapshot(dest)
    else:
        pytest.fail("no run was killed while its store was written")
    assert "Traceback" not in err
    assert runkit.snapshot(dest) == old_run
    open_run(dest)
    now = _objects(folder.as_uri())
    assert {k: v for k, v in now.items() if k.split("/")[0] in old} == old_store
    left = set(_stores(folder.as_uri())) - old
    if sig_name == "SIGTERM":
        assert err.strip().splitlines()[-1].startswith("lidmelt run: terminated (SIGTERM)")
        assert left == set()  # the run removed its unfinished store
    else:  # no clean-up possible: an unfinished store nobody refers to (docs/workflow.md)
        assert len(left) <= 1
        for name in left:
            root = json.loads((folder / name / "zarr.json").read_text())
            assert "consolidated_metadata" not in root or not root["consolidated_metadata"]


def open_run_url(run_dir: Path) -> str:
    """The store URL a run folder's summary records (read without opening the run)."""
    return json.loads((run_dir / "summary.json").read_text())["zarr"]["url"]


def test_a_changed_or_missing_remote_store_is_refused(file_run, tmp_path, capsys):
    wf = file_run[0]
    url = (tmp_path / "stores").as_uri()
    dest = _run(wf, tmp_path / "run", f'outputs.zarr_url="{url}"', *STORE_ONLY).run_dir
    store = Path(fsspec.core.url_to_fs(open_run(dest).store())[1])
    chunk = store / "onset_depth_km" / "c" / "1" / "2"
    data = chunk.read_bytes()
    chunk.write_bytes(data + b"\x00")  # one byte more
    with pytest.raises(RunDirError, match=r"differs in array 'onset_depth_km'.* bytes"):
        open_run(dest)
    chunk.unlink()  # a chunk missing
    with pytest.raises(RunDirError, match=r"'onset_depth_km': 29 chunks .* 30 chunks"):
        open_run(dest)
    with pytest.raises(RunDirError, match=r"'onset_depth_km' .* has 29 of its 30 chunks"):
        check_written(dest, flag_file="validity_flag.tif", store_url=open_run_url(dest))
    chunk.write_bytes(data)
    open_run(dest)  # as the run wrote it: accepted again
    fsspec.filesystem("file").rm(str(store), recursive=True)
    stations = tmp_path / "stations.csv"
    stations.write_text("name,lon,lat\nA,-25.0,7.0\n")
    assert main(["sample", str(dest), str(stations), "-o", str(tmp_path / "s.csv")]) == 1
    err = capsys.readouterr().err
    assert "is missing (no zarr.json)" in err
    assert "lidmelt run" in err
    assert not (tmp_path / "s.csv").exists()


def test_bad_zarr_url_keys_are_refused(file_run, monkeypatch):
    wf = file_run[0]
    with pytest.raises(WorkflowError, match=r"outputs\.zarr_url.*outputs\.zarr is not true"):
        load_workflow(wf, overrides=["outputs.zarr=false"])
    with pytest.raises(WorkflowError, match=r"fsspec knows no file system 'nosuch'"):
        load_workflow(wf, overrides=['outputs.zarr_url="nosuch://bucket/runs"'])
    with pytest.raises(WorkflowError, match=r"not an fsspec URL.*remove zarr_url"):
        load_workflow(wf, overrides=['outputs.zarr_url="/data/stores"'])
    with pytest.raises(WorkflowError, match="names no folder"):
        load_workflow(wf, overrides=['outputs.zarr_url="memory://"'])
    # a scheme fsspec knows whose package is not installed (as s3:// without s3fs)
    missing = {"class": "lidmelt_absent_fs.FileSystem", "err": "Install lidmelt-absent-fs"}
    monkeypatch.setitem(known_implementations, "absentfs", missing)
    with pytest.raises(WorkflowError, match=r"not installed \(Install lidmelt-absent-fs\)"):
        load_workflow(wf, overrides=['outputs.zarr_url="absentfs://bucket/runs"'])
    cfg = load_workflow(wf, overrides=['outputs.zarr_url="memory://bucket/runs/"'])
    assert cfg.outputs.zarr_url == "memory://bucket/runs"


@pytest.mark.slow
def test_workers_write_a_store_at_a_file_url(file_run, tmp_path):
    import distributed

    from lidmelt._cluster import check_store_workers
    from test_cluster import _cluster

    wf = file_run[0]
    url = (tmp_path / "stores").as_uri()
    threads = _run(wf, tmp_path / "threads", f'outputs.zarr_url="{url}"', *STORE_ONLY)
    with _cluster() as cluster, distributed.Client(cluster) as client:
        at = f'compute.scheduler="{cluster.scheduler_address}"'
        other = _run(wf, tmp_path / "cluster", f'outputs.zarr_url="{url}"', *STORE_ONLY, at)
        # a store the workers cannot write is refused before any chunk
        with pytest.raises(ClusterError, match="memory:// file system lives in one process"):
            _run(wf, tmp_path / "never", 'outputs.zarr_url="memory://x"', *STORE_ONLY, at)
        memory = fsspec.implementations.memory.MemoryFileSystem
        fsspec.register_implementation("lidmeltonly", memory, clobber=True)
        with pytest.raises(
            ClusterError,
            match=r"worker .* cannot write the Zarr store at 'lidmeltonly://runs'.* no file system",
        ):
            check_store_workers(client, "lidmeltonly://runs")  # known here, not on the workers
    assert not (tmp_path / "never").exists()
    a = xr.open_zarr(threads.summary["zarr"]["url"], mask_and_scale=False)
    b = xr.open_zarr(other.summary["zarr"]["url"], mask_and_scale=False)
    assert sorted(a.data_vars) == sorted(b.data_vars)
    for name in a.data_vars:
        assert a[name].values.tobytes() == b[name].values.tobytes(), name
    assert threads.summary["zarr"]["arrays"] == other.summary["zarr"]["arrays"]
    assert threads.summary["statistics"] == other.summary["statistics"]
    assert len(_stores(url)) == 2
