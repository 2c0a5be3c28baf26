"""``lidmelt profile``: values of a run along a ship track, with a profile figure."""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

from lidmelt.cli._common import (
    coordinate_options,
    flag_summary,
    format_table,
    print_warnings,
    run_dir_option,
    sampling_method_option,
    status_summary,
)
from lidmelt.products._profiles import sample_track, write_profile
from lidmelt.products._sampling import check_not_input, check_output_path, shown_without_melt

_SHOWN = (
    "distance_km",
    "waypoint_index",
    "lon",
    "lat",
    "melt_thickness_km",
    "onset_depth_km",
    "melting_top_km",
    "status",
    "validity_flag",
)


def register(subparsers: argparse._SubParsersAction) -> None:
    """Register ``lidmelt profile``."""
    p = subparsers.add_parser(
        "profile",
        parents=[run_dir_option(), sampling_method_option(), coordinate_options("track")],
        help="values of a run along a ship track, with a profile figure",
        description=(
            "Sample every variable of a run every KM km along the geodesics (WGS84) joining a "
            "track's waypoints; write a CSV and, next to it, a PNG cross-section: plate age "
            "and anomaly, melt thickness, and the melting column between the top of the "
            "melting column (melting_top_km: lid, geotherm or crust base) and the onset depth. The "
            "output never overwrites the track."
        ),
    )
    p.add_argument(
        "track",
        metavar="TRACK",
        help="waypoints (CSV with lon/lat columns, or a point file) or a line file, any CRS",
    )
    p.add_argument(
        "--spacing",
        metavar="KM",
        type=float,
        required=True,
        help="distance between profile points along the track, in km",
    )
    p.add_argument(
        "--stations",
        metavar="FILE",
        help="stations (CSV with lon/lat columns, or a point file); those within 50 km of the "
        "track are named on the profile",
    )
    p.add_argument(
        "-o",
        "--output",
        metavar="OUT.csv",
        help="CSV to write (default TRACKNAME_profile.csv here); the PNG goes beside it",
    )
    p.set_defaults(func=run)


def _figure_options(args: argparse.Namespace) -> dict:
    """Title (the track's name), waypoint names, stations and subtitle of the figure."""
    from lidmelt._errors import InputError
    from lidmelt.grids._rundir import open_run
    from lidmelt.grids._vector import read_labelled_points
    from lidmelt.products._maps._captions import model_line
    from lidmelt.products._maps._overlays import load_stations

    track = Path(args.track)
    try:
        labels = [v for v in read_labelled_points(track, what="track")["label"] if v]
    except InputError:  # a line file: no waypoint names
        labels = []
    run = open_run(args.run_dir)
    return {
        "title": f"Profile along {track.stem.replace('_', ' ')}",
        "waypoint_names": labels,
        "stations": load_stations(args.stations) if args.stations else None,
        "run": run,
        "subtitle": f"Run {run.path.name}. {model_line(run.summary)}",
    }


def run(args: argparse.Namespace) -> int:
    """Sample the track, print a short table and write the CSV and the profile figure."""
    out = args.output or f"{Path(args.track).stem}_profile.csv"
    out = check_output_path(out, (".csv",), what="profile")
    for written in (out, out.with_suffix(".png")):
        check_not_input(written, args.track, args.run_dir, what="profile")
    with print_warnings("profile"):
        gdf = sample_track(
            args.run_dir,
            args.track,
            spacing_km=args.spacing,
            method=args.method,
            lon_column=args.lon_column,
            lat_column=args.lat_column,
            crs=args.crs,
        )
    shown = [c for c in _SHOWN if c in gdf.columns]
    print(format_table(shown_without_melt(pd.DataFrame(gdf[shown])), max_rows=10))
    print(
        status_summary(np.asarray(gdf["status"]), what="points")
        + flag_summary(gdf)
        + f"; track length {gdf['distance_km'].iloc[-1]:.3f} km, spacing {args.spacing:g} km"
    )
    csv_path, png = write_profile(gdf, out, **_figure_options(args))
    print(f"wrote {csv_path} and {png}")
    return 0
