"""A global 2-arc-minute run writing its Zarr store on a dask.distributed cluster, against the
threaded run of the same format; the GeoTIFF path's figures beside it.

The inputs are bench_basin.py's invented global grids (10800 x 5400 cells at 2', a sinusoidal
age pattern and two Gaussian anomalies; ``--arcmin`` for another spacing). Four runs, each in a
fresh process (the cluster started before the clock, as a user's cluster runs already):

1. ``zarr threads``: ``[outputs] zarr = true, geotiff = false`` on two local threads;
2. ``zarr cluster``: the same on a LocalCluster of two single-thread worker processes (the
   workers write their chunks into the store; goal: at most 1.3 x the threaded run). Its
   workers import lidmelt before the clock, as the threaded run's process does; reading the
   melting table and loading the compiled kernel are inside the clock for both;
   ``zarr cold``: the same with workers that import lidmelt inside the clock (no goal);
3. ``tif threads`` and ``tif cluster``: the GeoTIFF run (the default outputs) both ways (the
   cluster's blocks travel to the run's process, which writes the files: unchanged by the store).

The two stores must hold the same bytes in every array, and the statistics must agree. Run:

    .venv/bin/python benchmarks/bench_zarr.py [--arcmin 2] [--repeat 3] [--workdir DIR]

Each case runs ``--repeat`` times, the cases interleaved round by round (a shared machine's load
drifts), and the ratios compare medians.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
from bench_basin import global_workflow, make_inputs  # the same invented inputs

#: The [outputs] table of each format.
FORMATS = {"zarr": "zarr = true\ngeotiff = false", "tif": ""}


def _import_lidmelt() -> None:
    """Run on each worker before the clock: the imports this process made before it."""
    import importlib

    for name in ("lidmelt._engine", "lidmelt.workflow"):
        importlib.import_module(name)


def child(folder: Path, fmt: str, cluster: bool, out: Path, cold: bool = False) -> None:
    """One run in this process; prints its JSON result (wall time, statistics)."""
    from lidmelt._engine import run_basin
    from lidmelt.workflow import load_workflow

    wf = folder / f"{fmt}.toml"
    extra = f"workers = 2\n[outputs]\n{FORMATS[fmt]}\n"
    text = global_workflow(folder, name="bench", chunk_size=1024, extra=extra)
    wf.write_text(text, encoding="utf-8")
    overrides = []
    local = None
    if cluster:
        import distributed

        local = distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0"
        )
        overrides.append(f'compute.scheduler="{local.scheduler_address}"')
        if not cold:  # the workers import lidmelt before the clock, as this process did
            with distributed.Client(local) as client:
                client.run(_import_lidmelt)
    cfg = load_workflow(wf, overrides=overrides, output_dir=out)
    t = time.perf_counter()
    res = run_basin(cfg, progress=False)
    wall = time.perf_counter() - t
    peak = _peak_rss_mb()  # this process; on a cluster the largest of the workers' too
    if local is not None:
        with distributed.Client(local) as client:
            peak = max(peak, *client.run(_peak_rss_mb).values())
        local.close()
    doc = {"wall_s": wall, "timings": res.timings_s, "stats": res.summary["statistics"]}
    print(json.dumps({**doc, "peak_mb": peak}))


def _peak_rss_mb() -> float:
    """This process's peak resident memory (MB; Linux reports kB)."""
    import resource

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def measure(folder: Path, fmt: str, how: str, out: Path) -> dict:
    """One run in a fresh process: ``how`` is "threads", "cluster" or "cold" (a cluster whose
    workers have not imported lidmelt)."""
    cmd = [sys.executable, __file__, "--child", fmt, "--workdir", str(folder), "--out", str(out)]
    cmd += [] if how == "threads" else ["--cluster"] + (["--cold"] if how == "cold" else [])
    done = subprocess.run(cmd, capture_output=True, text=True, check=False)
    if done.returncode:
        sys.stderr.write(done.stderr)
        raise SystemExit(f"{fmt} {how} failed")
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
    parser.add_argument("--cold", action="store_true")
    parser.add_argument("--repeat", type=int, default=3, help="rounds of every case (median)")
    parser.add_argument("--out", type=Path)
    args = parser.parse_args()
    if args.child:
        child(args.workdir, args.child, args.cluster, args.out, args.cold)
        return
    base = args.workdir or Path(tempfile.mkdtemp(prefix="lidmelt-bench-zarr-"))
    warm = base / "warm-up"  # the melting table, built (or loaded) outside the timings
    warm.mkdir(parents=True, exist_ok=True)
    make_inputs(warm, 360, 180)
    measure(warm, "tif", "threads", warm / "run")
    width = 360 * 60 // args.arcmin
    height = width // 2
    folder = base / f"{width}x{height}"
    folder.mkdir(parents=True, exist_ok=True)
    t = time.perf_counter()
    make_inputs(folder, width, height)
    print(f"grid {width} x {height}; inputs made in {time.perf_counter() - t:.0f} s")
    print(f"load before: {os.getloadavg()[0]:.2f} (1-minute average, {os.cpu_count()} cores)")
    runs: dict[str, list[dict]] = {}
    cases = [("zarr", ("threads", "cluster", "cold")), ("tif", ("threads", "cluster"))]
    for rep in range(args.repeat):  # rounds interleave the cases: drift of the load hits all
        for fmt, hows in cases:
            for how in hows:
                label = f"{fmt} {how}"
                out = folder / label.replace(" ", "_")
                if out.exists():
                    shutil.rmtree(out)
                r = measure(folder, fmt, how, out)
                runs.setdefault(label, []).append(r)
                t = r["timings"]
                print(
                    f"round {rep + 1} {label:<13}: {r['wall_s']:6.1f} s  (compute and write "
                    f"{t.get('compute_and_write_s', 0):.1f} s, seal {t.get('seal_s', 0):.1f} s;"
                    f" peak RSS of a process {r['peak_mb']:.0f} MB)",
                    flush=True,
                )
    median = {k: statistics.median(r["wall_s"] for r in v) for k, v in runs.items()}
    print(f"median of {args.repeat} rounds:")
    for label, goal in (
        ("zarr cluster", "  (goal <= 1.3)"),
        ("zarr cold", "  (workers that have not imported lidmelt yet: no goal)"),
        ("tif cluster", "  (issue's figures: 16.5 / 9.1 = 1.82)"),
    ):
        base_label = label.split()[0] + " threads"
        ratio = median[label] / median[base_label]
        times = f"{median[label]:.1f} / {median[base_label]:.1f} s"
        print(f"{label} / threads: {times} = {ratio:.2f}{goal}")
        if any(r["stats"] != runs[base_label][0]["stats"] for r in runs[label]):
            raise SystemExit(f"{label}: the statistics differ from the threaded run's")
    n = same_stores(
        folder / "zarr_threads" / "lidmelt.zarr", folder / "zarr_cluster" / "lidmelt.zarr"
    )
    print(f"identical values: the {n} arrays of both stores hold the same bytes; same statistics")
    print(f"load after: {os.getloadavg()[0]:.2f}")
    shutil.rmtree(base)


if __name__ == "__main__":
    main()
