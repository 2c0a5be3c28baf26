"""``lidmelt regions``: statistics of a run inside polygons."""

from __future__ import annotations

import argparse

import pandas as pd

from lidmelt.cli._common import format_table, print_warnings, run_dir_option
from lidmelt.products._regions import STAT_COLUMNS, region_statistics, write_regions
from lidmelt.products._sampling import NO_MELTING, check_output_path

#: Statistics shown in the printed table of ``regions``, where present (the file holds all).
SHOWN_STATISTICS = (
    "area_km2",
    "melting_area_km2",
    "mean_melt_thickness_km",
    "max_melt_thickness_km",
    "anomaly_melt_volume_km3",
    "ambient_melt_volume_km3",
    "melt_volume_km3",
    "shallowest_onset_depth_km",
    "flagged_fraction",
    "melt_production_km3_yr",
)


def register(subparsers: argparse._SubParsersAction) -> None:
    """Register ``lidmelt regions``."""
    p = subparsers.add_parser(
        "regions",
        parents=[run_dir_option()],
        help="statistics of a run inside polygons",
        description=(
            "For each polygon: geodesic area, melting area, mean and max melt thickness, melt "
            "volume, shallowest onset depth and mean thermal anomaly of the cells whose centres "
            "fall inside; where the run has them also the anomaly melt volume, plate-age range, "
            "fraction of flagged cells and melt production (km3/yr). The polygons' own "
            "attributes are kept."
        ),
    )
    p.add_argument("polygons", metavar="POLYGONS", help="polygon file (any format GDAL reads)")
    p.add_argument(
        "-o",
        "--output",
        metavar="OUT",
        help="write OUT.gpkg (with polygons) or OUT.csv (table only), chosen by the suffix",
    )
    p.add_argument("--crs", metavar="CRS", help="CRS of a polygon file that declares none")
    p.set_defaults(func=run)


def _shown_onsets(frame: pd.DataFrame) -> pd.DataFrame:
    """The printed table with "no melting" as the shallowest onset of a polygon that has data
    but no melting cell (the onset is not defined there; the file keeps NaN)."""
    column = "shallowest_onset_depth_km"
    if column not in frame.columns or "melting_area_km2" not in frame.columns:
        return frame
    none = (frame["melting_area_km2"] == 0) & frame[column].isna()
    if not none.any():
        return frame
    out = frame.copy()
    out[column] = out[column].astype(object).where(~none, NO_MELTING)
    return out


def run(args: argparse.Namespace) -> int:
    """Compute the polygon statistics, print them and write the file given with ``-o``."""
    out = (
        None
        if args.output is None
        else check_output_path(args.output, (".gpkg", ".csv"), what="region statistics")
    )
    with print_warnings("regions"):
        gdf = region_statistics(args.run_dir, args.polygons, crs=args.crs)
    own = [c for c in gdf.columns if c not in STAT_COLUMNS and c != gdf.geometry.name][:2]
    shown = own + [c for c in SHOWN_STATISTICS if c in gdf.columns]
    print(format_table(_shown_onsets(pd.DataFrame(gdf[shown]))))
    if out is None:
        print(f"{len(gdf)} polygons; no file written (give -o OUT.gpkg or -o OUT.csv to save)")
    else:
        write_regions(gdf, out)
        print(f"{len(gdf)} polygons; wrote {out}")
    return 0
