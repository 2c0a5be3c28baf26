"""Benchmark: writing a lazy 5400 x 10800 float32 grid (58.3 million cells, 233 MB) to GeoTIFF.

Prints the write time and the peak resident memory of each case, each measured in a fresh
Python process so that peaks do not carry over. The grid is generated lazily by dask in
1024 x 2048 chunks (a smooth invented field with about a fifth of the cells NaN), so the data
never exist in memory as a whole unless a case computes them; about 3 s of each write is data
generation. A flat memory profile means the peak stays far below the 233 MB array plus the
baseline.

Usage::

    .venv/bin/python benchmarks/bench_write.py            # all cases
    .venv/bin/python benchmarks/bench_write.py --case gtiff
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

HEIGHT, WIDTH = 5400, 10800  # 2 arc-minute global grid
CHUNKS = (1024, 2048)
CASES = {
    "align-same-grid": "align() of the lazy grid onto its own target (must not compute)",
    "gtiff": "write_geotiff(cog=False): tiled ZSTD GTiff, chunk by chunk",
    "cog": "write_geotiff(cog=True): the GTiff, then copied to COG layout",
    "numpy-gtiff": "reference: compute the whole array first, then write_geotiff(cog=False)",
}


def peak_rss_mb() -> float:
    """Peak resident set size of this process so far, MB (Linux reports KiB)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def lazy_grid():
    """The invented test field on a global 2' grid, as a lazy dask-backed DataArray."""
    import dask.array as dsa
    import numpy as np

    from lidmelt.grids._grid import Grid

    target = Grid.from_extent(-180.0, 180.0, -90.0, 90.0, 1.0 / 30.0)
    assert target.shape == (HEIGHT, WIDTH)

    def block(b, block_info=None):
        (r0, r1), (c0, c1) = block_info[0]["array-location"]
        lat = 90.0 - (np.arange(r0, r1) + 0.5) / 30.0
        lon = -180.0 + (np.arange(c0, c1) + 0.5) / 30.0
        lat_r, lon_r = np.radians(lat)[:, None], np.radians(lon)[None, :]
        out = 50.0 * np.cos(lat_r) * np.sin(3 * lon_r) + 20.0 * np.sin(5 * lat_r)
        out[np.sin(7 * lon_r) * np.cos(4 * lat_r) > 0.58] = np.nan  # about 21 % NaN
        return out.astype(np.float32)

    data = dsa.empty((HEIGHT, WIDTH), chunks=CHUNKS, dtype=np.float32).map_blocks(
        block, dtype=np.float32
    )
    return target, target.template(chunks=CHUNKS).copy(data=data)


def run_case(case: str) -> dict:
    import numpy as np

    from lidmelt.grids._align import align
    from lidmelt.grids._write import write_geotiff

    target, da = lazy_grid()
    baseline = peak_rss_mb()
    with tempfile.TemporaryDirectory(dir=Path(__file__).parent) as folder:
        path = Path(folder) / "bench.tif"
        start = time.perf_counter()
        if case == "align-same-grid":
            out = align(da, target)
            assert out.data.name == da.data.name
        elif case == "gtiff":
            write_geotiff(da, path, description="bench", units="K", tags={}, cog=False)
        elif case == "cog":
            write_geotiff(da, path, description="bench", units="K", tags={}, cog=True)
        elif case == "numpy-gtiff":
            loaded = da.copy(data=np.asarray(da.data))
            write_geotiff(loaded, path, description="bench", units="K", tags={}, cog=False)
        else:
            msg = f"unknown case {case!r}; expected one of {list(CASES)}"
            raise SystemExit(msg)
        seconds = time.perf_counter() - start
        size_mb = path.stat().st_size / 1e6 if path.exists() else 0.0
    return {
        "case": case,
        "seconds": seconds,
        "peak_rss_mb": peak_rss_mb(),
        "baseline_rss_mb": baseline,
        "file_mb": size_mb,
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--case", choices=list(CASES), help="run one case in this process")
    args = parser.parse_args(argv)
    if args.case:
        print(json.dumps(run_case(args.case)))
        return 0
    print(
        f"grid {HEIGHT} x {WIDTH} float32 ({HEIGHT * WIDTH * 4 / 1e6:.0f} MB), "
        f"dask chunks {CHUNKS[0]} x {CHUNKS[1]}"
    )
    print(f"{'case':<16} {'seconds':>8} {'peak RSS MB':>12} {'baseline MB':>12} {'file MB':>8}")
    for case in CASES:
        proc = subprocess.run(
            [sys.executable, __file__, "--case", case], capture_output=True, text=True, check=True
        )
        r = json.loads(proc.stdout.strip().splitlines()[-1])
        print(
            f"{case:<16} {r['seconds']:8.2f} {r['peak_rss_mb']:12.0f} "
            f"{r['baseline_rss_mb']:12.0f} {r['file_mb']:8.1f}"
        )
    for case, text in CASES.items():
        print(f"  {case}: {text}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
