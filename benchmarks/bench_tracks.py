"""Melting through time against the single run's kernel: speed and memory of a history.

The goals (issue 21): a history of 100 time steps over the demo grid (workflows/demo_tracks.toml,
its invented plate motion) runs in under 20 x the demo's single run, and its rate in time steps
x cells per second is at least 0.5 x the single run's kernel rate (cells per second of the
kernel's thread time); memory stays flat in the number of time steps. In-process, one worker
thread each (the kernel's thread time then is its wall time):

1. the single run alone (no [motion]) three times: its fastest kernel thread time (lid and
   melting) and its total time;
2. the same run with its history of 100 steps (max_age_ma 40, step_ma 0.4, 101 evaluations with
   the present): the history stage's time and the whole run's.

Then the peak resident memory of the whole run (a fresh process each, ``ru_maxrss``) with 25
and with 100 steps. Run:

    .venv/bin/python benchmarks/bench_tracks.py [--workers 1] [--no-memory]
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
WORKFLOW = ROOT / "workflows" / "demo_tracks.toml"
SETS = ["run.netcdf=false", "run.maps=false", "run.report=false"]


def steps_override(steps: int) -> list[str]:
    """``--set`` items for a history of ``steps`` steps over 40 Myr."""
    return ["motion.max_age_ma=40.0", f"motion.step_ma={40.0 / steps!r}"]


def measure(out: Path, workers: int) -> dict[str, float]:
    """Times of the single run and of the run with a 100-step history."""
    from lidmelt._engine import run_basin
    from lidmelt.motion import motion_stages
    from lidmelt.workflow import load_workflow

    sets = [*SETS, f"compute.workers={workers}", *steps_override(100)]
    cfg = load_workflow(WORKFLOW, overrides=sets, output_dir=out / "run")
    single_cfg = dataclasses.replace(cfg, motion=None)
    runs = [run_basin(single_cfg, progress=False) for _ in range(3)]
    single = min(runs, key=lambda r: r.timings_s["total_s"])
    kernel_s = min(r.timings_s.get("lid_thread_s", 0.0) + r.timings_s["melting_thread_s"]
                   for r in runs)  # fmt: skip
    t0 = time.perf_counter()
    both = run_basin(cfg, progress=False, extra_stages=motion_stages(cfg))
    total = time.perf_counter() - t0
    grid = both.summary["grid"]
    return {
        "cells": grid["width"] * grid["height"],
        "steps": both.summary["motion"]["steps"],
        "kernel_s": kernel_s,
        "single_total_s": single.timings_s["total_s"],
        "history_s": both.summary["motion"]["history_s"],
        "plan_s": both.summary["motion"]["history_plan_s"],
        "history_kernel_s": both.summary["motion"]["history_kernel_thread_s"],
        "run_with_history_s": total,
    }


def report(r: dict[str, float], workers: int) -> None:
    cells, steps = r["cells"], r["steps"]
    kernel_rate = cells / r["kernel_s"]
    history_rate = steps * cells / r["history_s"]
    ratio = r["run_with_history_s"] / r["single_total_s"]
    print(f"demo grid: {cells} cells, {steps} evaluations (100 steps and the present), "
          f"{workers} worker thread(s)")  # fmt: skip
    print(f"  single run: kernel {r['kernel_s']:.3f} s = {kernel_rate / 1e6:.2f} M cells/s; "
          f"total {r['single_total_s']:.2f} s")  # fmt: skip
    print(f"  history stage {r['history_s']:.2f} s = {history_rate / 1e6:.2f} M steps x cells/s "
          f"= {history_rate / kernel_rate:.2f} x the kernel rate (goal >= 0.5)")  # fmt: skip
    loop = steps * cells / (r["history_s"] - r["plan_s"])
    print(
        f"  of which the plan (inputs without plumes, tracks) {r['plan_s']:.2f} s; the steps "
        f"alone {loop / 1e6:.2f} M steps x cells/s = {loop / kernel_rate:.2f} x the kernel rate"
    )
    hk = r["history_kernel_s"]
    print(
        f"  the kernel inside the history {hk:.2f} s = {steps * cells / hk / 1e6:.2f} M cells/s "
        f"(the columns then melt more often than today's: younger, thinner lids); the "
        f"rest {r['history_s'] - r['plan_s'] - hk:.2f} s"
    )
    print(f"  run with history {r['run_with_history_s']:.2f} s = {ratio:.1f} x the single run "
          "(goal < 20)")  # fmt: skip


_CHILD = """
import json, resource, sys, time
from lidmelt._engine import run_basin
from lidmelt.motion import motion_stages
from lidmelt.workflow import load_workflow
cfg = load_workflow(sys.argv[1], overrides=sys.argv[3:], output_dir=sys.argv[2])
t0 = time.perf_counter()
result = run_basin(cfg, progress=False, extra_stages=motion_stages(cfg))
print(json.dumps({"steps": result.summary["motion"]["steps"],
                  "seconds": time.perf_counter() - t0,
                  "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def peak_rss(out: Path, steps: int, workers: int) -> dict[str, float]:
    """Peak RSS (MB) and time of a whole run with a history of ``steps`` steps, in a fresh
    process."""
    env = dict(os.environ, PYTHONPATH=str(ROOT / "pipeline"))
    sets = [*SETS, f"compute.workers={workers}", *steps_override(steps)]
    done = subprocess.run(
        [sys.executable, "-c", _CHILD, str(WORKFLOW), str(out / f"rss{steps}"), *sets],
        capture_output=True, text=True, env=env, check=True,
    )  # fmt: skip
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workers", type=int, default=1)
    parser.add_argument("--no-memory", action="store_true")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp)
        report(measure(out, args.workers), args.workers)
        if not args.no_memory:
            for steps in (25, 100):
                r = peak_rss(out, steps, args.workers)
                print(f"  whole run with {r['steps']} evaluations: peak RSS "
                      f"{r['peak_rss_mb']:.0f} MB, {r['seconds']:.1f} s")  # fmt: skip


if __name__ == "__main__":
    main()
