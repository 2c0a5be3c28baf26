"""``lidmelt screen``: candidate volcanic regions, connected cells above a melt thickness or,
for an ensemble run, above a probability of melting."""

from __future__ import annotations

import argparse
from pathlib import Path

import pandas as pd

from lidmelt._variables import parse_ensemble_name
from lidmelt.cli._common import format_table, print_warnings, run_dir_option
from lidmelt.products._candidate_files import write_candidates
from lidmelt.products._sampling import check_output_path
from lidmelt.products._screening import BASES, CANDIDATES_NAME, screen

#: Columns shown in the printed table (the files hold all), where the candidates have them.
SHOWN_COLUMNS = (
    "rank",
    "plume",
    "plume_match",
    "area_km2",
    "anomaly_melt_volume_km3",
    "ambient_melt_volume_km3",
    "melt_volume_km3",
    "min_plate_age_ma",
    "max_plate_age_ma",
    "flagged_fraction",
    "deep_melt_share",
    "melt_production_km3_yr",
    "probability_basis",
    "probability_threshold_km",
    "mean_probability",
    "max_probability",
    "likely_area_km2",
    "centroid_lon",
    "centroid_lat",
)

_BASIS_TEXT = {"anomaly": "anomaly melt thickness", "total": "melt thickness"}


def register(subparsers: argparse._SubParsersAction) -> None:
    """Register ``lidmelt screen``."""
    s = subparsers.add_parser(
        "screen",
        parents=[run_dir_option()],
        help="candidate volcanic regions: connected cells above a melt thickness",
        description=(
            "Candidate regions are groups of cells whose melt reaches KM touching along an edge "
            "or at a corner (8-connectivity), with area >= KM2. By default the melt is the one "
            "the thermal anomaly adds (anomaly_melt_thickness_km), so young seafloor where "
            "ambient mantle melts, as at a spreading ridge, is not a candidate; --basis total "
            "screens all melt (melt_thickness_km). Each candidate names the workflow plume it "
            "belongs to. Written as polygons ranked by the basis's melt volume (rank 1 = "
            "largest) to a GeoPackage and a GeoJSON (RFC 7946, lon/lat) beside it. For an "
            "ensemble run, --min-probability P takes the cells whose probability of melting is "
            "at least P: the probability that a member's melt of the same basis reaches the "
            "run's threshold (melt_probability_<basis>_ge_<T>km; --probability-of KM picks "
            "another of its thresholds); a run whose probabilities are of another basis or "
            "threshold is refused. Each candidate gets the probability's basis and threshold, "
            "its mean and max probability and the area where melting is more likely than not "
            "(>= 0.5). Give --min-melt-thickness, --min-probability or both (a cell must then "
            "pass both)."
        ),
    )
    s.add_argument(
        "--min-melt-thickness",
        metavar="KM",
        type=float,
        help="least melt thickness of a candidate cell (of the basis's melt), in km (> 0)",
    )
    s.add_argument(
        "--min-probability",
        metavar="P",
        type=float,
        help="ensemble runs: least probability of melting of a candidate cell (0 < P <= 1): "
        "the probability that the basis's melt reaches the run's threshold",
    )
    s.add_argument(
        "--probability-of",
        metavar="KM",
        type=float,
        help="with --min-probability: the threshold of the probability, in km (the map "
        "melt_probability_<basis>_ge_<KM>km; KM one of the ensemble's thresholds_km; default "
        "its first)",
    )
    s.add_argument(
        "--min-area",
        metavar="KM2",
        type=float,
        default=0.0,
        help="smallest area of a candidate region, in km2 (default 0)",
    )
    s.add_argument(
        "--basis",
        choices=BASES,
        default="anomaly",
        help="melt a cell must reach: the melt the thermal anomaly adds (anomaly, default) or "
        "all melt, ambient melting at young seafloor included (total)",
    )
    s.add_argument(
        "--min-age",
        metavar="MA",
        type=float,
        help="leave out cells of plate age below MA million years (needs a run with a plate age)",
    )
    s.add_argument(
        "-o",
        "--output",
        metavar="OUT.gpkg",
        help="GeoPackage to write (default RUN_DIR/candidates.gpkg, where 'lidmelt report' "
        "finds it; like the maps it lies outside the run's manifest and a new 'lidmelt run' "
        "replaces it); the .geojson goes beside it",
    )
    s.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Find the candidate regions, print them and write the GeoPackage and GeoJSON."""
    out = args.output or Path(args.run_dir) / CANDIDATES_NAME
    out = check_output_path(out, (".gpkg",), what="candidate regions")
    with print_warnings("screen"):
        gdf = screen(
            args.run_dir,
            min_melt_thickness_km=args.min_melt_thickness,
            min_area_km2=args.min_area,
            basis=args.basis,
            min_age_ma=args.min_age,
            min_probability=args.min_probability,
            probability=args.probability_of,
        )
    shown = [c for c in SHOWN_COLUMNS if c in gdf.columns]
    if len(gdf):
        table = pd.DataFrame(gdf[shown])
        table["plume"] = table["plume"].replace("", "-")
        print(format_table(table))
    print(f"{len(gdf)} candidate region(s) with {_conditions(args, gdf)}")
    gpkg, geojson = write_candidates(gdf, out)
    print(f"wrote {gpkg} and {geojson}")
    return 0


def _conditions(args: argparse.Namespace, gdf: pd.DataFrame) -> str:
    """What the candidate cells passed, for the closing line."""
    tests = []
    if args.min_melt_thickness is not None:
        tests.append(f"{_BASIS_TEXT[args.basis]} >= {args.min_melt_thickness:g} km")
    if args.min_probability is not None:
        name = gdf.attrs.get("lidmelt_probability", "")
        parsed = parse_ensemble_name(name)
        what = f" (P({_BASIS_TEXT[args.basis]} >= {parsed.threshold_km:g} km))" if parsed else ""
        tests.append(f"{name}{what} >= {args.min_probability:g}")
    tests.append(f"area >= {args.min_area:g} km2")
    age = "" if args.min_age is None else f", plate age >= {args.min_age:g} Ma"
    return f"{' and '.join(tests)}{age} (8-connected cells; basis {args.basis})"
