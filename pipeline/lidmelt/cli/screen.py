"""``lidmelt screen``: candidate volcanic regions, connected cells above a melt thickness."""

from __future__ import annotations

import argparse
from pathlib import Path

import pandas as pd

from lidmelt.cli._common import format_table, print_warnings, run_dir_option
from lidmelt.cli.regions import SHOWN_STATISTICS
from lidmelt.products.sampling import check_output_path
from lidmelt.products.screening import screen, write_candidates

__all__ = ["register"]


def register(subparsers: argparse._SubParsersAction) -> None:
    """Register ``lidmelt screen``."""
    s = subparsers.add_parser(
        "screen",
        parents=[run_dir_option()],
        help="candidate volcanic regions: connected cells above a melt thickness",
        description=(
            "Candidate regions are groups of cells with melt_thickness_km >= KM touching along "
            "an edge or at a corner (8-connectivity), with area >= KM2; written as polygons "
            "ranked by melt volume (rank 1 = largest) to a GeoPackage and a GeoJSON (RFC 7946, "
            "lon/lat) beside it."
        ),
    )
    s.add_argument(
        "--min-melt-thickness",
        metavar="KM",
        type=float,
        required=True,
        help="least melt thickness of a candidate cell, in km (> 0)",
    )
    s.add_argument(
        "--min-area",
        metavar="KM2",
        type=float,
        default=0.0,
        help="smallest area of a candidate region, in km2 (default 0)",
    )
    s.add_argument(
        "-o",
        "--output",
        metavar="OUT.gpkg",
        help="GeoPackage to write (default RUNNAME_candidates.gpkg here); the .geojson goes "
        "beside it",
    )
    s.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Find the candidate regions, print them and write the GeoPackage and GeoJSON."""
    out = args.output or f"{Path(args.run_dir).resolve().name}_candidates.gpkg"
    out = check_output_path(out, (".gpkg",), what="candidate regions")
    with print_warnings("screen"):
        gdf = screen(
            args.run_dir,
            min_melt_thickness_km=args.min_melt_thickness,
            min_area_km2=args.min_area,
        )
    stats = [c for c in SHOWN_STATISTICS if c in gdf.columns]
    shown = ["rank", *stats, "centroid_lon", "centroid_lat"]
    if len(gdf):
        print(format_table(pd.DataFrame(gdf[shown])))
    print(
        f"{len(gdf)} candidate region(s) with melt thickness >= {args.min_melt_thickness:g} km "
        f"and area >= {args.min_area:g} km2 (8-connected cells)"
    )
    gpkg, geojson = write_candidates(gdf, out)
    print(f"wrote {gpkg} and {geojson}")
    return 0
