"""What the interactive map page draws over the layers: plumes, stations, candidates, tracks.

The same marks as the static maps (:mod:`._marks`, :mod:`._overlays`) and the report: the
workflow's plume centres (``summary.json``), stations (a given file, else ``RUN_DIR/stations.csv``
when present), candidate outlines (a given file, else ``RUN_DIR/candidates.gpkg`` when present,
labelled by rank) and, for a run with a ``[motion]`` table, its hotspot tracks
(``track_points.csv``, one line per plume, oldest point last). Positions (EPSG:4326 degrees)
are converted to the run's CRS with pyproj and then to the grid's cell coordinates (column,
row), so the page needs no projection code. Names are kept as text; the page shows them with
``textContent`` only.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
from pyproj import Transformer

from lidmelt.grids._rundir import RunDir
from lidmelt.motion._tracks import TRACK_POINTS_FILE
from lidmelt.products._maps._explore_data import GridFrame
from lidmelt.products._maps._marks import plumes_of
from lidmelt.products._maps._overlays import load_ranked_candidates, load_stations
from lidmelt.products._report._sites import find_site_files
from lidmelt.products._tracks import read_track_points


class CellPlacer:
    """Longitude and latitude (degrees) to the grid's fractional (column, row)."""

    def __init__(self, frame: GridFrame) -> None:
        self.frame = frame
        self.inverse = ~frame.transform
        crs = frame.crs
        self.geographic = crs is None or crs.is_geographic
        self.to_crs = (
            None if self.geographic else Transformer.from_crs("EPSG:4326", crs, always_xy=True)
        )

    def __call__(self, lon: Any, lat: Any) -> tuple[np.ndarray, np.ndarray]:
        """Fractional columns and rows (cell centres at ``k + 0.5``) of the points."""
        x, y = np.asarray(lon, float), np.asarray(lat, float)
        if self.to_crs is not None:
            x, y = self.to_crs.transform(x, y)
        elif self.frame.transform.a > 0:  # a longitude's turn that lies on the grid
            west = self.frame.transform.c
            x = west + np.mod(x - west, 360.0)
        col, row = self.inverse * (x, y)
        return np.asarray(col, float), np.asarray(row, float)


def _rounded(values: np.ndarray) -> list[float | None]:
    return [round(float(v), 3) if np.isfinite(v) else None for v in np.ravel(values)]


def _points(place: CellPlacer, lon: Any, lat: Any, names: list[str]) -> list[dict]:
    col, row = place(lon, lat)
    return [
        {"name": n, "col": c, "row": r}
        for n, c, r in zip(names, _rounded(col), _rounded(row), strict=True)
        if c is not None and r is not None
    ]


def _rings(geom: Any) -> list[Any]:
    parts = getattr(geom, "geoms", [geom])
    return [np.asarray(p.exterior.coords) for p in parts if hasattr(p, "exterior")]


def candidates_entry(place: CellPlacer, path: Path) -> list[dict]:
    """Candidate outlines: label and rings of (column, row)."""
    geoms, labels = load_ranked_candidates(path)
    out = []
    for geom, label in zip(geoms, labels, strict=False):
        rings = []
        for ring in _rings(geom):
            col, row = place(ring[:, 0], ring[:, 1])
            rings.append([_rounded(col), _rounded(row)])
        out.append({"label": str(label), "rings": rings})
    return out


def tracks_entry(run: RunDir, place: CellPlacer) -> list[dict]:
    """The hotspot tracks of a run with a history: per plume its points (youngest first)."""
    if TRACK_POINTS_FILE not in run.manifest_files:
        return []
    frame = read_track_points(run)
    out = []
    for plume, part in frame.groupby("plume", sort=False):
        part = part.sort_values("time_ma")
        col, row = place(part["lon"].to_numpy(), part["lat"].to_numpy())
        out.append(
            {
                "name": str(plume),
                "col": _rounded(col),
                "row": _rounded(row),
                "time_ma": _rounded(part["time_ma"].to_numpy()),
            }
        )
    return out


def marks_entry(
    run: RunDir, frame: GridFrame, *, stations: Any = None, candidates: Any = None
) -> dict[str, Any]:
    """Every mark of the page: ``plumes``, ``stations``, ``candidates``, ``tracks`` (lists)."""
    place = CellPlacer(frame)
    plumes = plumes_of(run.summary)
    station_path, candidate_path = find_site_files(run, stations, candidates)
    out: dict[str, Any] = {
        "plumes": _points(
            place, [p.lon for p in plumes], [p.lat for p in plumes], [p.name for p in plumes]
        ),
        "stations": [],
        "candidates": [],
        "tracks": tracks_entry(run, place),
    }
    if station_path is not None:
        st = load_stations(station_path)
        names = list(st.names) or [str(k) for k in range(1, st.lon.size + 1)]
        out["stations"] = _points(place, st.lon, st.lat, names)
    if candidate_path is not None:
        out["candidates"] = candidates_entry(place, candidate_path)
    return out
