"""The report's section on stations and candidate regions, where they were made.

``lidmelt report RUN --stations FILE --candidates FILE`` (or ``RUN_DIR/stations.csv`` and
``RUN_DIR/candidates.gpkg`` when present) adds a map of the melt thickness with both overlaid,
a table of the run's values at each station (:func:`lidmelt.products._sites.sample_stations`)
and a table of the candidate regions (``lidmelt screen``), numbers to 3 significant figures.
Under the table, one sentence says how much of the anomaly melt volume of candidate #1 comes
from beyond the melting model's calibrated pressure (:func:`deep_melt_sentence`); the table
gives that share for every candidate, in percent.
"""

from __future__ import annotations

import io
import math
import warnings
from pathlib import Path
from typing import Any

from lidmelt.grids._rundir import RunDir
from lidmelt.products._maps._figure import make_map_figure
from lidmelt.products._maps._flags import calibrated_pressure_gpa
from lidmelt.products._report._blocks import Block, MapImage, Section, Table, format_sig
from lidmelt.products._report._labels import column_label
from lidmelt.products._sampling import shown_without_melt
from lidmelt.products._screening import CANDIDATES_NAME

#: The station file the report looks for (in the run directory, outside its manifest); the
#: candidates' file is :data:`lidmelt.products._screening.CANDIDATES_NAME`.
STATIONS_NAME = "stations.csv"

#: Station columns shown (those the run has), after the station's name.
STATION_SHOWN = (
    "melt_thickness_km",
    "onset_depth_km",
    "melting_top_km",
    "excess_to_melt_k",
    "flag_meaning",
    "status",
)
#: Candidate columns shown (those the file has): the anomaly-added volume first.
CANDIDATE_SHOWN = (
    "rank",
    "plume",
    "plume_match",
    "area_km2",
    "anomaly_melt_volume_km3",
    "ambient_melt_volume_km3",
    "melt_volume_km3",
    "flagged_fraction",
    "deep_melt_share",
)
#: Heading of the candidates' ``deep_melt_share`` column (shown in percent).
DEEP_SHARE_HEADING = "Anomaly melt from beyond the calibrated pressure (%)"


def find_site_files(
    run: RunDir, stations: str | Path | None, candidates: str | Path | None
) -> tuple[Path | None, Path | None]:
    """The given files, else ``RUN_DIR/stations.csv`` and ``RUN_DIR/candidates.gpkg``."""
    found = []
    for given, default in ((stations, STATIONS_NAME), (candidates, CANDIDATES_NAME)):
        path = Path(given) if given is not None else run.path / default
        found.append(path if given is not None or path.is_file() else None)
    return found[0], found[1]


def _cell(value: Any) -> str:
    if value is None or (isinstance(value, float) and value != value):
        return "-"
    if isinstance(value, float):
        return format_sig(value)
    return str(value)


def _station_table(run: RunDir, path: Path) -> Table:
    from lidmelt.products._sites import sample_stations

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # stations outside the grid show as such in the table
        gdf = sample_stations(run, path)
    name_col = next((c for c in ("name", "id", "station") if c in gdf.columns), None)
    cols = [c for c in STATION_SHOWN if c in gdf.columns]
    header = ("Station", *(column_label(c) for c in cols))
    gdf = shown_without_melt(gdf)  # "no melting" where the onset is not defined
    rows = tuple(
        (str(row[name_col]) if name_col else str(k + 1), *(_cell(row[c]) for c in cols))
        for k, (_, row) in enumerate(gdf.iterrows())
    )
    return Table(header, rows)


def _as_float(value: Any) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def _percent(share: Any) -> str:
    """A share (0..1) as a percentage to 3 significant figures, "-" when not finite."""
    value = _as_float(share)
    return format_sig(100.0 * value) if math.isfinite(value) else "-"


def _candidate_table(gdf: Any) -> Table:
    cols = [c for c in CANDIDATE_SHOWN if c in gdf.columns]
    rows = tuple(
        tuple(_percent(row[c]) if c == "deep_melt_share" else _cell(row[c]) for c in cols)
        for _, row in gdf.iterrows()
    )
    header = (DEEP_SHARE_HEADING if c == "deep_melt_share" else column_label(c) for c in cols)
    return Table(tuple(header), rows)


def deep_melt_sentence(gdf: Any, summary: dict[str, Any]) -> str:
    """How much of the anomaly melt volume of candidate #1 comes from beyond the model's
    calibrated pressure (the summary's ``calibrated_max_pressure_gpa``); "" without
    candidates, without a finite ``deep_melt_share`` or without that pressure."""
    if not len(gdf) or "deep_melt_share" not in gdf.columns:
        return ""
    first = gdf.sort_values("rank").iloc[0] if "rank" in gdf.columns else gdf.iloc[0]
    share, pc = _as_float(first["deep_melt_share"]), calibrated_pressure_gpa(summary)
    if pc is None or not math.isfinite(share):
        return ""
    plume = first.get("plume")
    name = f" ({plume})" if isinstance(plume, str) and plume else ""
    return (
        f"{_percent(share)} % of the anomaly melt volume of candidate #1{name} comes from "
        f"beyond {pc:g} GPa (the model's calibrated pressure), where the solidus follows a "
        "continued published curve."
    )


def sites_section(run: RunDir, stations: Path | None, candidates: Path | None) -> Section | None:
    """The stations and candidates section, or None when neither was given nor found."""
    if stations is None and candidates is None:
        return None
    blocks: list[Block] = []
    if stations is not None:
        blocks += [
            f"Values of the run at the stations of {stations.name}:",
            _station_table(run, stations),
        ]
    if candidates is not None:
        import geopandas as gpd

        gdf = gpd.read_file(candidates)
        blocks += [
            f"Candidate regions of {candidates.name} (rank 1 = largest melt volume):",
            _candidate_table(gdf),
        ]
        sentence = deep_melt_sentence(gdf, run.summary)
        blocks += [sentence] if sentence else []
    return Section("sites", "Stations and candidate regions", tuple(blocks))


def sites_map(
    run: RunDir, stations: Path | None, candidates: Path | None, *, dpi: float, width_in: float
) -> MapImage | None:
    """Melt thickness with the stations and candidates overlaid, as PNG bytes."""
    if (stations is None and candidates is None) or "melt_thickness_km" not in run.outputs:
        return None
    fig, _ = make_map_figure(
        run,
        "melt_thickness_km",
        stations=stations,
        candidates=candidates,
        coastlines=False,
        dpi=dpi,
        width_in=width_in,
    )
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return MapImage(
        "melt_thickness_km", buf.getvalue(), "image/png", "with stations and candidates"
    )
