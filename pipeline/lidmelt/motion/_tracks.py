"""The hotspot tracks of a history: each plume's track on today's plate and its melt then.

A plume's track point of time t is the point of today's plate that lay above the plume at t
(:mod:`lidmelt.motion._plan`). It is kept where it lies within the grid (and, with a plate-id
grid, on the plate whose rotations carried it there). Its values: the seafloor age then (today's
age of the cell under the point minus t; negative where the seafloor did not yet exist: then
the melt columns are empty and the flag is :data:`lidmelt._variables.FLAG_NODATA`), and the
column then through the run's kernel, with the thermal anomaly of
:func:`lidmelt.motion._history.frame_inputs` at the point (the plume's own peak, the other
plumes at their great-circle distances, the mantle's grids at the plume's position).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from lidmelt._engine import ChunkInputs, evaluate_chunk
from lidmelt._files import atomic_path
from lidmelt._variables import FLAG_NODATA, OUTPUTS
from lidmelt.grids._motionfiles import write_tracks
from lidmelt.motion._history import HistoryPlan, frame_inputs
from lidmelt.motion._plan import DEFAULT_PLATE
from lidmelt.motion._rotations import great_circle_km

#: The track files in a run directory.
TRACKS_GPKG = "hotspot_tracks.gpkg"
TRACKS_GEOJSON = "hotspot_tracks.geojson"
TRACK_POINTS_FILE = "track_points.csv"
#: The columns of :data:`TRACK_POINTS_FILE`, in order.
TRACK_COLUMNS = (
    "plume", "time_ma", "lon", "lat", "seafloor_age_then_ma", "melting_top_then_km",
    "melt_thickness_km", "anomaly_melt_thickness_km", "onset_depth_km", "validity_flag",
)  # fmt: skip
_KERNEL_COLUMNS = {
    "melting_top_then_km": "melting_top_km",
    "melt_thickness_km": "melt_thickness_km",
    "anomaly_melt_thickness_km": "anomaly_melt_thickness_km",
    "onset_depth_km": "onset_depth_km",
}


@dataclass
class TrackPoints:
    """The track points of every plume within the grid, as columns (:data:`TRACK_COLUMNS`)."""

    columns: dict[str, np.ndarray]

    def of(self, plume: str) -> dict[str, np.ndarray]:
        """The columns of one plume's points, in time order."""
        keep = self.columns["plume"] == plume
        return {k: v[keep] for k, v in self.columns.items()}


def _locate(plan: HistoryPlan, lon, lat) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Row and column of the cell under each point, and whether it lies within the grid."""
    row, col = plan.grid.fractional_index(*plan.grid.to_grid_xy(lon, lat, "EPSG:4326"))
    h, w = plan.grid.shape
    with np.errstate(invalid="ignore"):
        inside = (row > -0.5) & (row < h - 0.5) & (col > -0.5) & (col < w - 0.5)
    r = np.clip(np.rint(np.nan_to_num(row)), 0, h - 1).astype(int)
    c = np.clip(np.rint(np.nan_to_num(col)), 0, w - 1).astype(int)
    return r, c, inside


def _points(plan: HistoryPlan, plates: np.ndarray | None) -> list[tuple]:
    """(plume, step, plate, lon, lat, row, col) of every track point kept (module notes)."""
    kept = []
    for track in plan.plumes:
        for plate in sorted(track.tracks):
            lon, lat = track.track_lonlat(plate)
            row, col, inside = _locate(plan, lon, lat)
            if plates is not None:
                cell = plates[row, col]
                own = np.where(np.isin(cell, list(track.tracks)), cell, DEFAULT_PLATE)
                inside &= own == plate
            kept += [
                (track.name, k, plate, lon[k], lat[k], row[k], col[k])
                for k in np.flatnonzero(inside)
            ]
    order = {t.name: i for i, t in enumerate(plan.plumes)}
    return sorted(kept, key=lambda p: (order[p[0]], p[1]))


def track_points(plan: HistoryPlan, age: np.ndarray, plates: np.ndarray | None) -> TrackPoints:
    """The track points of every plume (module notes); ``age`` is today's plate age grid."""
    points = _points(plan, plates)
    n = len(points)
    times = np.array([plan.times[p[1]] for p in points], float)
    age_then = np.array([age[p[5], p[6]] for p in points], float) - times
    fields = np.full((3, n), np.nan)
    tracks = {t.name: t for t in plan.plumes}
    for i, (name, k, plate, *_rest) in enumerate(points):
        xyz = tracks[name].tracks[plate][k][None]
        for j, value in enumerate(frame_inputs(plan, xyz, plate, k)):
            fields[j, i] = np.asarray(value, float).reshape(-1)[0]
    ok = age_then >= 0.0
    upwelling = fields[2] if plan.upwelling else 0.0
    blocks = ChunkInputs(
        np.where(ok, age_then, np.nan)[None], np.nan, fields[0][None], fields[1][None],
        np.broadcast_to(upwelling, (n,))[None] if plan.upwelling else 0.0, np.nan,
    )  # fmt: skip
    out = evaluate_chunk(blocks, settings=plan.settings, check_inputs=False)
    index = list(OUTPUTS)
    columns: dict[str, np.ndarray] = {
        "plume": np.array([p[0] for p in points], dtype=object),
        "time_ma": times,
        "lon": np.array([p[3] for p in points], float),
        "lat": np.array([p[4] for p in points], float),
        "seafloor_age_then_ma": age_then,
    }
    for column, name in _KERNEL_COLUMNS.items():
        columns[column] = out[index.index(name), 0].astype(float)
    columns["validity_flag"] = out[-1, 0].astype(np.int64)
    columns = {c: columns[c] for c in TRACK_COLUMNS}
    return TrackPoints(columns)


def _csv_cell(value: Any) -> str:
    if isinstance(value, str):
        return '"' + value.replace('"', '""') + '"' if ("," in value or '"' in value) else value
    if isinstance(value, int | np.integer):
        return str(int(value))
    return "" if not np.isfinite(value) else repr(float(value))


def _parts(columns: dict[str, np.ndarray], step: float) -> list[tuple]:
    """The stretches of consecutive times of one plume's points (each at least 2 vertices)."""
    t = columns["time_ma"]
    if not len(t):
        return []
    breaks = np.flatnonzero(np.diff(t) > step * 1.5) + 1
    parts = []
    for idx in np.split(np.arange(len(t)), breaks):
        if len(idx) >= 2:
            parts.append((columns["lon"][idx], columns["lat"][idx], t[idx]))
    return parts


def _step(plan: HistoryPlan) -> float:
    return float(plan.times[1] - plan.times[0]) if len(plan.times) > 1 else 1.0


def write_track_files(run_dir: Path, points: TrackPoints, plan: HistoryPlan) -> list[Path]:
    """Write the track lines (GeoPackage and GeoJSON) and :data:`TRACK_POINTS_FILE`."""
    step = _step(plan)
    lines = [{"plume": t.name, "parts": _parts(points.of(t.name), step)} for t in plan.plumes]
    gpkg, geojson = write_tracks(lines, run_dir / TRACKS_GPKG, run_dir / TRACKS_GEOJSON)
    cols = points.columns
    rows = [",".join(TRACK_COLUMNS)]
    rows += [
        ",".join(_csv_cell(cols[c][i]) for c in TRACK_COLUMNS) for i in range(len(cols["plume"]))
    ]
    with atomic_path(run_dir / TRACK_POINTS_FILE) as temp:
        temp.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return [gpkg, geojson, run_dir / TRACK_POINTS_FILE]


def track_summary(points: TrackPoints, plan: HistoryPlan) -> list[dict[str, Any]]:
    """Per plume: its points within the grid, their times, the track's length (km, along its
    points) and its mean rate (km/Myr), the points before the seafloor formed, its largest
    melt."""
    out = []
    for track in plan.plumes:
        cols = points.of(track.name)
        t = cols["time_ma"]
        length = 0.0
        for lon, lat, _ in _parts(cols, _step(plan)):
            length += float(np.sum(great_circle_km(lon[:-1], lat[:-1], lon[1:], lat[1:])))
        span = float(t[-1] - t[0]) if len(t) else 0.0
        melt = cols["melt_thickness_km"]
        out.append({
            "plume": track.name,
            "points": len(t),
            "start_ma": float(t[0]) if len(t) else None,
            "end_ma": float(t[-1]) if len(t) else None,
            "length_km": length,
            "mean_rate_km_per_myr": length / span if span > 0 else None,
            "points_before_seafloor_formed": int(np.sum(cols["seafloor_age_then_ma"] < 0)),
            "points_without_data": int(np.sum(cols["validity_flag"] == FLAG_NODATA)),
            "max_melt_thickness_km": float(np.nanmax(melt)) if np.isfinite(melt).any() else None,
        })  # fmt: skip
    return out
