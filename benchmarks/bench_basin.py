"""End-to-end speed and memory of a global basin run, against the raw bound of the same machine.

Generates a synthetic global grid at 2 arc-minutes (10800 x 5400, 58 million cells; ``--arcmin 1``:
21600 x 10800, 233 million cells; ocean only where a synthetic mask says so) as GeoTIFF inputs
(plate age and thermal anomaly), then measures, each in a fresh process so that peak memory is
its own:

1. ``bound``: the raw bound. Read the two inputs and write as many float32 GeoTIFFs as the run
   writes, with rasterio directly (512 tiles, ZSTD level 1, predictor 3, NUM_THREADS=ALL_CPUS,
   written in row bands of one tile row), no lidmelt code involved;
2. ``dry``: ``run_basin`` on a workflow naming those inputs (table path, no maps or report);
3. ``wet``: the same with a constant water content (``--water``, wt%);
4. the bound and the dry run again at half the grid height, so that peak memory can be compared
   (flat: the half-height peak within 15 % of the full one).

Prints per case the wall time, peak RSS, the ratio run / bound, the run's own stage times and the
kernel's thread seconds; "outside kernel" is the run's wall time minus the kernel thread seconds
divided by the workers (the part a faster kernel does not shorten, roughly). The runs use the
workflow default for the top of melting (``--top-of-melting`` picks ``geotherm`` or
``isotherm``; the geotherm rule's time is in the kernel's "lid" thread seconds). Run:

    .venv/bin/python benchmarks/bench_basin.py [--arcmin 1] [--workdir DIR] [--no-wet]
        [--top-of-melting isotherm]

The synthetic grids are invented (a sinusoidal age pattern and two Gaussian anomalies).
"""

from __future__ import annotations

import argparse
import json
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

#: Workers (threads) of the run; the machine the goals are set for has 2 cores.
WORKERS = 2
#: The rule for the top of melting of the runs (set from the command line).
RULE = ["geotherm"]


def make_inputs(folder: Path, width: int, height: int) -> None:
    """Invented inputs on a grid of ``width`` x ``height`` cells of 360/width degrees."""
    import dask.array as dsa
    import rioxarray  # noqa: F401
    import xarray as xr

    from lidmelt.grids._grid import Grid
    from lidmelt.grids._write import write_geotiff

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


def run_bound(folder: Path, n_out: int) -> dict:
    """The raw bound: read both inputs, write ``n_out`` float32 GeoTIFFs with rasterio alone."""
    import contextlib

    import rasterio
    from rasterio.windows import Window

    out = folder / "bound"
    out.mkdir(exist_ok=True)
    t = time.perf_counter()
    with rasterio.open(folder / "age.tif") as age, rasterio.open(folder / "anomaly.tif") as anom:
        width, height = age.width, age.height
        profile = {
            "driver": "GTiff", "width": width, "height": height, "count": 1, "dtype": "float32",
            "crs": age.crs, "transform": age.transform, "nodata": np.nan, "tiled": True,
            "blockxsize": 512, "blockysize": 512, "compress": "ZSTD", "zstd_level": 1,
            "predictor": 3, "NUM_THREADS": "ALL_CPUS", "BIGTIFF": "IF_SAFER",
        }  # fmt: skip
        with contextlib.ExitStack() as stack:
            dsts = [
                stack.enter_context(rasterio.open(out / f"out{k}.tif", "w", **profile))
                for k in range(n_out)
            ]
            for row in range(0, height, 512):
                window = Window(0, row, width, min(512, height - row))
                sources = (age.read(1, window=window), anom.read(1, window=window))
                for k, dst in enumerate(dsts):
                    dst.write(sources[k % 2], 1, window=window)
    wall = time.perf_counter() - t
    size = sum(p.stat().st_size for p in out.iterdir())
    shutil.rmtree(out)
    return {"wall_s": wall, "files": n_out, "bytes": size}


def global_workflow(folder: Path, *, name: str, chunk_size: int, extra: str = "") -> str:
    """The workflow text of a run on the grids :func:`make_inputs` wrote in ``folder`` (no maps,
    no report, the age grid's grid), with ``extra`` after its ``chunk_size`` line."""
    return f"""
[run]
name = "{name}"
maps = false
report = false
[grid]
like = "plate_age"
[inputs.plate_age]
path = "{folder}/age.tif"
[inputs.thermal_anomaly]
path = "{folder}/anomaly.tif"
[compute]
chunk_size = {chunk_size}
{extra}"""


def run_lidmelt(folder: Path, water: float, rule: str) -> dict:
    """``run_basin`` on the inputs in ``folder``; dry unless ``water`` > 0 (constant, wt%);
    ``rule`` the top of melting (lithosphere.top_of_melting)."""
    from lidmelt._engine import run_basin
    from lidmelt.workflow import load_workflow

    wet = f"[inputs.water]\nconstant = {water}\n" if water > 0 else ""
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
{wet}
[lithosphere]
top_of_melting = "{rule}"
[compute]
chunk_size = 1024
workers = {WORKERS}
""",
        encoding="utf-8",
    )
    out = folder / "run"
    t = time.perf_counter()
    res = run_basin(load_workflow(wf, output_dir=out), progress=False)
    wall = time.perf_counter() - t
    tifs = [p for p in res.files if p.suffix == ".tif"]
    size = sum(p.stat().st_size for p in tifs)
    shutil.rmtree(out)
    return {
        "wall_s": wall,
        "timings": res.timings_s,
        "files": len(tifs),
        "bytes": size,
        "melting_cells": res.summary["statistics"]["melting_cells"],
        "data_cells": res.summary["statistics"]["data_cells"],
    }


def child(mode: str, folder: Path, n_out: int, water: float, rule: str) -> None:
    result = run_bound(folder, n_out) if mode == "bound" else run_lidmelt(folder, water, rule)
    result["peak_rss_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(json.dumps(result))


def measure(mode: str, folder: Path, *, n_out: int = 0, water: float = 0.0) -> dict:
    """Run one case in a fresh process (its own peak RSS); return its JSON result."""
    cmd = [sys.executable, __file__, "--child", mode, "--workdir", str(folder)]
    cmd += ["--n-out", str(n_out), "--water", str(water), "--top-of-melting", RULE[0]]
    out = subprocess.run(cmd, capture_output=True, text=True, check=False)
    if out.returncode:
        sys.stderr.write(out.stderr)
        raise SystemExit(f"{mode} failed (exit {out.returncode})")
    return json.loads(out.stdout.strip().splitlines()[-1])


def report_run(label: str, run: dict, bound: dict, cells: int) -> None:
    t = run["timings"]
    kernel = t.get("lid_thread_s", 0.0) + t.get("melting_thread_s", 0.0)
    outside = run["wall_s"] - kernel / WORKERS
    print(
        f"{label:<6}: {run['wall_s']:7.1f} s  {cells / run['wall_s'] / 1e6:6.2f} M cells/s  "
        f"peak RSS {run['peak_rss_mb']:6.0f} MB  run / bound {run['wall_s'] / bound['wall_s']:5.2f}"
        f"  (goal <= 1.5)  {run['bytes'] / 1e6:.0f} MB written"
    )
    print(
        f"        kernel {kernel:.1f} thread-s (lid {t.get('lid_thread_s', 0.0):.1f}, melting "
        f"{t.get('melting_thread_s', 0.0):.1f}); outside kernel ~{outside:.1f} s "
        f"= {outside / bound['wall_s']:.2f} x bound"
    )
    skip = ("lid_thread_s", "melting_thread_s")
    print("        stages: " + ", ".join(f"{k} {v:.1f}" for k, v in t.items() if k not in skip))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument(
        "--arcmin", type=int, default=2, help="grid spacing (1 or 2; more for a quick check)"
    )
    parser.add_argument("--workdir", type=Path)
    parser.add_argument("--water", type=float, default=0.01, help="wet run's water, wt%%")
    parser.add_argument("--no-wet", action="store_true", help="skip the wet run")
    parser.add_argument("--child")
    parser.add_argument("--n-out", type=int, default=0)
    parser.add_argument("--top-of-melting", choices=("geotherm", "isotherm"), default="geotherm")
    args = parser.parse_args()
    RULE[0] = args.top_of_melting
    if args.child:
        child(args.child, args.workdir, args.n_out, args.water, args.top_of_melting)
        return
    base = args.workdir or Path(tempfile.mkdtemp(prefix="lidmelt-bench-"))
    width = 360 * 60 // args.arcmin
    peaks = {}
    warm = base / "warm-up"  # builds (or loads) the melting table once, outside the timings
    warm.mkdir(parents=True, exist_ok=True)
    make_inputs(warm, 360, 180)
    measure("run", warm)
    measure("run", warm, water=args.water)
    shutil.rmtree(warm)
    for height in (width // 4, width // 2):
        folder = base / f"{width}x{height}"
        folder.mkdir(parents=True, exist_ok=True)
        t = time.perf_counter()
        make_inputs(folder, width, height)
        cells = width * height
        print(
            f"\n== grid {width} x {height} ({cells / 1e6:.1f} M cells); inputs made in "
            f"{time.perf_counter() - t:.0f} s",
            flush=True,
        )
        dry = measure("run", folder)
        bound = measure("bound", folder, n_out=dry["files"])
        print(
            f"bound : {bound['wall_s']:7.1f} s  {cells / bound['wall_s'] / 1e6:6.2f} M cells/s  "
            f"peak RSS {bound['peak_rss_mb']:6.0f} MB  ({bound['files']} float32 GeoTIFFs, "
            f"{bound['bytes'] / 1e6:.0f} MB, rasterio alone)"
        )
        print(
            f"        {dry['data_cells'] / 1e6:.1f} M ocean cells, "
            f"{dry['melting_cells'] / 1e6:.2f} M melting (dry)"
        )
        report_run("dry", dry, bound, cells)
        peaks[height] = dry["peak_rss_mb"]
        if height == width // 2 and not args.no_wet:
            report_run("wet", measure("run", folder, water=args.water), bound, cells)
        shutil.rmtree(folder)
    half, full = peaks[width // 4], peaks[width // 2]
    print(
        f"\nflat memory: dry peak RSS half-height {half:.0f} MB, full {full:.0f} MB, "
        f"full / half {full / half:.2f} (goal <= 1.15, peak <= 1500 MB)"
    )


if __name__ == "__main__":
    main()
