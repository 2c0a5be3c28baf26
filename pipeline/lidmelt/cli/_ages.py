"""``lidmelt ages``: dated volcanoes against a run's history through time."""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np

from lidmelt.cli._common import format_table, print_warnings, run_dir_option
from lidmelt.products._ages import write_ages

_SHOWN = ("plume", "age_ma", "predicted_age_ma", "residual_myr", "residual_sigma",
          "peak_anomaly_melt_thickness_km", "in_melting_swath")  # fmt: skip


def register(subparsers: argparse._SubParsersAction) -> None:
    """Register ``lidmelt ages``."""
    p = subparsers.add_parser(
        "ages",
        parents=[run_dir_option()],
        help="dated volcanoes against the predicted age progression of a run with a history",
        description=(
            "For each dated feature (a CSV with lon, lat, age_ma and optionally age_error_ma, "
            "one standard error in Myr), read the run's history through time at its cell: the "
            "predicted age (the time of the largest melt the thermal anomaly added there), the "
            "residual (observed minus predicted) in Myr and in standard errors, its peak melt "
            "thickness and whether it lies within a track's melting swath; its nearest hotspot "
            "track and its distance along it. Writes the table and, beside it, the "
            "age-distance figure (observed ages with error bars, the predicted progression, "
            "the melt along each track). The run needs a [motion] table."
        ),
    )
    p.add_argument("features", metavar="FEATURES.csv", help="the dated features (lon, lat, age_ma)")
    p.add_argument(
        "-o", "--output", metavar="OUT.csv", required=True,
        help="CSV to write; the age-distance figure goes beside it (OUT.png)",
    )  # fmt: skip
    p.add_argument("--figure", metavar="FIG.png", help="the figure's file (default OUT.png)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Compare the features with the run's history; print a table and write the files."""
    with print_warnings("ages"):
        frame, csv_path, png = write_ages(
            args.run_dir, args.features, args.output, figure=args.figure
        )
    print(format_table(frame[[c for c in _SHOWN if c in frame.columns]], max_rows=20))
    sigma = frame["residual_sigma"].to_numpy(float)
    within = np.isfinite(sigma) & (np.abs(sigma) <= 2.0)
    print(
        f"{len(frame)} features, {int(frame['in_melting_swath'].sum())} within a melting "
        f"swath; {int(within.sum())} of {int(np.isfinite(sigma).sum())} with an error lie "
        "within 2 standard errors of the predicted age"
    )
    print(f"wrote {Path(csv_path)} and {Path(png)}")
    return 0
