"""``lidmelt report``: the run report (self-contained HTML, optionally PDF)."""

from __future__ import annotations

import argparse

from lidmelt.cli._common import run_dir_option
from lidmelt.products._report._write import write_report


def register(subparsers: argparse._SubParsersAction) -> None:
    """Register ``lidmelt report``."""
    p = subparsers.add_parser(
        "report",
        parents=[run_dir_option()],
        help="write the run report (self-contained HTML, optionally PDF)",
        description=(
            "Write one self-contained HTML page describing a run: the job, the maps, the "
            "summary numbers, the model parameters with their sources, the lid, the input "
            "provenance (SHA-256) and the workflow. Maps in RUN_DIR/maps newer than the run "
            "are reused; others are drawn (offline, coastlines only from local data)."
        ),
    )
    p.add_argument(
        "-o",
        "--output",
        metavar="REPORT.html",
        default=None,
        help="HTML file to write (default RUN_DIR/report.html)",
    )
    p.add_argument(
        "--pdf", action="store_true", help="also write a PDF beside the HTML (same name, .pdf)"
    )
    p.add_argument(
        "--coastlines",
        metavar="SHAPEFILE",
        default=None,
        help="local coastline shapefile for maps drawn for the report",
    )
    p.add_argument(
        "--stations",
        metavar="FILE",
        default=None,
        help="stations to tabulate and map (default RUN_DIR/stations.csv when present)",
    )
    p.add_argument(
        "--candidates",
        metavar="FILE",
        default=None,
        help="candidate regions from 'lidmelt screen' (default RUN_DIR/candidates.gpkg when "
        "present)",
    )
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Write the report and print the files written."""
    out = write_report(
        args.run_dir,
        path=args.output,
        pdf=args.pdf,
        coastlines=args.coastlines,
        stations=args.stations,
        candidates=args.candidates,
    )
    print(out)
    if args.pdf:
        print(out.with_suffix(".pdf"))
    return 0
