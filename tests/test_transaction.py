"""A run is a transaction: lock, staging folder, manifest, one swap; readers check the manifest.

Check values come from the definitions in lidmelt.grids._transaction and lidmelt.grids._manifest
(identities: the files a run leaves, the messages it gives), not from computed numbers.
"""

from __future__ import annotations

import importlib
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import numpy.testing as npt
import pytest
from affine import Affine

import runkit
from lidmelt._engine import run_basin
from lidmelt._errors import InputError, RunDirError
from lidmelt.cli import main
from lidmelt.grids._grid import Grid
from lidmelt.grids._manifest import ITEM_NAME, MANIFEST_KEY, verify_manifest
from lidmelt.grids._rundir import SUMMARY_NAME
from lidmelt.grids._transaction import RunLock, RunTransaction, leftovers, lock_path
from lidmelt.workflow import load_workflow

#: The module (the package exports a function of the same name).
align_module = importlib.import_module("lidmelt.grids._align")

RUN_FILES = {  # what a run of runkit.basin() writes (registry names; identity)
    "anomaly_melt_thickness_km.tif",
    "excess_to_melt_k.tif",
    "input_plate_age_ma.tif",
    "input_thermal_anomaly_k.tif",
    "melting_top_km.tif",
    "lidmelt.nc",
    "max_melt_fraction.tif",
    "mean_melt_pressure_gpa.tif",
    "melt_thickness_km.tif",
    "melting_regime.tif",
    "onset_depth_km.tif",
    "onset_pressure_gpa.tif",
    "deep_melt_share.tif",
    "summary.json",
    "validity_flag.tif",
    "stac_item.json",  # the run's STAC Item, written last (docs/stac.md)
}


@pytest.fixture(scope="module")
def first_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("tx")
    wf = runkit.basin(folder / "in")
    res = run_basin(load_workflow(wf, output_dir=folder / "out" / "run"), progress=False)
    return wf, res


def test_a_run_leaves_its_folder_and_nothing_beside_it(first_run):
    _, res = first_run
    assert set(runkit.snapshot(res.run_dir)) == RUN_FILES
    assert [p.name for p in res.run_dir.parent.iterdir()] == ["run"]  # no lock, no staging
    summary = json.loads((res.run_dir / SUMMARY_NAME).read_text())
    # the summary and the STAC Item (which lists the sealed summary) are outside the manifest
    assert set(summary[MANIFEST_KEY]["files"]) == RUN_FILES - {SUMMARY_NAME, ITEM_NAME}
    for name, entry in summary[MANIFEST_KEY]["files"].items():
        assert entry["size"] == (res.run_dir / name).stat().st_size
        assert entry["sha256"] == runkit.snapshot(res.run_dir)[name]
    assert {p.name for p in res.files} == RUN_FILES


def copy_run(src, dst):
    dst.mkdir(parents=True)
    for path in src.iterdir():
        (dst / path.name).write_bytes(path.read_bytes())
    return dst


@pytest.mark.parametrize(
    ("damage", "message"),
    [
        (lambda d: (d / "melt_thickness_km.tif").write_bytes(b"II*\x00"), "has 4 bytes"),
        (lambda d: (d / "onset_depth_km.tif").unlink(), "'onset_depth_km.tif' is missing"),
        (
            lambda d: (d / "melting_top_km.tif").write_bytes(
                (d / "onset_depth_km.tif").read_bytes()[: (d / "melting_top_km.tif").stat().st_size]
            ),
            "SHA-256",
        ),
        (
            lambda d: (d / SUMMARY_NAME).write_text(
                (d / SUMMARY_NAME).read_text().replace('"data_cells": ', '"data_cells": 1')
            ),
            "does not match its recorded checksum",
        ),
    ],
    ids=["truncated", "missing", "mixed", "tampered-summary"],
)
def test_products_refuse_a_damaged_run(first_run, tmp_path, capsys, damage, message):
    _, res = first_run
    run = copy_run(res.run_dir, tmp_path / "copy")
    damage(run)
    before = runkit.snapshot(tmp_path)
    csv = tmp_path.parent / f"{tmp_path.name}-sites.csv"
    csv.write_text("lon,lat\n-25,7\n")
    for argv in (
        ["sample", str(run), str(csv), "-o", str(tmp_path.parent / "x.csv")],
        ["map", str(run)],
        ["report", str(run)],
        ["screen", str(run), "--min-melt-thickness", "1", "-o", str(tmp_path / "c.gpkg")],
    ):
        assert main(argv) == 1
        err = capsys.readouterr().err
        assert "fails its manifest check" in err, err
        assert message in err, err
        assert "Traceback" not in err
    assert runkit.snapshot(tmp_path) == before  # nothing written
    assert not (tmp_path.parent / "x.csv").exists()


@pytest.mark.parametrize(
    ("group", "name", "file"),
    [
        ("outputs", "../../x", "../../x.tif"),  # a name no run writes
        ("outputs", "melt_thickness_km", "../../x.tif"),  # a registered name, another file
        ("inputs", "../../x", "../../x.tif"),
    ],
    ids=["unknown-output", "output-file", "unknown-input"],
)
def test_a_resealed_summary_naming_other_files_is_refused_as_tampered(
    first_run, tmp_path, capsys, group, name, file
):
    # a summary naming an output '../../x', resealed as an attacker could: every product
    # command refuses the run as tampered (the manifest's own checksum is intact)
    from conftest import reseal

    _, res = first_run
    run = copy_run(res.run_dir, tmp_path / "a" / "b" / "run")
    doc = json.loads((run / SUMMARY_NAME).read_text())
    doc[group].setdefault(name, {"units": "km", "long_name": "x"})["file"] = file
    reseal(run, **doc)
    sites = tmp_path / "sites.csv"
    sites.write_text("lon,lat\n-25,7\n-20,5\n")
    boxes = tmp_path / "boxes.geojson"
    boxes.write_text(
        '{"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {}, '
        '"geometry": {"type": "Polygon", "coordinates": '
        "[[[-28, 4], [-22, 4], [-22, 9], [-28, 9], [-28, 4]]]}}]}"
    )
    before = runkit.snapshot(tmp_path)
    out = tmp_path.parent / f"{tmp_path.name}-out"
    for argv in (
        ["sample", str(run), str(sites), "-o", f"{out}.csv"],
        ["profile", str(run), str(sites), "--spacing", "50", "-o", f"{out}-p.csv"],
        ["regions", str(run), str(boxes), "-o", f"{out}-r.csv"],
        ["screen", str(run), "--min-melt-thickness", "1", "-o", f"{out}.gpkg"],
        ["map", str(run), "--variable", "melt_thickness_km"],
        ["report", str(run)],
    ):
        assert main(argv) == 1, argv
        err = capsys.readouterr().err
        assert err.count("\n") == 1, err  # one line
        assert err.startswith(f"lidmelt {argv[0]}: error: run directory "), err
        assert "fails its manifest check: summary.json lists" in err, err
        assert f"{name!r} in {group} with the file {file!r}" in err, err
        assert "(tampered). Run 'lidmelt run' again" in err, err
        assert "Traceback" not in err
    assert runkit.snapshot(tmp_path) == before  # nothing written or replaced
    assert sorted(p.name for p in (tmp_path / "a").iterdir()) == ["b"]
    assert list(tmp_path.parent.glob(f"{tmp_path.name}-out*")) == []


def test_a_second_run_into_the_same_folder_fails_at_once(tmp_path):
    dest = tmp_path / "run"
    with RunLock(dest):
        info = json.loads(lock_path(dest).read_text())
        assert info["pid"] == os.getpid()
        with pytest.raises(RunDirError, match=rf"another lidmelt run \(process {os.getpid()}"):
            RunLock(dest).__enter__()
    assert list(tmp_path.iterdir()) == []  # the lock file goes with its run


def test_a_stale_lock_of_a_dead_process_is_taken_over(tmp_path):
    dest = tmp_path / "run"
    dead = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"],
        check=True,
        capture_output=True,
        text=True,
    )
    lock_path(dest).write_text(json.dumps({"pid": int(dead.stdout), "started_utc": "x"}))
    with RunLock(dest):
        assert json.loads(lock_path(dest).read_text())["pid"] == os.getpid()
    assert list(tmp_path.iterdir()) == []


def test_wait_waits_for_the_other_run(tmp_path):
    dest = tmp_path / "run"
    holder = subprocess.Popen(
        [
            sys.executable,
            "-c",
            "import sys, time; from lidmelt.grids._transaction import RunLock\n"
            f"with RunLock({str(dest)!r}):\n print('held', flush=True); time.sleep(1.5)",
        ],
        env=runkit.env(),
        stdout=subprocess.PIPE,
        text=True,
    )
    assert holder.stdout.readline().strip() == "held"
    t0 = time.monotonic()
    with pytest.raises(RunDirError, match="add --wait"):
        RunLock(dest).__enter__()
    with RunLock(dest, wait=True):
        waited = time.monotonic() - t0
    holder.wait(timeout=30)
    assert waited > 0.5  # the holder kept the lock for 1.5 s after 'held'


def test_a_symlink_planted_at_the_lock_name_is_not_followed(tmp_path):
    victim = tmp_path / "victim.txt"
    victim.write_text("precious")
    dest = tmp_path / "run"
    lock_path(dest).symlink_to(victim)
    with pytest.raises(RunDirError, match="cannot create the lock file"):
        RunLock(dest).__enter__()
    assert victim.read_text() == "precious"


def test_failed_run_keeps_the_old_run_and_cleans_its_staging(first_run, tmp_path):
    _, res = first_run
    dest = copy_run(res.run_dir, tmp_path / "run")
    before = runkit.snapshot(dest)
    bad = runkit.basin(tmp_path / "bad", nan=True)
    with pytest.raises(InputError, match="no cell of the grid has data"):
        run_basin(load_workflow(bad, output_dir=dest), progress=False)
    assert runkit.snapshot(dest) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad", "run"]


def test_leftovers_of_a_killed_run_are_cleaned_by_the_next(first_run, tmp_path):
    wf, _ = first_run
    dest = tmp_path / "run"
    for tag in ("staging-abc", "old-def"):
        (tmp_path / f".run.{tag}").mkdir()
        (tmp_path / f".run.{tag}" / "x.tif").write_bytes(b"partial")
    assert len(leftovers(dest)) == 2
    # 'lidmelt run --clean': only the leftovers go (an old run aside comes back first)
    assert main(["run", str(wf), "-o", str(dest), "--clean"]) == 0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run"]
    assert runkit.snapshot(dest) == {"x.tif": runkit.snapshot(tmp_path)["run/x.tif"]}


def test_a_folder_of_other_files_is_not_replaced(first_run, tmp_path):
    wf, _ = first_run
    dest = tmp_path / "mine"
    dest.mkdir()
    (dest / "thesis.tex").write_text("keep me")
    with pytest.raises(RunDirError, match="is not a lidmelt run"):
        run_basin(load_workflow(wf, output_dir=dest), progress=False)
    assert runkit.snapshot(tmp_path) == {"mine/thesis.tex": runkit.snapshot(dest)["thesis.tex"]}


def test_a_rerun_replaces_the_whole_folder_in_one_swap(first_run, tmp_path):
    _, res = first_run
    dest = copy_run(res.run_dir, tmp_path / "run")
    (dest / "maps").mkdir()
    (dest / "maps" / "stale.png").write_bytes(b"old figure")  # figures live outside the manifest
    inode = dest.stat().st_ino
    with RunTransaction(dest) as tx:
        (tx.staging / "new.txt").write_text("new")
        tx.commit()
    assert dest.stat().st_ino != inode
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run"]
    assert runkit.snapshot(dest) == runkit.snapshot(tx.dest)
    assert set(runkit.snapshot(dest)) == {"new.txt"}


def test_verify_manifest_names_files_outside_the_folder(tmp_path):
    doc = {"manifest": {"files": {"../x": {"size": 1, "sha256": "0"}}}}
    from lidmelt.grids._manifest import summary_sha256

    doc["summary_sha256"] = summary_sha256(doc)
    with pytest.raises(RunDirError, match="outside the folder"):
        verify_manifest(tmp_path, doc)


def test_align_block_by_block_equals_the_whole(monkeypatch):
    # the block-by-block path gives the same values as the whole-grid path (identity)
    import rioxarray  # noqa: F401
    import xarray as xr

    rng = np.random.default_rng(9)
    values = rng.normal(size=(50, 70)).astype("float32")
    values[10:20, 30:40] = np.nan
    da = xr.DataArray(
        values,
        dims=("y", "x"),
        coords={"y": 10 - 0.2 * (np.arange(50) + 0.5), "x": -30 + 0.2 * (np.arange(70) + 0.5)},
    )
    da = da.rio.write_crs("EPSG:4326")
    target = Grid(
        crs="EPSG:3857",
        transform=Affine(9000.0, 0, -3.3e6, 0, -9000.0, 1.1e6)[:6],
        width=37,
        height=29,
    )
    for method in ("bilinear", "nearest", "average"):
        whole = align_module.align(da, target, resampling=method).values
        monkeypatch.setattr(align_module, "BLOCK_CELLS", 10)
        monkeypatch.setattr(align_module, "ALIGN_BLOCK", 8)
        blocks = align_module.align(da, target, resampling=method)
        assert blocks.chunks is not None  # lazy
        npt.assert_array_equal(blocks.values, whole)
        monkeypatch.undo()


def test_a_previous_run_holding_an_input_of_this_run_is_refused(first_run, tmp_path, capsys):
    # the lid grid of this run is a previous run's own output: the swap would replace it by
    # this run's output, and a re-run would read that (the run, not the input, would be kept)
    import shutil

    _, res = first_run
    prev = tmp_path / "prev"
    shutil.copytree(res.run_dir, prev)
    wf = tmp_path / "w.toml"
    wf.write_text(
        '[run]\nname = "selfin"\nmaps = false\nreport = false\n[grid]\nlike = "lid_thickness"\n'
        '[inputs.lid_thickness]\npath = "prev/melting_top_km.tif"\n[compute]\nchunk_size = 64\n'
    )
    before = runkit.snapshot(tmp_path)
    for dest in (prev, prev / "."):
        assert main(["run", str(wf), "-o", str(dest), "--quiet"]) == 1
        runkit.refused(
            capsys.readouterr().err, "run", f"output folder '{prev}",
            f"holds '{prev / 'melting_top_km.tif'}', which this run reads",
            "Give another output folder (-o OUT_DIR or run.output_dir), or move the file out",
        )  # fmt: skip
    assert runkit.snapshot(tmp_path) == before  # the input and the previous run are intact
    assert sorted(p.name for p in tmp_path.iterdir()) == ["prev", "w.toml"]


def test_a_run_into_the_folder_of_its_workflow_file_is_refused(first_run, tmp_path, capsys):
    import shutil

    wf, res = first_run
    prev = tmp_path / "prev"
    shutil.copytree(res.run_dir, prev)
    inner = prev / "again.toml"
    inner.write_text(wf.read_text().replace('path = "age.tif"', f'path = "{wf.parent}/age.tif"'))
    before = runkit.snapshot(tmp_path)
    assert main(["run", str(inner), "-o", str(prev), "--quiet"]) == 1
    runkit.refused(capsys.readouterr().err, "run", f"holds '{inner}', which this run reads")
    assert runkit.snapshot(tmp_path) == before


def test_the_root_folder_is_refused_before_any_lock_file(tmp_path, capsys, monkeypatch):
    # as root nothing stops a file in '/': the refusal must come before the lock is opened
    from lidmelt.grids import _transaction as transaction

    def no_lock(self):
        raise AssertionError(f"a lock file was opened at {self.path}")

    monkeypatch.setattr(transaction.RunLock, "_open", no_lock)
    wf = runkit.basin(tmp_path / "in")
    root = sorted(p.name for p in Path("/").iterdir())
    for extra in ([], ["--clean"]):
        assert main(["run", str(wf), "-o", "/", "--quiet", *extra]) == 1
        runkit.refused(
            capsys.readouterr().err, "run", "output folder '/' is the root of the file system",
            "Give a new folder, e.g. -o /results/run1.",
        )  # fmt: skip
    assert sorted(p.name for p in Path("/").iterdir()) == root
