"""``lidmelt run``: a whole basin from a workflow file."""

from __future__ import annotations

import argparse
from pathlib import Path

from lidmelt._cluster import scheduler_address
from lidmelt._engine import run_basin
from lidmelt._run_inputs import resolve_target_grid
from lidmelt.cli._common import print_warnings
from lidmelt.ensemble import ensemble_stages
from lidmelt.ensemble._scoring import locate
from lidmelt.grids._rundir import RunDir
from lidmelt.grids._transaction import RunLock, clean_leftovers
from lidmelt.motion import motion_stages
from lidmelt.products._assess._assessment import assess
from lidmelt.products._assess._write import ASSESS_NAME, write_assessment
from lidmelt.products._maps._explore import write_explore_page
from lidmelt.products._maps._overlays import resolve_coastlines
from lidmelt.products._maps._overview import draw_overview
from lidmelt.products._maps._write import draw_run_maps
from lidmelt.products._report._write import write_report
from lidmelt.products._screening import ensemble_candidates
from lidmelt.workflow import load_workflow


def register(subparsers: argparse._SubParsersAction) -> None:
    """Register ``lidmelt run``."""
    p = subparsers.add_parser(
        "run",
        help="run a whole basin from a workflow file",
        description=(
            "Read the inputs a workflow file names, align them onto one grid, evaluate every "
            "output variable cell by cell and write GeoTIFF maps, a run summary (and by "
            "default map figures and a report) into the run directory. The workflow format is "
            "described in docs/workflow.md; workflows/template.toml is a commented template."
        ),
    )
    p.add_argument("workflow", type=Path, metavar="WORKFLOW.toml", help="the workflow file")
    p.add_argument(
        "--set",
        dest="overrides",
        action="append",
        default=[],
        metavar="KEY=VALUE",
        help="override a workflow value (repeatable), e.g. "
        "--set model.ambient_potential_temperature_c=1400",
    )
    p.add_argument(
        "-o",
        "--output-dir",
        type=Path,
        metavar="OUT_DIR",
        help="run directory (default: the workflow's run.output_dir)",
    )
    p.add_argument("--no-maps", action="store_true", help="do not draw map figures or the report")
    p.add_argument("--quiet", action="store_true", help="no progress output")
    p.add_argument(
        "--wait",
        action="store_true",
        help="if another run is writing the same folder, wait for it instead of failing",
    )
    p.add_argument(
        "--clean",
        action="store_true",
        help="only remove the staging folders that interrupted runs left beside the run "
        "directory (the run directory itself is kept), then exit",
    )
    p.set_defaults(func=run)


def _assessment(cfg, staged: Path) -> list[Path]:
    """With ``[assess]``: the run scored against its known features (``assess.json`` and
    ``maps/success_rate.png`` in the staged run, outside its manifest like the maps)."""
    if getattr(cfg, "assess", None) is None:
        return []
    seed = cfg.ensemble.seed if cfg.ensemble is not None else 0
    shown = Path(cfg.run.output_dir).absolute()  # where the run will be, named in its notes
    doc = assess(RunDir(staged, shown_as=shown), cfg.assess.features, crs=cfg.assess.crs,
                 seed=seed)  # fmt: skip
    return list(write_assessment(doc, staged / ASSESS_NAME, run_dir=staged))


def _products(draw_maps: bool, report: bool, dest: Path, cfg=None):
    """The assessment and figures drawn into the staged run (swapped into place with it), or
    None when there are none."""
    if not draw_maps:
        if getattr(cfg, "assess", None) is None:
            return None
        return lambda staged: _assessment(cfg, staged)

    def draw(staged: Path) -> list[Path]:
        scored = _assessment(cfg, staged)
        run_dir = RunDir(staged, shown_as=dest.absolute())
        coast = resolve_coastlines(None) or False  # looked up (and its absence noted) once
        maps = list(draw_run_maps(run_dir, coastlines=coast))
        overview = draw_overview(run_dir, coastlines=False, formats=("png", "pdf"))
        drawn = [*scored, *maps, *overview, write_explore_page(run_dir)]
        # the report 'lidmelt report RUN_DIR' writes: it reuses the maps just drawn (the
        # overview too) and draws the input maps, naming files relative to the run directory
        return [*drawn, write_report(run_dir, coastlines=coast)] if report else drawn

    return draw


def _clean(cfg) -> int:
    """``--clean``: remove what interrupted runs left beside the run directory."""
    dest = Path(cfg.run.output_dir).absolute()
    with RunLock(dest):
        removed = clean_leftovers(dest)
    for path in removed:
        print(f"  removed {path}")
    print(f"lidmelt run: {len(removed)} leftover folder(s) beside {dest} removed")
    return 0


def volume_line(st: dict) -> str:
    """The melt volumes, the melt the thermal anomaly adds first, then the ambient melt (total
    minus anomaly-added) and the total (``summary.json`` statistics)."""
    total = f"total {st['melt_volume_km3']:.6g} km3"
    if "anomaly_melt_volume_km3" not in st:
        return f"melt volume {total}"
    return (
        f"melt volume added by the thermal anomaly {st['anomaly_melt_volume_km3']:.6g} km3, "
        f"ambient {st['ambient_melt_volume_km3']:.6g} km3, {total}"
    )


def run(args: argparse.Namespace) -> int:
    """Run the basin, draw its maps and report, and print what was written."""
    cfg = load_workflow(args.workflow, overrides=args.overrides, output_dir=args.output_dir)
    if args.clean:
        return _clean(cfg)
    scheduler_address(cfg)  # a malformed LIDMELT_SCHEDULER is refused before anything starts
    if cfg.assess is not None:  # known features all outside the grid: refused before the run
        locate(cfg.assess, resolve_target_grid(cfg))
    # refuses what will not fit, first; the candidates of the deterministic run get drivers
    stages = ensemble_stages(cfg, announce=not args.quiet, candidates=ensemble_candidates)
    stages += motion_stages(cfg)  # the history through time and the hotspot tracks
    products = _products(not args.no_maps and cfg.run.maps, cfg.run.report, cfg.run.output_dir, cfg)
    with print_warnings("run"):
        result = run_basin(
            cfg,
            progress=False if args.quiet else None,
            products=products,
            wait=args.wait,
            extra_stages=stages,
        )
    files = list(result.files)
    st = result.summary["statistics"]
    print(f"lidmelt run: {cfg.run.name} -> {result.run_dir}")
    print(
        f"  grid {result.summary['grid']['width']} x {result.summary['grid']['height']}, "
        f"{st['data_cells']} cells with data, {st['melting_cells']} melting"
    )
    print(f"  {volume_line(st)}; melting area {st['melting_area_km2']:.6g} km2")
    print(f"  in {result.timings_s['total_s']:.1f} s")
    for path in files:
        print(f"  wrote {path}")
    url = (result.summary.get("zarr") or {}).get("url")
    if url:  # [outputs] zarr_url: the run's new store, outside the run folder
        print(f"  wrote {url} (the run's Zarr store)")
    return 0
