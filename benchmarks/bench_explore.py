"""Size and time of the interactive map page (maps/explore.html) of a 2' global run.

Makes the synthetic global inputs of bench_basin.py (10800 x 5400 cells at 2 arc-minutes,
invented: a sinusoidal age pattern and two Gaussian anomalies), runs lidmelt on them without
maps, then writes the run's map page and prints its size, its stride (one cell shown per
stride x stride block), the layers, the time it took and the peak RSS of that step. Run:

    .venv/bin/python benchmarks/bench_explore.py [--arcmin 2] [--workdir DIR]
"""

from __future__ import annotations

import argparse
import json
import re
import resource
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_basin import make_inputs


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--arcmin", type=float, default=2.0)
    parser.add_argument("--workdir", type=Path)
    args = parser.parse_args()
    from lidmelt._engine import run_basin
    from lidmelt.products._maps._explore import write_explore_page
    from lidmelt.workflow import load_workflow

    folder = args.workdir or Path(tempfile.mkdtemp(prefix="lidmelt-explore-"))
    width, height = round(360 * 60 / args.arcmin), round(180 * 60 / args.arcmin)
    if not (folder / "age.tif").is_file():
        make_inputs(folder, width, height)
    wf = folder / "global.toml"
    wf.write_text(
        f'[run]\nname = "bench"\nmaps = false\nreport = false\n[grid]\nlike = "plate_age"\n'
        f'[inputs.plate_age]\npath = "{folder / "age.tif"}"\n'
        f'[inputs.thermal_anomaly]\npath = "{folder / "anomaly.tif"}"\n',
        encoding="utf-8",
    )
    t = time.perf_counter()
    run_basin(load_workflow(wf, output_dir=folder / "run"), progress=False)
    print(f"run {width} x {height}: {time.perf_counter() - t:.1f} s")
    rss0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    t = time.perf_counter()
    page = write_explore_page(folder / "run")
    seconds = time.perf_counter() - t
    text = page.read_text(encoding="utf-8")
    data = json.loads(re.search(r'id="lidmelt-data">(.*?)</script>', text, re.S).group(1))
    frame = data["frame"]
    values = sum(len(layer["values"]) for layer in data["layers"])
    images = sum(len(layer["image"]) for layer in data["layers"])
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(
        f"explore.html: {page.stat().st_size / 1e6:.1f} MB ({len(data['layers'])} layers; "
        f"images {images / 1e6:.1f} MB, values {values / 1e6:.1f} MB as base64), stride "
        f"{frame['stride']} ({frame['cols']} x {frame['rows']} cells shown), {seconds:.1f} s, "
        f"peak RSS {rss:.0f} MB (before the page: {rss0:.0f} MB)"
    )


if __name__ == "__main__":
    main()
