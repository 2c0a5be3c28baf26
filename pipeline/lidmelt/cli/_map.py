"""``lidmelt map``: map figures of a run's variables."""

from __future__ import annotations

import argparse
from pathlib import Path

from lidmelt.cli._common import run_dir_option
from lidmelt.products._maps._explore import EXPLORE_NAME, write_explore_page
from lidmelt.products._maps._overview import draw_overview
from lidmelt.products._maps._write import FORMATS, draw_run_maps

_OVERVIEW_HELP = (
    "draw only the one-page overview (inputs and results as panels, for a proposal) as "
    "overview.png (300 dpi, or --dpi), overview.pdf and overview.svg"
)


_EXPLORE_HELP = (
    "write only the interactive map page maps/explore.html (or OUT_DIR/explore.html): pan, "
    "zoom, switch layers, read every layer's value and the cell's flags under the pointer; "
    "self-contained, opens offline in a browser"
)

_FORMAT_HELP = "figure format (default png; with --overview: only this format, default all three)"


def register(subparsers: argparse._SubParsersAction) -> None:
    """Register ``lidmelt map``."""
    p = subparsers.add_parser(
        "map",
        parents=[run_dir_option()],
        help="draw map figures of a run's output variables",
        description=(
            "Draw one map figure per output variable of a run directory (cartopy, offline). "
            "Coastlines are drawn only from local data (--coastlines, or ne_110m_coastline.shp "
            "under CARTOPY_DATA_DIR); nothing is downloaded."
        ),
    )
    p.add_argument(
        "--variable",
        dest="variables",
        metavar="NAME",
        nargs="+",
        action="extend",
        help="variable(s) to draw (default: every output; inputs such as "
        "plate_age_ma are accepted too)",
    )
    p.add_argument(
        "--projection",
        metavar="NAME",
        default=None,
        help="a cartopy projection name (e.g. Mercator, LambertConformal, Robinson, "
        "SouthPolarStereo) or EPSG:<code>; default: chosen from the extent",
    )
    p.add_argument(
        "--region",
        metavar=("W", "E", "S", "N"),
        nargs=4,
        type=float,
        help="map extent in degrees (west east south north; east > 180 for a "
        "region across the antimeridian); default: the grid extent",
    )
    p.add_argument(
        "--stations",
        metavar="FILE",
        help="stations to mark: CSV with lon/lat columns (deg), or a point file",
    )
    p.add_argument(
        "--candidates",
        metavar="FILE",
        help="candidate-region polygons to outline, e.g. the screening GeoPackage",
    )
    p.add_argument(
        "--age-contours",
        action="store_true",
        help="contour the run's plate age (Ma), when the run has input_plate_age_ma",
    )
    p.add_argument(
        "--coastlines",
        metavar="SHAPEFILE",
        help="local coastline shapefile to draw (never downloaded)",
    )
    p.add_argument("--overview", action="store_true", help=_OVERVIEW_HELP)
    p.add_argument("--explore", action="store_true", help=_EXPLORE_HELP)
    p.add_argument("--format", dest="fmt", choices=FORMATS, default=None, help=_FORMAT_HELP)
    p.add_argument(
        "--dpi", type=float, default=150.0, help="resolution in dots per inch (default 150)"
    )
    p.add_argument(
        "--width-in",
        type=float,
        default=8.0,
        help="figure width in inches (default 8; 3.5 for a journal column)",
    )
    p.add_argument(
        "-o",
        "--out-dir",
        metavar="OUT_DIR",
        default=None,
        help="destination folder (default RUN_DIR/maps)",
    )
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Draw the maps (or the overview) and print the files written."""
    if args.explore:
        out = Path(args.out_dir) / EXPLORE_NAME if args.out_dir else None
        page = write_explore_page(
            args.run_dir, path=out, stations=args.stations, candidates=args.candidates
        )
        print(page)
        return 0
    if args.overview:
        dpi = args.dpi if args.dpi != 150.0 else 300.0
        written = draw_overview(
            args.run_dir,
            out_dir=args.out_dir,
            projection=args.projection,
            region=args.region,
            coastlines=args.coastlines,
            dpi=dpi,
            **({"formats": (args.fmt,)} if args.fmt else {}),
        )
        for path in written:
            print(path)
        return 0
    written = draw_run_maps(
        args.run_dir,
        out_dir=args.out_dir,
        variables=args.variables,
        fmt=args.fmt or "png",
        projection=args.projection,
        region=args.region,
        stations=args.stations,
        candidates=args.candidates,
        age_contours=args.age_contours,
        coastlines=args.coastlines,
        dpi=args.dpi,
        width_in=args.width_in,
    )
    for path in written:
        print(path)
    return 0
