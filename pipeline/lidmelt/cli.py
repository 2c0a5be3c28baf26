"""The ``lidmelt`` command line: a thin layer over the Python API.

Each subcommand lives with the stage it serves: a module that defines ``add_cli(subparsers)``
registers its parser and sets ``func``, a callable ``func(args) -> int``. Errors derived from
:class:`lidmelt.errors.LidmeltError` print without a traceback and exit with status 1.
"""

from __future__ import annotations

import argparse
import csv
import importlib
import json
import math
import os
import sys
import tempfile
from pathlib import Path

from lidmelt import __version__
from lidmelt.errors import InputError, LidmeltError

# Modules that register subcommands, in the order ``lidmelt --help`` lists them.
_COMMAND_MODULES = [
    "lidmelt.products.sites",
    "lidmelt.products.profiles",
    "lidmelt.products.regions",
    "lidmelt.products.maps",
    "lidmelt.products.report",
]


def build_parser() -> argparse.ArgumentParser:
    """Build the argument parser with every subcommand."""
    parser = argparse.ArgumentParser(
        prog="lidmelt",
        description="Maps of predicted mantle melt productivity beneath oceanic lithosphere.",
    )
    parser.add_argument("--version", action="version", version=f"lidmelt {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    _add_column(sub)
    _add_run(sub)
    for name in _COMMAND_MODULES:
        importlib.import_module(name).add_cli(sub)
    return parser


# ------------------------------------------------------------------------------------------------
# lidmelt column
# ------------------------------------------------------------------------------------------------
def _parse_params(items: list[str]) -> dict[str, float]:
    params = {}
    for item in items or []:
        key, sep, value = item.partition("=")
        try:
            if not sep:
                raise ValueError
            params[key.strip()] = float(value)
        except ValueError:
            msg = f"--param {item!r} must be NAME=NUMBER, e.g. --param cpx_mass_fraction=0.15."
            raise InputError(msg) from None
    return params


def _finite(value: float | None, option: str, unit: str) -> None:
    if value is not None and not math.isfinite(value):
        msg = f"{option} {value!r} is not a finite number; give a value in {unit}."
        raise InputError(msg)


def _add_column(sub) -> None:
    from lidmelt.physics import DEFAULT_AMBIENT_TP_C, DEFAULT_COOLING, DEFAULT_LID_ISOTHERM_C

    p = sub.add_parser(
        "column",
        help="melting beneath one site (one column)",
        description=(
            "Melt production of upwelling mantle beneath one lid: onset depth, melt thickness, "
            "melt fraction and the excess temperature needed to melt. Give the mantle as "
            "--potential-temperature, or as --excess-temperature above --ambient; give the lid "
            "as --lid-depth, or as --age through a cooling model."
        ),
    )
    tp = p.add_mutually_exclusive_group(required=True)
    tp.add_argument(
        "--potential-temperature",
        type=float,
        metavar="C",
        help="mantle potential temperature Tp [deg C]",
    )
    tp.add_argument(
        "--excess-temperature",
        type=float,
        metavar="K",
        help="thermal anomaly above the ambient Tp [K]",
    )
    p.add_argument(
        "--ambient",
        type=float,
        default=DEFAULT_AMBIENT_TP_C,
        metavar="C",
        help=f"ambient potential temperature [deg C] (default {DEFAULT_AMBIENT_TP_C:g}, "
        "Herzberg et al. 2010)",
    )
    lid = p.add_mutually_exclusive_group(required=True)
    lid.add_argument(
        "--lid-depth",
        type=float,
        metavar="KM",
        help="depth of the lid base below the seafloor [km]",
    )
    lid.add_argument("--age", type=float, metavar="MA", help="plate age [Ma]")
    p.add_argument(
        "--cooling",
        default=DEFAULT_COOLING,
        choices=["half-space", "gdh1", "ps77"],
        help=f"cooling model for --age (default {DEFAULT_COOLING})",
    )
    p.add_argument(
        "--lid-isotherm",
        type=float,
        default=DEFAULT_LID_ISOTHERM_C,
        metavar="C",
        help=f"isotherm that defines the lid base [deg C] (default {DEFAULT_LID_ISOTHERM_C:g})",
    )
    p.add_argument(
        "--water",
        type=float,
        default=0.0,
        metavar="WT_PCT",
        help="water in the bulk source [wt%%] (default 0; 0.01 = 100 ppm)",
    )
    p.add_argument(
        "--model",
        default="katz2003",
        help="melting model: katz2003 (default) or mckenzie-bickle1988",
    )
    p.add_argument(
        "--param",
        action="append",
        metavar="NAME=VALUE",
        help="override a model parameter (repeatable), e.g. cpx_mass_fraction=0.15",
    )
    p.add_argument(
        "--min-top",
        type=float,
        default=7.0,
        metavar="KM",
        help="melting stops at max(lid, this depth) [km] (default 7, the crust base)",
    )
    p.add_argument(
        "--method",
        choices=["direct", "table"],
        default="direct",
        help="direct integration (default for one column) or the fast table",
    )
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument(
        "--profile",
        type=Path,
        metavar="FILE.csv",
        help="write depth, pressure, temperature and melt fraction along the column",
    )
    p.set_defaults(func=_run_column)


def _run_column(args) -> int:
    import numpy as np

    from lidmelt.physics import (
        FLAG_BEYOND_CALIBRATION,
        FLAG_INVALID_INPUT,
        FLAG_NO_ONSET,
        FLAG_WATER_SATURATED,
        column_profile,
        excess_to_melt_k,
        get_cooling_model,
        get_model,
        isotherm_depth_km,
        melt_column,
    )

    for value, option, unit in (
        (args.potential_temperature, "--potential-temperature", "deg C"),
        (args.excess_temperature, "--excess-temperature", "K"),
        (args.ambient, "--ambient", "deg C"),
        (args.lid_depth, "--lid-depth", "km"),
        (args.age, "--age", "Ma"),
        (args.water, "--water", "wt%"),
        (args.min_top, "--min-top", "km"),
        (args.lid_isotherm, "--lid-isotherm", "deg C"),
    ):
        _finite(value, option, unit)
    model = get_model(args.model, **_parse_params(args.param))
    tp = (
        args.potential_temperature
        if args.potential_temperature is not None
        else args.ambient + args.excess_temperature
    )
    if args.age is not None:
        if args.age < 0:
            msg = f"--age {args.age:g} is negative; plate age is in Ma, 0 at the ridge."
            raise InputError(msg)
        cooling = get_cooling_model(args.cooling)
        lid = float(isotherm_depth_km(args.lid_isotherm, args.age, model=cooling))
    else:
        lid = args.lid_depth
        if lid < 0:
            msg = f"--lid-depth {lid:g} km is negative; give the lid base depth below the seafloor."
            raise InputError(msg)
    if args.water < 0:
        msg = f"--water {args.water:g} is negative; give the bulk water content in wt% (>= 0)."
        raise InputError(msg)
    if args.min_top < 0:
        msg = f"--min-top {args.min_top:g} km is negative; give a depth >= 0."
        raise InputError(msg)
    res = melt_column(tp, lid, args.water, model=model, method=args.method, min_top_km=args.min_top)
    flag = int(res.flag)
    sol0 = float(model.solidus_c(0.0))
    if flag & FLAG_INVALID_INPUT:
        if not model.hydrous and args.water > 0:
            msg = (
                f"model {model.name} is anhydrous, but --water is {args.water:g} wt%. Use "
                "--model katz2003 for a hydrous source, or --water 0."
            )
        else:
            msg = (
                f"potential temperature {tp:g} C is at or below the surface solidus of "
                f"{model.name} ({sol0:.1f} C): the mantle cannot melt. Give a Tp above it "
                "(ambient upper mantle is about 1300-1400 C)."
            )
        raise InputError(msg)
    if flag & FLAG_WATER_SATURATED:
        msg = (
            f"--water {args.water:g} wt% is above the water the solid source holds at the "
            f"onset ({float(model.water_saturated_bulk_wt_pct(res.onset_pressure_gpa)):.3g} "
            "wt%): the source would carry free water, outside the batch-melting model. Give "
            "a lower --water (oceanic mantle holds about 0.005-0.03 wt%)."
        )
        raise InputError(msg)
    if flag & FLAG_NO_ONSET:
        msg = (
            f"the isentrope of Tp {tp:g} C does not meet the {model.name} solidus above "
            f"{model.max_onset_pressure_gpa:g} GPa, so the column has no defined onset. Give "
            "a lower Tp or less water (this model is calibrated for onsets shallower than "
            f"{model.calibrated_max_pressure_gpa:g} GPa)."
        )
        raise InputError(msg)
    excess = float(
        excess_to_melt_k(
            lid,
            args.water,
            ambient_potential_temperature_c=args.ambient,
            model=model,
            min_top_km=args.min_top,
        )
    )
    values = {name: float(v) for name, v in res.as_dict().items() if name != "flag"}
    values["excess_to_melt_k"] = excess
    if args.profile:
        prof = column_profile(tp, lid, args.water, model=model, min_top_km=args.min_top)
        _write_profile_csv(args.profile, prof)
    if flag & FLAG_BEYOND_CALIBRATION:
        print(
            f"note: the onset ({values['onset_pressure_gpa']:.2f} GPa) is deeper than the "
            f"{model.name} calibration ({model.calibrated_max_pressure_gpa:g} GPa); treat the "
            "result as an extrapolation.",
            file=sys.stderr,
        )
    if args.json:
        doc = {k: (None if not math.isfinite(v) else v) for k, v in values.items()}
        doc.update(
            {
                "potential_temperature_c": tp,
                "water_wt_pct": args.water,
                "validity_flag": flag,
                "model": model.name,
                "model_parameters": model.parameters(),
            }
        )
        if args.age is not None:
            doc.update(
                {
                    "plate_age_ma": args.age,
                    "cooling": args.cooling,
                    "lid_isotherm_c": args.lid_isotherm,
                    "lid_base_km": lid,
                }
            )
        print(json.dumps(doc, indent=2))
        return 0
    rows = [
        ("potential temperature", tp, "C"),
        (
            "lid base"
            + (
                f" ({args.cooling}, {args.lid_isotherm:g} C at {args.age:g} Ma)"
                if args.age is not None
                else ""
            ),
            lid,
            "km",
        ),
        ("top of melting", values["lid_depth_km"], "km"),
        ("onset depth", values["onset_depth_km"], "km"),
        ("onset pressure", values["onset_pressure_gpa"], "GPa"),
        ("melt thickness", values["melt_thickness_km"], "km"),
        ("max melt fraction", values["max_melt_fraction"], ""),
        ("mean melt pressure", values["mean_melt_pressure_gpa"], "GPa"),
        ("excess to melt", excess, f"K above {args.ambient:g} C"),
    ]
    print(f"lidmelt column: {model.name}, water {args.water:g} wt%")
    for label, value, unit in rows:
        text = "-" if not np.isfinite(value) else f"{value:10.3f}"
        print(f"  {label:<48} {text:>10} {unit}")
    if args.profile:
        print(f"profile written to {args.profile}")
    return 0


def _write_profile_csv(path: Path, prof: dict) -> None:
    path = Path(path)
    if not path.parent.exists():
        msg = f"--profile folder {str(path.parent)!r} does not exist; create it or pick another."
        raise InputError(msg)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(["depth_km", "pressure_gpa", "temperature_c", "melt_fraction"])
            for row in zip(
                prof["depth_km"],
                prof["pressure_gpa"],
                prof["temperature_c"],
                prof["melt_fraction"],
                strict=True,
            ):
                w.writerow([f"{v:.6g}" for v in row])
        Path(tmp).replace(path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


# ------------------------------------------------------------------------------------------------
# lidmelt run
# ------------------------------------------------------------------------------------------------
def _add_run(sub) -> None:
    p = sub.add_parser(
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
    p.set_defaults(func=_run_run)


def _run_run(args) -> int:
    from lidmelt.engine import run_basin
    from lidmelt.workflow import load_workflow

    cfg = load_workflow(args.workflow, overrides=args.overrides, output_dir=args.output_dir)
    result = run_basin(cfg, progress=False if args.quiet else None)
    files = list(result.files)
    if not args.no_maps and cfg.run.maps:
        files += _draw_products(result.run_dir, report=cfg.run.report)
    st = result.summary["statistics"]
    print(f"lidmelt run: {cfg.run.name} -> {result.run_dir}")
    print(
        f"  grid {result.summary['grid']['width']} x {result.summary['grid']['height']}, "
        f"{st['data_cells']} cells with data, {st['melting_cells']} melting"
    )
    print(
        f"  melting area {st['melting_area_km2']:.6g} km2, melt volume "
        f"{st['melt_volume_km3']:.6g} km3, in {result.timings_s['total_s']:.1f} s"
    )
    for path in files:
        print(f"  wrote {path}")
    return 0


def _draw_products(run_dir: Path, *, report: bool) -> list[Path]:
    from lidmelt.products.maps import draw_run_maps

    paths = list(draw_run_maps(run_dir))
    if report:
        from lidmelt.products.report import write_report

        paths.append(write_report(run_dir, maps=paths))
    return paths


def main(argv: list[str] | None = None) -> int:
    """Run the command line; return the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 0
    try:
        return int(args.func(args) or 0)
    except LidmeltError as exc:
        print(f"lidmelt {args.command}: error: {exc}", file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
