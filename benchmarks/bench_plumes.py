"""Time of a run with a plume catalogue: reading and checking its rows, and the whole run.

Run:  .venv/bin/python benchmarks/bench_plumes.py [--rows 1000] [--grid 36x24]

Writes an invented basin (a plate-age GeoTIFF of the given size at 0.25 degree, its cells on
0-20 Ma) and an invented catalogue of ROWS plumes of radius 50-400 km and 1-5 K inside it, then
prints the seconds of ``load_workflow`` (the rows read and checked), of ``run_basin`` and the
estimate of the plumes' work (``lidmelt.grids._anomaly.plume_cells``: cells within reach,
summed). Goal (issue 24): a 1000-row catalogue on a small grid in seconds, not the 35 s (and
more) of a dask layer per plume, whose graph optimisation grew with the square of the plumes.
"""

from __future__ import annotations

import argparse
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np


def write_basin(folder: Path, rows: int, width: int, height: int) -> Path:
    """The invented age grid, catalogue and workflow under ``folder``; return the workflow."""
    import rasterio
    from rasterio.transform import from_origin

    age = np.broadcast_to(np.linspace(0.5, 20.0, width, dtype="float32"), (height, width))
    with rasterio.open(
        folder / "age.tif", "w", driver="GTiff", height=height, width=width, count=1,
        dtype="float32", crs="EPSG:4326", transform=from_origin(-30, 10, 0.25, 0.25),
        nodata=np.nan,
    ) as dst:  # fmt: skip
        dst.write(age, 1)
        dst.units = ("Ma",)
    rng = np.random.default_rng(1)
    east, south = -30 + 0.25 * width, 10 - 0.25 * height
    lines = ["name,lon,lat,radius_km,peak_excess_k"]
    for i in range(rows):
        lon, lat = rng.uniform(-30, east), rng.uniform(south, 10)
        lines.append(f"p{i},{lon:.3f},{lat:.3f},{rng.uniform(50, 400):.1f},{rng.uniform(1, 5):.2f}")
    (folder / "plumes.csv").write_text("\n".join(lines) + "\n")
    wf = folder / "bench.toml"
    wf.write_text(
        '[run]\nname = "bench"\nmaps = false\nreport = false\n[grid]\nlike = "plate_age"\n'
        '[inputs.plate_age]\npath = "age.tif"\n[inputs.thermal_anomaly]\n'
        'plumes_file = "plumes.csv"\n[compute]\nchunk_size = 256\n'
    )
    return wf


def main() -> None:
    from lidmelt._engine import run_basin
    from lidmelt._run_inputs import resolve_target_grid
    from lidmelt.grids._anomaly import Plume, plume_cells
    from lidmelt.workflow import load_workflow

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1000, help="plumes in the catalogue")
    parser.add_argument("--grid", default="36x24", help="grid WIDTHxHEIGHT, 0.25 degree cells")
    args = parser.parse_args()
    width, height = (int(v) for v in args.grid.split("x"))
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        wf = write_basin(folder, args.rows, width, height)
        t0 = time.perf_counter()
        cfg = load_workflow(wf, output_dir=folder / "out")
        t1 = time.perf_counter()
        plumes = [Plume(**p.plume_fields()) for p in cfg.inputs.thermal_anomaly.plumes]
        work = plume_cells(resolve_target_grid(cfg), plumes)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            run_basin(cfg, progress=False)
        t2 = time.perf_counter()
    print(
        f"{args.rows} catalogue plumes on a {width} x {height} grid: load_workflow {t1 - t0:.2f} "
        f"s, run_basin {t2 - t1:.2f} s; plume work estimate {work:,} cells (goal: seconds)"
    )


if __name__ == "__main__":
    main()
