"""The run's Zarr store (``[outputs] zarr = true``): the same bits as the GeoTIFFs, CF attributes,
part of the run's transaction, read by the products when a run has no GeoTIFFs, written by the
workers of a cluster.

Check values: the run's own GeoTIFFs, read with rasterio (an independent reader of the other
format), are the reference for every array; units and long names are the registry's
(lidmelt._variables, the one home of those facts); flag masks and meanings are
lidmelt.physics.FLAG_KEYS; the chunk shape is the workflow's chunk_size (64); the threaded run
of the same workflow is the reference of the cluster run (the issue: identical values).
"""

from __future__ import annotations

import csv
import json
import shutil
from pathlib import Path

import numpy as np
import pytest
import rasterio
import xarray as xr
import zarr

from lidmelt._engine import run_basin
from lidmelt._errors import RunDirError, WorkflowError
from lidmelt._variables import FLAG_VARIABLE, INPUTS, OUTPUTS
from lidmelt.cli import main
from lidmelt.grids._manifest import check_written
from lidmelt.grids._rundir import ZARR_NAME, open_run, read_flags
from lidmelt.physics._flags import FLAG_KEYS
from lidmelt.products._maps._explore import page_data
from lidmelt.workflow import load_workflow

ZARR = "[outputs]\nzarr = true\n"


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """The cluster tests' basin (640 x 160 cells, chunks of 64: 10 x 3 chunks, two bands of
    rows) run three ways: GeoTIFFs only, GeoTIFFs and the store, the store only."""
    from test_cluster import _basin

    folder = tmp_path_factory.mktemp("zarr")
    wf = _basin(folder / "in", extra=ZARR)
    both = run_basin(load_workflow(wf), output_dir=folder / "both", progress=False).run_dir
    only = run_basin(
        load_workflow(wf, overrides=["outputs.geotiff=false", "run.netcdf=false"]),
        output_dir=folder / "only",
        progress=False,
    ).run_dir
    plain = run_basin(
        load_workflow(wf, overrides=["outputs.zarr=false"]),
        output_dir=folder / "plain",
        progress=False,
    ).run_dir
    return wf, plain, both, only


def _raw(path: Path) -> np.ndarray:
    with rasterio.open(path) as src:
        return src.read(1)


def test_store_equals_every_geotiff_bit_for_bit(runs):
    _, _, both, _ = runs
    tifs = sorted(both.glob("*.tif"))
    assert len(tifs) >= 13  # ten outputs, two inputs, the flag
    ds = xr.open_zarr(both / ZARR_NAME, mask_and_scale=False)
    assert sorted(ds.data_vars) == sorted(p.stem.removeprefix("input_") for p in tifs)
    for tif in tifs:
        name = tif.stem.removeprefix("input_")
        stored, reference = ds[name].values, _raw(tif)
        assert stored.dtype == reference.dtype, name
        assert stored.tobytes() == reference.tobytes(), name  # bit for bit, NaN included
    # decoded as a user opens it: the same values, NaN for the flags' nodata
    decoded = xr.open_zarr(both / ZARR_NAME)
    flag = _raw(both / "validity_flag.tif").astype("float32")
    flag[flag == 255] = np.nan
    np.testing.assert_array_equal(decoded[FLAG_VARIABLE.name].values, flag)


def test_store_has_cf_attributes_chunks_and_consolidated_metadata(runs):
    _, _, both, _ = runs
    ds = xr.open_zarr(both / ZARR_NAME, mask_and_scale=False)
    with rasterio.open(both / "melt_thickness_km.tif") as src:
        crs = src.crs
    for name, var in ds.data_vars.items():
        registry = OUTPUTS.get(name) or INPUTS.get(name) or FLAG_VARIABLE
        assert var.attrs["units"] == registry.units, name
        assert var.attrs["long_name"] == registry.long_name, name
        assert (var.attrs.get("grid_mapping") or var.encoding["grid_mapping"]) == "spatial_ref"
        assert var.encoding["preferred_chunks"] == {"y": 64, "x": 64}, name  # chunk_size
        assert var.rio.crs == crs, name
    assert (
        ds["melt_thickness_km"].attrs["_FillValue"] != ds["melt_thickness_km"].attrs["_FillValue"]
    )  # NaN, as the GeoTIFFs' nodata
    flag = ds[FLAG_VARIABLE.name].attrs
    assert flag["_FillValue"] == 255
    group = zarr.open_group(str(both / ZARR_NAME), mode="r")
    assert group[FLAG_VARIABLE.name].fill_value == 255  # zarr's own: a missing chunk reads nodata
    assert np.isnan(group["melt_thickness_km"].fill_value)
    assert list(flag["flag_masks"]) == sorted(FLAG_KEYS)
    assert flag["flag_meanings"].split() == [FLAG_KEYS[b] for b in sorted(FLAG_KEYS)]
    regime = ds["melting_regime"].attrs
    assert list(regime["flag_values"]) == [c.value for c in OUTPUTS["melting_regime"].classes]
    root = json.loads((both / ZARR_NAME / "zarr.json").read_text())
    assert root["zarr_format"] == 3
    consolidated = root["consolidated_metadata"]["metadata"]
    assert set(ds.data_vars) <= set(consolidated)
    summary = open_run(both).summary
    assert set(summary["zarr"]["variables"]) == set(ds.data_vars)
    manifest = summary["manifest"]["files"]
    assert f"{ZARR_NAME}/zarr.json" in manifest
    assert f"{ZARR_NAME}/melt_thickness_km/c/0/0" in manifest  # every chunk is in the manifest


def test_every_chunk_is_written(runs):
    only = runs[3]
    for name in open_run(only).summary["zarr"]["variables"]:
        array = zarr.open_array(str(only / ZARR_NAME), path=name, mode="r")
        assert array.chunks == (64, 64)
        assert array.nchunks_initialized == array.nchunks == 10 * 3, name


def test_products_read_a_run_without_geotiffs(runs, tmp_path):
    _, plain, _, only = runs
    assert not list(only.glob("*.tif"))
    a, b = open_run(plain), open_run(only)
    assert a.outputs == b.outputs
    assert a.inputs == b.inputs
    for name in a.outputs + a.inputs:
        xr.testing.assert_identical(a.open(name), b.open(name))
    np.testing.assert_array_equal(read_flags(a).values, read_flags(b).values)
    stations = tmp_path / "stations.csv"
    stations.write_text("name,lon,lat\nA,-25.0,7.0\nB,-27.3,8.1\nC,-23.0,-15.0\n")
    out = {}
    for run in (plain, only):
        out[run.name] = tmp_path / f"{run.name}.csv"
        assert main(["sample", str(run), str(stations), "-o", str(out[run.name])]) == 0
    rows = {k: list(csv.reader(v.open())) for k, v in out.items()}
    assert rows["plain"] == rows["only"]
    assert len(rows["only"]) == 4
    with pytest.raises(RunDirError, match=r"outputs\.geotiff = true"):
        b.file("melt_thickness_km")  # a command that reads GeoTIFFs is told why
    # the map page embeds the same layers, values and flags from either format
    assert page_data(a) == page_data(b)
    # the assessment reads its variable band by band from either format: the same scores
    features = tmp_path / "features.csv"
    features.write_text("name,longitude,latitude\n" + "".join(
        f"f{k},{-29.7 + 0.9 * k},{9.0 - 3.1 * k}\n" for k in range(8)
    ))  # fmt: skip
    scores = {}
    for run in (plain, only):
        doc = tmp_path / f"assess-{run.name}.json"
        assert main(["assess", str(run), str(features), "-o", str(doc)]) == 0
        found = json.loads(doc.read_text())
        scores[run.name] = {k: v for k, v in found.items() if k not in ("run", "candidates")}
    assert scores["plain"] == scores["only"]
    assert scores["only"]["n_features_used"] >= 4


def test_a_damaged_store_is_refused(runs, tmp_path):
    _, _, both, only = runs
    copy = tmp_path / "only"
    shutil.copytree(only, copy)
    chunk = copy / ZARR_NAME / "onset_depth_km" / "c" / "0" / "0"
    chunk.unlink()
    with pytest.raises(RunDirError, match="onset_depth_km"):
        check_written(copy, flag_file="validity_flag.tif")  # the seal's check
    with pytest.raises(RunDirError, match="is missing"):
        open_run(copy)  # the manifest's check
    shutil.rmtree(copy)
    shutil.copytree(only, copy)
    chunk = copy / ZARR_NAME / "validity_flag" / "c" / "0" / "0"
    chunk.write_bytes(chunk.read_bytes()[:-1] + b"\x00")
    with pytest.raises(RunDirError, match="SHA-256"):
        open_run(copy)
    counts = check_written(only, flag_file="validity_flag.tif").flag_counts
    values, n = np.unique(_raw(both / "validity_flag.tif"), return_counts=True)
    assert counts == dict(zip(values.tolist(), n.tolist(), strict=True))


def test_formats_that_cannot_go_together_are_refused(runs):
    wf = runs[0]
    with pytest.raises(WorkflowError, match="zarr = true"):
        load_workflow(wf, overrides=["outputs.geotiff=false", "outputs.zarr=false"])
    cfg = load_workflow(wf, overrides=["outputs.geotiff=false"])  # the basin has run.netcdf
    with pytest.raises(WorkflowError, match=r"run\.netcdf = true"):
        run_basin(cfg, output_dir=wf.parent / "never", progress=False)
    assert not (wf.parent / "never").exists()


@pytest.mark.slow
def test_workers_write_the_store_on_a_cluster(tmp_path, monkeypatch):
    import distributed

    from lidmelt.grids import _zarr
    from test_cluster import _basin, _cluster

    class StoreWrites(distributed.WorkerPlugin):  # counts each worker's tasks and chunk writes
        name = "store-writes"

        def setup(self, worker):
            self.tasks, self.chunks = [], []
            from lidmelt.grids import _zarr as on_worker

            real = on_worker._Region.__setitem__

            def counted(region, key, value):
                self.chunks.append(1)
                return real(region, key, value)

            on_worker._Region.__setitem__ = counted

        def transition(self, key, start, finish, **kwargs):
            if start == "executing" and finish == "memory" and _zarr.STORE_TASK in str(key):
                self.tasks.append(str(key))

    here = []  # chunks written in this process (the run's)
    real = _zarr._Region.__setitem__

    def counted(region, key, value):
        here.append(1)
        return real(region, key, value)

    monkeypatch.setattr(_zarr._Region, "__setitem__", counted)
    wf = _basin(tmp_path / "in", extra=ZARR)
    overrides = ["outputs.geotiff=false", "run.netcdf=false"]
    cfg = load_workflow(wf, overrides=overrides)
    threads = run_basin(cfg, output_dir=tmp_path / "threads", progress=False)
    arrays = len(threads.summary["zarr"]["variables"])  # outputs, inputs and the flags
    assert len(here) == 10 * 3 * arrays  # threads: every chunk of every array written here
    here.clear()
    with _cluster() as cluster, distributed.Client(cluster) as client:
        client.register_plugin(StoreWrites())
        at = f'compute.scheduler="{cluster.scheduler_address}"'
        cfg = load_workflow(wf, overrides=[*overrides, at])
        other = run_basin(cfg, output_dir=tmp_path / "cluster", progress=False)
        done = client.run(
            lambda dask_worker: (
                dask_worker.plugins["store-writes"].tasks,
                len(dask_worker.plugins["store-writes"].chunks),
            )
        )
    assert here == []  # no chunk was written by the run's process
    keys = [k for tasks, _ in done.values() for k in tasks]
    assert len(set(keys)) == len(keys) == 10 * 3  # one task per chunk, each run once
    assert sum(n for _, n in done.values()) == 10 * 3 * arrays  # every array's every chunk
    a = xr.open_zarr(threads.run_dir / ZARR_NAME, mask_and_scale=False)
    b = xr.open_zarr(other.run_dir / ZARR_NAME, mask_and_scale=False)
    for name in a.data_vars:
        assert a[name].values.tobytes() == b[name].values.tobytes(), name
    assert threads.summary["statistics"] == other.summary["statistics"]


@pytest.mark.slow
def test_an_ensembles_layers_join_the_store(tmp_path):
    from test_ensemble import run_ensemble

    vary = '"model.ambient_potential_temperature_c" = { uniform = [1300.0, 1450.0] }'
    run = run_ensemble(tmp_path, "ens", vary=vary, members=8, extra=["outputs.zarr=true"])
    layers = [n for n in run.summary["outputs"] if n not in OUTPUTS]
    assert len(layers) >= 4  # the probability and the percentiles of the ensemble
    ds = xr.open_zarr(run.run_dir / ZARR_NAME, mask_and_scale=False)
    tifs = sorted(run.run_dir.glob("*.tif"))
    assert sorted(ds.data_vars) == sorted(p.stem.removeprefix("input_") for p in tifs)
    for tif in tifs:
        name = tif.stem.removeprefix("input_")
        assert ds[name].values.tobytes() == _raw(tif).tobytes(), name
    for name in layers:
        assert ds[name].attrs["units"] == run.summary["outputs"][name]["units"], name
    assert open_run(run.run_dir).open(layers[0]).shape == ds[layers[0]].shape
