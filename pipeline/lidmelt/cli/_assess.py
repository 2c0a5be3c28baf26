"""``lidmelt assess``: how good is the map? A run scored against the features a user knows."""

from __future__ import annotations

import argparse
from pathlib import Path

from lidmelt.cli._common import print_warnings, run_dir_option
from lidmelt.products._assess._assessment import assess
from lidmelt.products._assess._write import ASSESS_NAME, check_output, write_assessment
from lidmelt.products._sampling import as_run, check_not_input


def register(subparsers: argparse._SubParsersAction) -> None:
    """Register ``lidmelt assess``."""
    p = subparsers.add_parser(
        "assess",
        parents=[run_dir_option()],
        help="score a run against known volcanic features (success rate, AUC, weights of evidence)",
        description=(
            "Rank the cells of known features (volcanoes, seamounts: points, or polygons by a "
            "point inside them, in a CSV with longitude/latitude columns or any vector file in "
            "any CRS) against every ocean cell of the run, weighted by cell area: the success-"
            "rate curve (fraction of features captured against fraction of the ocean area, "
            "cells ranked by V from the highest), its AUC (the area-weighted probability that "
            "a feature's cell outranks a random ocean cell, ties counted half) with a 90 % "
            "bootstrap interval over the features, the weights-of-evidence contrast at a few "
            "thresholds and the features in each candidate region of 'lidmelt screen'. "
            "Features outside the grid or on nodata are counted and listed. V defaults to the "
            "melt the thermal anomaly adds, or for an ensemble run to its probability of "
            "melting. Writes RUN_DIR/assess.json and RUN_DIR/maps/success_rate.png, where "
            "'lidmelt report' finds them."
        ),
    )
    p.add_argument("features", metavar="FEATURES", help="known features (.csv, .gpkg, .geojson)")
    p.add_argument("--variable", metavar="V", help="output variable of the run to score")
    p.add_argument(
        "--threshold",
        metavar="T",
        type=float,
        action="append",
        help="a value of V where the weights of evidence are given (repeatable; default: "
        "0.5, 1, 2 km for a melt thickness, 0.1, 0.5, 0.9 for a probability)",
    )
    p.add_argument(
        "--candidates",
        metavar="FILE",
        help="screening candidates (default RUN_DIR/candidates.gpkg when present)",
    )
    p.add_argument("--crs", metavar="CRS", help="CRS of a CSV's coordinates (default EPSG:4326)")
    p.add_argument("--seed", type=int, default=0, help="seed of the bootstrap (default 0)")
    p.add_argument(
        "-o",
        "--output",
        metavar="OUT.json",
        help=f"assessment file (default RUN_DIR/{ASSESS_NAME}); the figure goes beside it as "
        "OUT.png (by default RUN_DIR/maps/success_rate.png)",
    )
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Score the run, print the figures and write the JSON and the figure."""
    run_dir = as_run(args.run_dir)
    out = check_output(args.output or Path(args.run_dir) / ASSESS_NAME)
    check_not_input(out, args.features, what="assessment")
    with print_warnings("assess"):
        doc = assess(
            run_dir, args.features, variable=args.variable, thresholds=args.threshold,
            candidates=args.candidates, seed=args.seed, crs=args.crs,
        )  # fmt: skip
    low, high = doc["auc_ci90"]
    print(
        f"lidmelt assess: {doc['variable']}: {doc['n_features_used']} of {doc['n_features']} "
        f"features scored ({doc['n_outside_grid']} outside the grid, {doc['n_nodata']} on "
        f"nodata); AUC {doc['auc']:.3f} (90 % interval {low:.3f} to {high:.3f}; chance 0.5)"
    )
    for t in doc["thresholds"]:
        c = t["studentized_contrast"]
        print(
            f"  V >= {t['value']:g}: {t['captured']} features in {100 * t['area_fraction']:.3g} % "
            f"of the area; contrast {_num(t['contrast'])}, studentized {_num(c)}"
            + (" (screening threshold)" if t["screening"] else "")
        )
    for name in doc["not_used"][:20]:
        print(f"  not scored: {name['name']} ({name['reason']})")
    regions = doc["candidates"]
    if regions.get("file"):
        for r in regions["regions"]:
            print(f"  candidate {r['rank']} ({r['plume'] or '-'}): {r['n_features']} features")
        print(f"  in no candidate: {regions['n_in_no_candidate']} features")
    paths = write_assessment(doc, out, run_dir=Path(args.run_dir))
    print(f"wrote {paths[0]} and {paths[1]}")
    return 0


def _num(value) -> str:
    return "undefined" if value is None else f"{value:.3g}"
