"""A global 2-arc-minute run writing its Zarr store on a dask.distributed cluster, against the
threaded run of the same format; the GeoTIFF path's figures beside it.

The inputs are bench_basin.py's invented global grids (10800 x 5400 cells at 2', a sinusoidal
age pattern and two Gaussian anomalies; ``--arcmin`` for another spacing). Four runs, each in a
fresh process (the cluster started before the clock, as a user's cluster runs already):

1. ``zarr threads``: ``[outputs] zarr = true, geotiff = false`` on two local threads;
2. ``zarr cluster``: the same on a LocalCluster of two single-thread worker processes (the
   workers write their chunks into the store; goal: at most 1.3 x the threaded run);
3. ``tif threads`` and ``tif cluster``: the GeoTIFF run (the default outputs) both ways (the
   cluster's blocks travel to the run's process, which writes the files: unchanged by the store).

The two stores must hold the same bytes in every array, and the statistics must agree. Run:

    .venv/bin/python benchmarks/bench_zarr.py [--arcmin 2] [--workdir DIR]
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
from bench_basin import make_inputs  # the same invented inputs

#: The workflow of every case; FORMATS fills in the [outputs] table.
WORKFLOW = """
[run]
name = "bench"
maps = false
report = false
[grid]
like = "plate_age"
[inputs.plate_age]
path = "{folder}/age.tif"
[inputs.thermal_anomaly]
path = "{folder}/anomaly.tif"
[compute]
chunk_size = 1024
workers = 2
[outputs]
{outputs}
"""
FORMATS = {"zarr": "zarr = true\ngeotiff = false", "tif": ""}


def child(folder: Path, fmt: str, cluster: bool, out: Path) -> None:
    """One run in this process; prints its JSON result (wall time, statistics)."""
    from lidmelt._engine import run_basin
    from lidmelt.workflow import load_workflow

    wf = folder / f"{fmt}.toml"
    wf.write_text(WORKFLOW.format(folder=folder, outputs=FORMATS[fmt]), encoding="utf-8")
    overrides = []
    local = None
    if cluster:
        import distributed

        local = distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0"
        )
        overrides.append(f'compute.scheduler="{local.scheduler_address}"')
    cfg = load_workflow(wf, overrides=overrides, output_dir=out)
    t = time.perf_counter()
    res = run_basin(cfg, progress=False)
    wall = time.perf_counter() - t
    if local is not None:
        local.close()
    print(
        json.dumps({"wall_s": wall, "timings": res.timings_s, "stats": res.summary["statistics"]})
    )


def measure(folder: Path, fmt: str, cluster: bool, out: Path) -> dict:
    cmd = [sys.executable, __file__, "--child", fmt, "--workdir", str(folder), "--out", str(out)]
    cmd += ["--cluster"] if cluster else []
    done = subprocess.run(cmd, capture_output=True, text=True, check=False)
    if done.returncode:
        sys.stderr.write(done.stderr)
        raise SystemExit(f"{fmt} {'cluster' if cluster else 'threads'} failed")
    return json.loads(done.stdout.strip().splitlines()[-1])


def same_stores(a: Path, b: Path) -> int:
    """The number of arrays compared; SystemExit unless every array holds the same bytes."""
    import zarr

    ga, gb = zarr.open_group(str(a), mode="r"), zarr.open_group(str(b), mode="r")
    names = sorted(ga.array_keys())
    if names != sorted(gb.array_keys()):
        raise SystemExit(f"the stores hold different arrays: {names} / {sorted(gb.array_keys())}")
    for name in names:
        x, y = ga[name], gb[name]
        step = x.chunks[0] if x.ndim == 2 else x.shape[0] if x.ndim else 1
        rows = x.shape[0] if x.ndim else 1
        for r in range(0, rows, step):
            part = (slice(r, r + step),) if x.ndim else ()
            if x[part].tobytes() != y[part].tobytes():
                raise SystemExit(f"array {name!r} differs from row {r}")
    return len(names)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--arcmin", type=int, default=2)
    parser.add_argument("--workdir", type=Path)
    parser.add_argument("--child")
    parser.add_argument("--cluster", action="store_true")
    parser.add_argument("--out", type=Path)
    args = parser.parse_args()
    if args.child:
        child(args.workdir, args.child, args.cluster, args.out)
        return
    base = args.workdir or Path(tempfile.mkdtemp(prefix="lidmelt-bench-zarr-"))
    warm = base / "warm-up"  # the melting table, built (or loaded) outside the timings
    warm.mkdir(parents=True, exist_ok=True)
    make_inputs(warm, 360, 180)
    measure(warm, "tif", False, warm / "run")
    width = 360 * 60 // args.arcmin
    height = width // 2
    folder = base / f"{width}x{height}"
    folder.mkdir(parents=True, exist_ok=True)
    t = time.perf_counter()
    make_inputs(folder, width, height)
    print(f"grid {width} x {height}; inputs made in {time.perf_counter() - t:.0f} s")
    print(f"load before: {os.getloadavg()[0]:.2f} (1-minute average, {os.cpu_count()} cores)")
    runs = {}
    for fmt in ("zarr", "tif"):
        for cluster in (False, True):
            label = f"{fmt} {'cluster' if cluster else 'threads'}"
            out = folder / label.replace(" ", "_")
            runs[label] = measure(folder, fmt, cluster, out)
            r = runs[label]
            t = r["timings"]
            print(
                f"{label:<13}: {r['wall_s']:6.1f} s  (compute and write "
                f"{t.get('compute_and_write_s', 0):.1f} s, seal {t.get('seal_s', 0):.1f} s)",
                flush=True,
            )
            if fmt == "tif":
                shutil.rmtree(out)
    for fmt in ("zarr", "tif"):
        a, b = runs[f"{fmt} threads"], runs[f"{fmt} cluster"]
        ratio = b["wall_s"] / a["wall_s"]
        goal = "  (goal <= 1.3)" if fmt == "zarr" else "  (issue's figures: 16.5 / 9.1 = 1.82)"
        print(f"{fmt} cluster / threads: {ratio:.2f}{goal}")
        if a["stats"] != b["stats"]:
            raise SystemExit(f"{fmt}: the statistics differ between threads and cluster")
    n = same_stores(
        folder / "zarr_threads" / "lidmelt.zarr", folder / "zarr_cluster" / "lidmelt.zarr"
    )
    print(f"identical values: the {n} arrays of both stores hold the same bytes; same statistics")
    print(f"load after: {os.getloadavg()[0]:.2f}")
    shutil.rmtree(base)


if __name__ == "__main__":
    main()
