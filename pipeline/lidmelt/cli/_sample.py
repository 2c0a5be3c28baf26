"""``lidmelt sample``: values of a run at stations."""

from __future__ import annotations

import argparse

import numpy as np

from lidmelt.cli._common import (
    coordinate_options,
    flag_summary,
    format_table,
    print_warnings,
    run_dir_option,
    sampling_method_option,
    status_summary,
)
from lidmelt.products._sampling import (
    FLAG_COLUMN,
    check_not_input,
    check_output_path,
    shown_without_melt,
    table_with_coordinates,
)
from lidmelt.products._sites import OUTPUT_SUFFIXES, sample_stations, write_stations

# Output variables shown in the printed table (the file holds all of them).
_SHOWN_VARIABLES = ("melt_thickness_km", "onset_depth_km", "melting_top_km")


def register(subparsers: argparse._SubParsersAction) -> None:
    """Register ``lidmelt sample``."""
    p = subparsers.add_parser(
        "sample",
        parents=[run_dir_option(), sampling_method_option(), coordinate_options("station file")],
        help="values of a run at stations (CSV or point file)",
        description=(
            "Sample every output variable and input of a run at stations, with a status column "
            "(ok, outside_grid, nodata, next_to_nodata) and the validity flag with its meaning "
            "(e.g. an onset beyond the model's calibrated pressure range). Prints a short "
            "table; -o writes it."
        ),
    )
    p.add_argument(
        "stations",
        metavar="STATIONS",
        help=(
            "CSV with longitude/latitude columns (lon/long/longitude/x, lat/latitude/y), or a "
            "point file (GeoPackage, GeoJSON, Shapefile) in any CRS"
        ),
    )
    p.add_argument(
        "-o",
        "--output",
        metavar="OUT",
        help="write the table to OUT.csv or OUT.gpkg (format chosen by the suffix)",
    )
    p.set_defaults(func=run)


def _printed_table(gdf) -> str:
    frame = table_with_coordinates(gdf)
    coords = list(gdf.attrs.get("lidmelt_coordinate_columns", ("longitude", "latitude")))
    sampled = set(gdf.attrs.get("lidmelt_units", {})) | {"status"}
    own = [c for c in frame.columns if c not in sampled and c not in coords][:2]
    shown = [c for c in (*_SHOWN_VARIABLES, "status", FLAG_COLUMN) if c in frame.columns]
    return format_table(shown_without_melt(frame[own + coords + shown]))


def run(args: argparse.Namespace) -> int:
    """Sample the stations, print a short table and write the file given with ``-o``."""
    out = (
        None
        if args.output is None
        else check_output_path(args.output, OUTPUT_SUFFIXES, what="station table")
    )
    if out is not None:
        check_not_input(out, args.stations, args.run_dir, what="station table")
    with print_warnings("sample"):
        gdf = sample_stations(
            args.run_dir,
            args.stations,
            method=args.method,
            lon_column=args.lon_column,
            lat_column=args.lat_column,
            crs=args.crs,
        )
    print(_printed_table(gdf))
    print(status_summary(np.asarray(gdf["status"]), what="stations") + flag_summary(gdf))
    if out is None:
        print("no file written (give -o OUT.csv or -o OUT.gpkg to save the table)")
    else:
        write_stations(gdf, out)
        print(f"wrote {out}")
    return 0
