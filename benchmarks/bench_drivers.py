"""How many members does a driver's variance share need? Precision of the first-order shares and
their bootstrap intervals against a known answer, by the number of members.

The case is the held-out check of tests/test_ensemble_drivers.py: a uniform basin beneath a
60 km lid (Katz et al. 2003 by its table), the ambient Tp uniform on 1325-1375 C and the source
water uniform on 0-0.05 wt% (both matter), and the crust density (2800-3000 kg/m3), which does
not change the melt thickness (its true share is 0). The true shares come from the midpoint rule
on a 400 x 400 grid of the two keys. For each member count N and seeds 1..S (Latin hypercube;
``--sampling random``: plain random members), lidmelt.ensemble._drivers estimates the shares;
the script prints, per key, the mean and the standard deviation of the estimates over the
seeds, the largest error, the mean width of the 90 % interval and how often it holds the truth,
and the run time of one drivers call. Run:

    .venv/bin/python benchmarks/bench_drivers.py [--seeds 20] [--members 20 50 100 200 400]
        [--sampling random]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from lidmelt._config_tables import VarySpec
from lidmelt.ensemble._drivers import drivers
from lidmelt.ensemble._sampling import draw_members
from lidmelt.physics import evaluate_cells, get_model, get_table
from lidmelt.physics._cells import CellOptions
from lidmelt.physics._kernel_records import Cells

LID_KM, TP, WATER = 60.0, (1325.0, 1375.0), (0.0, 0.05)
VARY = (
    VarySpec(key="ambient Tp", distribution="uniform", parameters=TP),
    VarySpec(key="water", distribution="uniform", parameters=WATER),
    VarySpec(key="crust density", distribution="uniform", parameters=(2800.0, 3000.0)),
)


def melt(tp: np.ndarray, water: np.ndarray) -> np.ndarray:
    model = get_model("katz2003")
    options = CellOptions(
        ambient_potential_temperature_c=1350.0, model=model, table=get_table(model),
        min_top_km=7.0,
    )  # fmt: skip
    out = evaluate_cells(Cells(tp, np.full(tp.shape, LID_KM), water), options, dtype=np.float64)
    return out.outputs["melt_thickness_km"]


def truth(n: int = 400) -> list[float]:
    nodes = (np.arange(n) + 0.5) / n
    tp, water = np.meshgrid(TP[0] + 50.0 * nodes, WATER[1] * nodes, indexing="ij")
    h = melt(tp.ravel(), water.ravel()).reshape(n, n)
    return [float(h.mean(axis=1).var() / h.var()), float(h.mean(axis=0).var() / h.var()), 0.0]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=20)
    parser.add_argument("--members", type=int, nargs="+", default=[20, 50, 100, 200, 400])
    parser.add_argument(
        "--sampling", default="latin_hypercube", choices=["latin_hypercube", "random"]
    )
    args = parser.parse_args()
    true = truth()
    print("true shares: " + ", ".join(f"{s.key} {t:.3f}" for s, t in zip(VARY, true, strict=True)))
    for n in args.members:
        est, low, high, seconds = [], [], [], []
        for seed in range(1, args.seeds + 1):
            samples = draw_members(VARY, n, seed=seed, sampling=args.sampling)
            tp, water = (np.array([row[d] for row in samples]) for d in range(2))
            t0 = time.perf_counter()
            found = {d["key"]: d for d in drivers(VARY, samples, melt(tp, water), seed=seed)}
            seconds.append(time.perf_counter() - t0)
            est.append([found[s.key]["variance_fraction"] for s in VARY])
            low.append([found[s.key]["variance_fraction_interval"][0] for s in VARY])
            high.append([found[s.key]["variance_fraction_interval"][1] for s in VARY])
        est, low, high = np.array(est), np.array(low), np.array(high)
        print(
            f"N = {n} members ({args.sampling}), {args.seeds} seeds, "
            f"{np.mean(seconds):.2f} s per drivers call"
        )
        for k, spec in enumerate(VARY):
            err = np.abs(est[:, k] - true[k])
            held = np.mean((low[:, k] <= true[k]) & (true[k] <= high[:, k]))
            print(
                f"  {spec.key:14s} mean {est[:, k].mean():.3f} sd {est[:, k].std():.4f} "
                f"largest error {err.max():.4f}; 90 % interval width "
                f"{np.mean(high[:, k] - low[:, k]):.3f}, holds the truth in {100 * held:.0f} %"
            )


if __name__ == "__main__":
    main()
