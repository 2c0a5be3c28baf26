"""End-to-end speed and memory of a global basin run, against the cost of just reading and writing.

Generates a synthetic global grid at 2 arc-minutes (10800 x 5400, 58 million cells; ocean cells
only where a synthetic mask says so) as GeoTIFF inputs (plate age and thermal anomaly), then, each
in a fresh process so that peak memory is its own:

1. ``io``: read the inputs and write as many GeoTIFFs as a run writes, with the same compression
   and layout (the lower bound of any run);
2. ``run``: ``lidmelt run`` on a workflow naming those inputs (table path, no maps);
3. the same two at half the grid height, to show that peak memory does not grow with the grid.

Prints wall time, cells per second, peak RSS and where the run's time goes. Run:

    .venv/bin/python benchmarks/bench_basin.py [--width 10800 --height 5400] [--workdir DIR]

The synthetic grids are invented (a sinusoidal age pattern and two Gaussian anomalies).
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def make_inputs(folder: Path, width: int, height: int) -> None:
    """Invented inputs on a grid of ``width`` x ``height`` cells of 360/width degrees."""
    import dask.array as dsa
    import rioxarray  # noqa: F401
    import xarray as xr

    from lidmelt.grids.grid import Grid
    from lidmelt.grids.write import write_geotiff

    res = 360.0 / width
    half = height * res / 2.0
    target = Grid.from_extent(-180.0, 180.0, -half, half, res)
    tpl = target.template(chunks=(1024, 2048))
    lon = xr.DataArray(dsa.from_array(target.x_centres(), chunks=2048), dims="x")
    lat = xr.DataArray(dsa.from_array(target.y_centres(), chunks=1024), dims="y")
    # invented: ages from a few zig-zag "ridges", ocean where a smooth mask is positive
    age = 90.0 + 85.0 * np.sin(np.radians(lon) * 3.0) * np.cos(np.radians(lat) * 2.0)
    ocean = np.sin(np.radians(lon) * 2.0 + 1.0) + np.cos(np.radians(lat) * 3.0) > -0.6
    age = age.where(ocean & (np.abs(lat) < 80)).clip(0.0, 180.0)
    anomaly = 250.0 * np.exp(-(((lon - 20.0) / 8.0) ** 2 + ((lat + 10.0) / 8.0) ** 2)) + (
        120.0 * np.exp(-(((lon + 140.0) / 15.0) ** 2 + ((lat - 20.0) / 10.0) ** 2))
    )
    for name, da, units in (("age.tif", age, "Ma"), ("anomaly.tif", anomaly, "K")):
        da = da.transpose("y", "x").assign_coords(tpl.coords).astype("float32")
        da = da.rio.write_crs("EPSG:4326")
        write_geotiff(da, folder / name, description=name, units=units, cog=False)


def run_io(folder: Path, n_out: int) -> dict:
    """Read both inputs and write ``n_out`` GeoTIFFs from them (same options as a run)."""
    from lidmelt.grids.io import open_grid
    from lidmelt.grids.store import GeoTiffItem, GeoTiffSet

    t = time.perf_counter()
    age = open_grid(folder / "age.tif", name="age", chunks={"y": 1024, "x": 1024})
    anomaly = open_grid(folder / "anomaly.tif", name="anomaly", chunks={"y": 1024, "x": 1024})
    sources = [age, anomaly]
    items = [
        GeoTiffItem(sources[k % 2] + 0.0 * k, folder / "io" / f"out{k}.tif", f"out{k}", "1")
        for k in range(n_out)
    ]
    for item in items:
        item.da.rio.write_crs("EPSG:4326", inplace=True)
    with GeoTiffSet(items, cog=True) as out:
        out.compute(num_workers=2)
    return {"wall_s": time.perf_counter() - t}


def run_lidmelt(folder: Path) -> dict:
    from lidmelt.engine import run_basin
    from lidmelt.workflow import load_workflow

    wf = folder / "global.toml"
    wf.write_text(
        f"""
[run]
name = "bench"
maps = false
report = false
[grid]
like = "plate_age"
[inputs.plate_age]
path = "{folder / "age.tif"}"
[inputs.thermal_anomaly]
path = "{folder / "anomaly.tif"}"
[compute]
chunk_size = 1024
workers = 2
""",
        encoding="utf-8",
    )
    t = time.perf_counter()
    res = run_basin(load_workflow(wf, output_dir=folder / "run"), progress=False)
    return {
        "wall_s": time.perf_counter() - t,
        "timings": res.timings_s,
        "files": len([p for p in res.files if p.suffix == ".tif"]),
        "melting_cells": res.summary["statistics"]["melting_cells"],
        "data_cells": res.summary["statistics"]["data_cells"],
    }


def child(mode: str, folder: Path, n_out: int) -> None:
    result = run_io(folder, n_out) if mode == "io" else run_lidmelt(folder)
    result["peak_rss_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(json.dumps(result))


def measure(mode: str, folder: Path, n_out: int = 0) -> dict:
    out = subprocess.run(
        [
            sys.executable,
            __file__,
            "--child",
            mode,
            "--workdir",
            str(folder),
            "--n-out",
            str(n_out),
        ],
        capture_output=True,
        text=True,
        check=True,
    )
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--width", type=int, default=10800)
    parser.add_argument("--height", type=int, default=5400)
    parser.add_argument("--workdir", type=Path)
    parser.add_argument("--child")
    parser.add_argument("--n-out", type=int, default=0)
    args = parser.parse_args()
    if args.child:
        child(args.child, args.workdir, args.n_out)
        return
    base = args.workdir or Path(tempfile.mkdtemp(prefix="lidmelt-bench-"))
    for height in (args.height // 2, args.height):
        width = args.width
        folder = base / f"{width}x{height}"
        folder.mkdir(parents=True, exist_ok=True)
        t = time.perf_counter()
        make_inputs(folder, width, height)
        cells = width * height
        print(
            f"\n== grid {width} x {height} ({cells / 1e6:.1f} M cells); inputs made in "
            f"{time.perf_counter() - t:.0f} s"
        )
        run = measure("run", folder)
        io = measure("io", folder, run["files"])
        print(
            f"lidmelt run : {run['wall_s']:7.1f} s  {cells / run['wall_s'] / 1e6:6.2f} M cells/s"
            f"  peak RSS {run['peak_rss_mb']:7.0f} MB  ({run['data_cells'] / 1e6:.1f} M ocean "
            f"cells, {run['melting_cells'] / 1e6:.2f} M melting, {run['files']} GeoTIFFs)"
        )
        print(
            f"read+write  : {io['wall_s']:7.1f} s  {cells / io['wall_s'] / 1e6:6.2f} M cells/s"
            f"  peak RSS {io['peak_rss_mb']:7.0f} MB  (the bound)"
        )
        print(f"ratio run / bound: {run['wall_s'] / io['wall_s']:.2f}")
        print("run time split: " + ", ".join(f"{k} {v:.1f} s" for k, v in run["timings"].items()))


if __name__ == "__main__":
    main()
