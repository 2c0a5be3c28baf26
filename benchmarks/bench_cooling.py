"""Throughput of the lid from plate age: the lookup (lidmelt.physics.lid_lookup) vs the exact
lidmelt.physics._cooling.isotherm_depth_km, in cells per second on one core.

Run:  .venv/bin/python benchmarks/bench_cooling.py [--cells 4194304] [--repeat 5]

Ages are uniform on 0-200 Ma (float32, as a plate-age GeoTIFF holds them, in random order). For
each named cooling model it prints the lookup's build time (cache cleared), its node count and
worst midpoint error, and the cells per second of the lookup and of the exact function, plus
the lookup on an invented smooth age field with 5 % NaN. Goal (issue 10): the lid costs little
next to a 20 M cells/s melting kernel, i.e. at least ~50 M cells/s per core. One core: numpy
runs these loops single-threaded.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from lidmelt.physics import _cooling as cooling
from lidmelt.physics import _lidlookup as lidlookup
from lidmelt.physics._lidlookup import lid_lookup


def invented_ages(cells: int, *, seed: int = 0) -> np.ndarray:
    """A smooth invented age field (Ma, float32) with ~5 % NaN; shape (rows, 8192)."""
    width = 8192
    rows = max(1, cells // width)
    rng = np.random.default_rng(seed)
    x = np.linspace(-1.0, 1.0, width, dtype=np.float32)
    y = np.linspace(0.0, 1.0, rows, dtype=np.float32)[:, None]
    ages = 150.0 * np.abs(x[None, :] - 0.1 * np.sin(6.0 * y)) + 2.0 * y
    ages += rng.normal(0.0, 0.5, size=ages.shape).astype(np.float32)
    ages = np.abs(ages)
    ages[:, : width // 20] = np.nan
    return ages.astype(np.float32)


def best_rate(func, cells: int, repeat: int) -> float:
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        func()
        best = min(best, time.perf_counter() - t0)
    return cells / best


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=4_194_304, help="ages in the test arrays")
    parser.add_argument("--repeat", type=int, default=5, help="repetitions (best is printed)")
    parser.add_argument("--isotherm", type=float, default=1100.0, help="lid isotherm, deg C")
    args = parser.parse_args()

    rng = np.random.default_rng(1)
    ages = rng.uniform(0.0, 200.0, size=args.cells).astype(np.float32)
    field = invented_ages(args.cells)
    print(
        f"lid from age, isotherm {args.isotherm:g} C, {ages.size:,} float32 ages uniform on "
        f"0-200 Ma; goal >= 50 M cells/s per core"
    )
    for name, model in cooling.COOLING_MODELS.items():
        lidlookup._plate_lookup.cache_clear()  # time a fresh build
        lidlookup._half_space.cache_clear()
        t0 = time.perf_counter()
        lookup = lid_lookup(args.isotherm, model=model)
        build = time.perf_counter() - t0
        cooling.isotherm_depth_km(args.isotherm, 1.0, model=model)  # its own table, built once
        r_lookup = best_rate(lambda lk=lookup: lk.depth_km(ages), ages.size, args.repeat)
        r_field = best_rate(lambda lk=lookup: lk.depth_km(field), field.size, args.repeat)
        r_exact = best_rate(
            lambda m=model: cooling.isotherm_depth_km(args.isotherm, ages, model=m),
            ages.size,
            args.repeat,
        )
        nodes = lookup.base_km.size or "exact line"
        print(
            f"{name:>10}: build {build * 1e3:6.1f} ms, nodes {nodes}, worst midpoint error "
            f"{lookup.midpoint_error_km * 1e3:5.2f} m | lookup {r_lookup / 1e6:6.1f} M cells/s "
            f"(smooth field with NaN {r_field / 1e6:6.1f}) | isotherm_depth_km "
            f"{r_exact / 1e6:6.1f} M cells/s"
        )


if __name__ == "__main__":
    main()
