"""Speed of the melting column: table path, direct vectorized integration, naive solve_ivp loop.

Prints the table build time of every registered melting model, then cells per second on one
thread for each path, and the ratios; the table is evaluated in chunks of 1024 x 1024 cells,
as a basin run does. Run:

    .venv/bin/python benchmarks/bench_column.py [--cells 8388608]

Inputs are random cells (Tp 1300-1600 C: ambient plus plumes up to 250 K; lid 0-150 km),
dry and with 0.01 wt% water. The naive baseline is what a user would otherwise write: one
scipy.integrate.solve_ivp call per cell (lidmelt.physics.reference), timed on a few cells.
"""

from __future__ import annotations

import argparse
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
    args = parser.parse_args()
    os.environ.setdefault("LIDMELT_CACHE_DIR", tempfile.mkdtemp(prefix="lidmelt-bench-"))

    from lidmelt.physics import MODELS, get_model, get_table, melt_column
    from lidmelt.physics.reference import solve_ivp_column
    from lidmelt.physics.table import MeltTable

    for name in MODELS:  # every registered melting model, at its published parameters
        t = time.perf_counter()
        MeltTable.build(get_model(name))
        print(f"table build ({name}): {time.perf_counter() - t:.2f} s", flush=True)
    table = get_table()

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


if __name__ == "__main__":
    main()
