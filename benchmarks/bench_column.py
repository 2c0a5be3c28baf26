"""Speed of the melting column: table path, direct vectorized integration, naive solve_ivp loop.

Prints the table build time of every registered melting model, then cells per second on one
thread for each path, and the ratios; the table is evaluated in chunks of 1024 x 1024 cells,
as a basin run does. Run:

    .venv/bin/python benchmarks/bench_column.py [--cells 8388608] [--kernel-cells 4194304]

Inputs are random cells (Tp 1300-1600 C: ambient plus plumes up to 250 K; lid 0-150 km),
dry and with 0.01 wt% water. The naive baseline is what a user would otherwise write: one
scipy.integrate.solve_ivp call per cell (lidmelt.physics._reference), timed on a few cells.

The kernel section times lidmelt.physics.evaluate_cells, every output a run writes and the
flag (ambient 1350 C, upwelling given), dry, at 0.01 wt% water and with water varying
0-0.03 wt% cell by cell, on the numpy table path (the path before the compiled kernel, kept
as its fallback) and the compiled kernel, in the same run. It prints the share of cells the
kernel leaves to the numpy path and their share of its time, and the seconds the first
compiled call took (compiling, or loading numba's on-disk cache).
"""

from __future__ import annotations

import argparse
import itertools
import os
import tempfile
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=8_388_608)
    parser.add_argument("--direct-cells", type=int, default=2000)
    parser.add_argument("--naive-cells", type=int, default=3)
    parser.add_argument("--kernel-cells", type=int, default=4_194_304)
    args = parser.parse_args()
    os.environ.setdefault("LIDMELT_CACHE_DIR", tempfile.mkdtemp(prefix="lidmelt-bench-"))

    from lidmelt.physics import MODELS, evaluate_cells, get_model, get_table, melt_column
    from lidmelt.physics._cells import CellOptions
    from lidmelt.physics._kernel import AVAILABLE, compile_seconds
    from lidmelt.physics._kernel_records import Cells
    from lidmelt.physics._reference import solve_ivp_column
    from lidmelt.physics._table import MeltTable

    for name in MODELS:  # every registered melting model, at its published parameters
        t = time.perf_counter()
        MeltTable.build(get_model(name))
        print(f"table build ({name}): {time.perf_counter() - t:.2f} s", flush=True)
    table = get_table()
    if AVAILABLE:  # before any other call, so that this one compiles (or loads numba's cache)
        t = time.perf_counter()
        evaluate_cells(
            Cells(np.full(64, 1400.0), np.full(64, 50.0), 0.0),
            CellOptions(ambient_potential_temperature_c=1350.0),
            dtype=np.float32,
        )
        print(
            f"compiled kernel, first call: {time.perf_counter() - t:.2f} s (compiling it, or "
            f"loading it from numba's on-disk cache where that is warm: {compile_seconds():.2f} s)"
        )

    rng = np.random.default_rng(0)
    tp = rng.uniform(1300.0, 1600.0, args.cells)
    lid = rng.uniform(0.0, 150.0, args.cells)
    rates = {}
    chunk = 1 << 20  # the cells of one 1024 x 1024 chunk of a basin run
    for water in (0.0, 0.01):
        melt_column(tp[:chunk], lid[:chunk], water, table=table)  # warm the water slice
        best = np.inf
        for _ in range(3):
            t = time.perf_counter()
            for start in range(0, args.cells, chunk):
                melt_column(
                    tp[start : start + chunk], lid[start : start + chunk], water, table=table
                )
            best = min(best, time.perf_counter() - t)
        rates[f"table, water {water}"] = args.cells / best

    n = args.direct_cells
    t = time.perf_counter()
    melt_column(tp[:n], lid[:n], 0.0, method="direct")
    rates["direct vectorized, dry"] = n / (time.perf_counter() - t)

    m = args.naive_cells
    t = time.perf_counter()
    for k in range(m):
        solve_ivp_column(tp[k], lid[k], 0.0)
    rates["naive solve_ivp loop, dry"] = m / (time.perf_counter() - t)

    print(f"{'path':<30} {'cells/s':>14}")
    for name, rate in rates.items():
        print(f"{name:<30} {rate:14.4g}")
    naive = rates["naive solve_ivp loop, dry"]
    print(
        f"table / naive: {rates['table, water 0.0'] / naive:.3g} x; "
        f"direct / naive: {rates['direct vectorized, dry'] / naive:.3g} x"
    )
    kernel_rates(table, rng, args.kernel_cells, chunk, AVAILABLE)
    engine_rates(table, args.kernel_cells)


def kernel_rates(table, rng, cells, chunk, compiled_available) -> None:
    """Cells/s of evaluate_cells (every output and the flag), numpy table path vs compiled."""
    from lidmelt.physics import evaluate_cells
    from lidmelt.physics._cells import CellOptions
    from lidmelt.physics._kernel_records import Cells

    tp = rng.uniform(1300.0, 1600.0, cells)
    lid = rng.uniform(0.0, 150.0, cells)
    cases = {
        "dry": 0.0,
        "water 0.01 wt%": 0.01,
        "water 0-0.03 wt% per cell": rng.uniform(0.0, 0.03, cells),
    }
    goals = {"dry": 20e6, "water 0.01 wt%": 20e6, "water 0-0.03 wt% per cell": 5e6}
    upwelling = np.full(chunk, 30.0)
    print(
        f"\nkernel: evaluate_cells, every output and the flag, {cells} cells in chunks of {chunk}"
    )
    print(f"{'case':<27} {'path':<9} {'M cells/s':>10} {'goal':>6} {'to numpy':>9} {'its time':>9}")
    paths = [("numpy", False)] + ([("compiled", True)] if compiled_available else [])
    for case, water in cases.items():
        for path, compiled in paths:
            best, best_clock = np.inf, {}
            options = CellOptions(
                ambient_potential_temperature_c=1350.0, table=table, compiled=compiled
            )
            for _ in range(2):
                clock = {"numpy_cells": 0, "numpy_s": 0.0}
                t = time.perf_counter()
                for start in range(0, cells, chunk):
                    sl = slice(start, start + chunk)
                    sub = Cells(
                        tp[sl], lid[sl], water if np.ndim(water) == 0 else water[sl],
                        upwelling_mm_yr=upwelling[: tp[sl].size],
                    )  # fmt: skip
                    timings = evaluate_cells(sub, options, dtype=np.float32).timings
                    clock["numpy_cells"] += timings.numpy_cells
                    clock["numpy_s"] += timings.numpy_s
                took = time.perf_counter() - t
                if took < best:
                    best, best_clock = took, clock
            share = best_clock.get("numpy_cells", 0) / cells if compiled else 1.0
            time_share = best_clock.get("numpy_s", 0.0) / best if compiled else 1.0
            goal = f"{goals[case] / 1e6:.0f}" if compiled else ""
            print(
                f"{case:<27} {path:<9} {cells / best / 1e6:10.3f} {goal:>6} "
                f"{share:9.2%} {time_share:9.2%}",
                flush=True,
            )


def engine_rates(table, cells: int) -> None:
    """Cells/s per core of the kernel inside the engine (:func:`lidmelt._engine.evaluate_chunk`):
    the top of melting from plate age (half-space and GDH1; the isotherm rule and the geotherm
    rule, lithosphere.top_of_melting), Tp, every output, the flag and the stacked float32 chunk
    a run writes, on 1024 x 1024 chunks of an invented smooth basin (ages 0-180 Ma along x, a
    Gaussian plume of 250 K, 8 % land as NaN). The goals are the isotherm rule's; the geotherm
    rule's is to stay within a few times the isotherm rule's."""
    from lidmelt._engine import ChunkInputs, KernelSettings, evaluate_chunk
    from lidmelt.physics import get_cooling_model

    side = 1024
    y, x = np.mgrid[0:side, 0:side].astype(np.float32)
    age = 180.0 * x / side
    age[:, : side // 12] = np.nan  # land
    anomaly = 250.0 * np.exp(-((x - 600.0) ** 2 + (y - 500.0) ** 2) / (2 * 150.0**2))
    reps = max(1, cells // (side * side))
    print(f"\nkernel in the engine (evaluate_chunk), {reps} chunks of {side} x {side}")
    print(f"{'case':<27} {'lid':<11} {'rule':<9} {'M cells/s':>10} {'goal':>6}")
    waters = {"dry": 0.0, "water 0.01 wt%": 0.01}
    waters["water 0-0.03 wt% per cell"] = np.float32(0.03) * y / side
    goals = {"dry": 20, "water 0.01 wt%": 20, "water 0-0.03 wt% per cell": 5}
    for cooling, case, rule in itertools.product(
        ("half-space", "gdh1"), waters, ("isotherm", "geotherm")
    ):
        water = waters[case]
        settings = KernelSettings(
            model=table.model, table=table, cooling=get_cooling_model(cooling),
            lid_isotherm_c=1100.0, ambient_c=1350.0, min_top_km=7.0, method="table",
            sources={}, top_of_melting=rule,
        )  # fmt: skip
        blocks = ChunkInputs(age, np.nan, anomaly, water)
        evaluate_chunk(blocks, settings=settings)  # warm the caches
        best = np.inf
        for _ in range(2):
            t = time.perf_counter()
            for _ in range(reps):
                evaluate_chunk(blocks, settings=settings)
            best = min(best, time.perf_counter() - t)
        rate = reps * side * side / best / 1e6
        goal = goals[case] if rule == "isotherm" else ""
        print(f"{case:<27} {cooling:<11} {rule:<9} {rate:10.2f} {goal:>6}", flush=True)


if __name__ == "__main__":
    main()
