"""The report's section on a run's history through time: "The chain's history".

Written when the run's ``summary.json`` has a ``"motion"`` entry (a workflow with a ``[motion]``
table, :mod:`lidmelt.motion`): what the history is (its span and step, the rotations files,
what moves with the plate and what stays in the plumes' frame, the threshold of the melting
duration), one row per plume's hotspot track (its points within the grid and their span, its
length and mean rate, its largest melt then, the points where the seafloor did not yet exist),
and the figure of the tracks (:func:`lidmelt.products._tracks.tracks_figure`: the predicted
progression and the melt along each track). The maps of the history's outputs
(peak melt, its time, the duration) are among the run's maps.
"""

from __future__ import annotations

import io
from typing import Any

from lidmelt._errors import LidmeltError
from lidmelt.grids._rundir import RunDir
from lidmelt.products._report._blocks import Block, MapImage, Section, Table, format_sig
from lidmelt.products._tracks import read_track_points, tracks_figure

_HEADER = (
    "plume", "points within the grid", "times (Ma)", "length (km)", "mean rate (km/Myr)",
    "largest melt then (km)", "points before the seafloor formed",
)  # fmt: skip


def _text(value: Any, unit: str = "") -> str:
    return "none" if value is None else format_sig(float(value), unit=unit)


def tracks_table(tracks: list[dict[str, Any]]) -> Table:
    """One row per plume's hotspot track (the summary's ``motion.tracks``)."""
    rows = []
    for t in tracks:
        span = "none" if t.get("start_ma") is None else f"{t['start_ma']:g} to {t['end_ma']:g}"
        rows.append((
            str(t.get("plume")), str(t.get("points", 0)), span, _text(t.get("length_km")),
            _text(t.get("mean_rate_km_per_myr")), _text(t.get("max_melt_thickness_km")),
            str(t.get("points_before_seafloor_formed", 0)),
        ))  # fmt: skip
    return Table(_HEADER, tuple(rows))


def _png(fig, dpi: float) -> bytes:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=dpi)
    return buffer.getvalue()


def history_section(run: RunDir, *, dpi: float, width_in: float) -> Section | None:
    """The history section of the report, or None for a run without a ``[motion]`` table."""
    entry = run.summary.get("motion")
    if not isinstance(entry, dict):
        return None
    files = entry.get("files") or {}
    sources = ", ".join(f"{k}: {v.get('source')}" for k, v in files.items()) or "not recorded"
    blocks: list[Block] = [
        f"The plate's motion over the plumes from the present to {entry.get('max_age_ma')} Ma "
        f"in steps of {entry.get('step_ma')} Myr ({entry.get('steps')} evaluations of every "
        f"cell through the run's melting kernel), from the finite rotations of {sources}.",
        f"What moves and what stays: {entry.get('frame', 'not recorded')}. The melting "
        "duration counts the time during which the melt the thermal anomaly added reached "
        f"{entry.get('duration_min_melt_km')} km. A track point where the seafloor age then "
        "is negative lay beyond the seafloor of today's plate (another plate, or the ridge): "
        "it has no melt.",
    ]
    tracks = entry.get("tracks")
    if isinstance(tracks, list) and tracks:
        blocks += ["The hotspot tracks on today's plate:", tracks_table(tracks)]
    try:
        points = read_track_points(run)
        fig = tracks_figure(points, title="The chain's history along its hotspot tracks")
        fig.set_size_inches(width_in, 0.8 * width_in)
    except LidmeltError as exc:
        return Section("history", "The chain's history", (*blocks, f"No figure: {exc}"))
    caption = (
        "Predicted age against distance along each hotspot track (top) and the melt thickness "
        "then along it (bottom; dashed: the melt the thermal anomaly added; a line ends where "
        "the track leaves the grid or the seafloor did not yet exist); track_points.csv"
    )
    blocks.append(MapImage("hotspot_tracks", _png(fig, dpi), "image/png", "history", caption))
    return Section("history", "The chain's history", tuple(blocks))
