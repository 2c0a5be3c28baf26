"""Throughput of lidmelt.physics.cooling.isotherm_depth_km (cells per second).

Run:  .venv/bin/python benchmarks/bench_cooling.py [--cells 58000000] [--repeat 3]

The ages are an invented, spatially smooth field (ages growing away from a ridge, with NaN on a
margin and some random jitter), float32 as a plate-age GeoTIFF would hold them. It prints, for
each named model, the table build time and the cells per second of one call over the whole
array and of calls over 2048 x 2048 chunks (what the engine does), plus a call on random ages
(no spatial coherence). One core: numpy runs these loops single-threaded.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from lidmelt.physics import cooling


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
    parser.add_argument("--cells", type=int, default=58_000_000, help="ages in the test array")
    parser.add_argument("--repeat", type=int, default=3, help="repetitions (best is printed)")
    parser.add_argument("--isotherm", type=float, default=1100.0, help="lid isotherm, deg C")
    args = parser.parse_args()

    ages = invented_ages(args.cells)
    n = ages.size
    chunk = 2048
    rng = np.random.default_rng(1)
    random_ages = rng.uniform(0.0, 300.0, size=4_194_304).astype(np.float32)
    print(f"isotherm_depth_km, isotherm {args.isotherm:g} C, {n:,} float32 ages {ages.shape}")
    for name, model in cooling.COOLING_MODELS.items():
        cooling._plate_isotherm_table.cache_clear()
        t0 = time.perf_counter()
        cooling.isotherm_depth_km(args.isotherm, ages[:1, :1], model=model)
        build = time.perf_counter() - t0

        def whole(model=model):
            cooling.isotherm_depth_km(args.isotherm, ages, model=model)

        def chunked(model=model):
            for r in range(0, ages.shape[0], chunk):
                for c in range(0, ages.shape[1], chunk):
                    cooling.isotherm_depth_km(
                        args.isotherm, ages[r : r + chunk, c : c + chunk], model=model
                    )

        def scattered(model=model):
            cooling.isotherm_depth_km(args.isotherm, random_ages, model=model)

        r_whole = best_rate(whole, n, args.repeat)
        r_chunk = best_rate(chunked, n, args.repeat)
        r_rand = best_rate(scattered, random_ages.size, args.repeat)
        print(
            f"{name:>10}: first call (table build) {build * 1e3:7.1f} ms | "
            f"whole array {r_whole / 1e6:6.1f} M cells/s | "
            f"2048x2048 chunks {r_chunk / 1e6:6.1f} M cells/s | "
            f"random ages {r_rand / 1e6:6.1f} M cells/s"
        )


if __name__ == "__main__":
    main()
