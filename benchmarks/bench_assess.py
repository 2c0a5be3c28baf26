"""Speed of scoring maps against known features, beside the goals of issue 22.

1. ``lidmelt assess`` of a 2' global run (10800 x 5400 cells, the invented inputs of
   bench_basin.py, written by a run without maps) against 10,000 invented features drawn at
   random over its ocean cells: seconds, goal < 10 s.
2. An ensemble stage with and without ``[assess]`` (the same members, the demo basin's
   workflow with ``--members`` members, or with ``--global`` the 2' global grid): the stage's
   seconds both ways (after an untimed run that pays the first-use costs, the melting table,
   numba's compilation and the file caches, which would otherwise fall on whichever way is
   timed first; ``--repeats`` timed runs each way, alternating, the best kept), goal: scoring
   adds < 20 %; also the size of the members' indicator bits kept for the weighted map and
   the time of writing that map (what a second pass over the members would have cost instead
   is the members' kernel time, the stage without scoring).

Both are measured in the same process, one after the other. Run:

    .venv/bin/python benchmarks/bench_assess.py [--members 100] [--repeats 1] [--global]
        [--skip-global-assess]
"""

from __future__ import annotations

import argparse
import dataclasses
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]


def invented_features(run_dir: Path, count: int, out: Path, seed: int = 0) -> Path:
    """``count`` invented features at random ocean cells of the run (by cell, uniformly)."""
    import rasterio

    with rasterio.open(run_dir / "anomaly_melt_thickness_km.tif") as src:
        values = src.read(1)
        transform = src.transform
    rng = np.random.default_rng(seed)
    cells = rng.choice(np.flatnonzero(np.isfinite(values.ravel())), count, replace=False)
    rows, cols = np.divmod(cells, values.shape[1])
    xs, ys = rasterio.transform.xy(transform, rows, cols)
    lines = ["name,longitude,latitude"]
    lines += [f"f{k},{x:.6f},{y:.6f}" for k, (x, y) in enumerate(zip(xs, ys, strict=True))]
    out.write_text("\n".join(lines) + "\n")
    return out


def bench_global_assess(folder: Path) -> None:
    from bench_basin import global_workflow, make_inputs

    from lidmelt._engine import run_basin
    from lidmelt.products._assess._assessment import assess
    from lidmelt.workflow import load_workflow

    make_inputs(folder, 10800, 5400)
    wf = folder / "global.toml"
    wf.write_text(global_workflow(folder, name="global", chunk_size=512))
    cfg = load_workflow(wf, output_dir=folder / "run")
    run_basin(cfg, progress=False)
    features = invented_features(folder / "run", 10_000, folder / "features.csv")
    t0 = time.perf_counter()
    doc = assess(folder / "run", features)
    seconds = time.perf_counter() - t0
    verdict = "met" if seconds < 10 else "NOT met"
    print(f"2' global run ({10800 * 5400:,} cells) against 10,000 features: {seconds:.1f} s "
          f"(goal < 10 s: {verdict}); AUC {doc['auc']:.4f}")  # fmt: skip


def stage_seconds(cfg) -> tuple[float, dict]:
    from lidmelt._engine import run_basin
    from lidmelt.ensemble import ensemble_stages

    t0 = time.perf_counter()
    result = run_basin(cfg, progress=False, extra_stages=ensemble_stages(cfg, announce=False))
    total = time.perf_counter() - t0
    entry = result.summary["ensemble"]
    return entry["compute_s"], {**entry.get("assessment", {}), "run_s": total}


def bench_ensemble(workflow: Path, out: Path, overrides: list[str], repeats: int = 1) -> None:
    from lidmelt.workflow import load_workflow

    cfg = load_workflow(workflow, overrides=overrides, output_dir=out / "scored")
    plain = dataclasses.replace(cfg, assess=None)
    # untimed: the first-use costs (the melting table, compilation, file caches) that the first
    # timed run alone would pay; then each way is timed ``repeats`` times, alternating, best kept
    stage_seconds(plain)
    without, scored = [], []
    for _ in range(repeats):
        without.append(stage_seconds(plain)[0])
        seconds, entry = stage_seconds(cfg)
        scored.append(seconds)
    without_s, with_s = min(without), min(scored)
    extra = with_s / without_s - 1.0
    print(f"ensemble stage of {cfg.ensemble.members} members (after a warm-up run, best of "
          f"{repeats}): {without_s:.1f} s without scoring, {with_s:.1f} s with "
          f"({100 * extra:+.1f} %; goal < +20 %: "
          f"{'met' if extra < 0.2 else 'NOT met'})")  # fmt: skip
    without = without_s
    print(f"  members' indicator bits kept: {entry.get('masks_bytes', 0) / 1e6:.2f} MB; "
          f"scores, weights and the weighted map after the pass: {entry.get('scoring_s', 0):.2f}"
          f" s (a second pass over the members would cost about {without:.1f} s)")  # fmt: skip


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--members", type=int, default=100)
    parser.add_argument("--global", dest="global_grid", action="store_true",
                        help="the ensemble on the 2' global grid too (slow)")  # fmt: skip
    parser.add_argument("--skip-global-assess", action="store_true")
    parser.add_argument("--repeats", type=int, default=1,
                        help="timed runs each way, after an untimed one that caches the "
                        "tables")  # fmt: skip
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        if not args.skip_global_assess:
            bench_global_assess(folder / "global")
        demo = folder / "demo.toml"
        text = (ROOT / "workflows" / "demo_ensemble.toml").read_text()
        if "[assess]" not in text:
            text += '\n[assess]\nfeatures = "known_seamounts.csv"\n'
        demo.write_text(text.replace("../grids_demo/", f"{ROOT}/grids_demo/").replace(
            '"known_seamounts.csv"', f'"{ROOT}/grids_demo/known_seamounts.csv"'))  # fmt: skip
        sets = [f"ensemble.members={args.members}", "run.netcdf=false", "run.maps=false",
                "run.report=false"]  # fmt: skip
        bench_ensemble(demo, folder / "demo", sets, args.repeats)
        if args.global_grid:
            wf = folder / "global" / "global.toml"
            feats = folder / "global" / "features.csv"
            from bench_basin import global_workflow

            text = global_workflow(folder / "global", name="global", chunk_size=512)
            wf.write_text(text + ENSEMBLE.format(feats))
            bench_ensemble(wf, folder / "gens", [f"ensemble.members={args.members}"], args.repeats)


ENSEMBLE = """
[ensemble]
members = 100
memory_limit_gb = 8
[ensemble.vary]
"model.ambient_potential_temperature_c" = {{ normal = [1350.0, 25.0] }}
"lithosphere.lid_isotherm_c" = {{ uniform = [1050.0, 1250.0] }}
[assess]
features = "{}"
"""


if __name__ == "__main__":
    main()
