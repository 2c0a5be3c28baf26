"""Named marks on a map: the workflow's plume centres and the candidates' rank labels.

Plume centres come from the run's ``summary.json`` (``inputs.thermal_anomaly_k.plumes``: name,
longitude, latitude, as the workflow gave them); each is drawn as a ringed dot with its name.
Candidate outlines (:func:`._overlays.draw_candidates`) get their rank (``#1`` = largest melt
volume) at a point inside each polygon. Every label stays inside the map frame
(:func:`._overlays.place_label`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import cartopy.crs as ccrs
from matplotlib.lines import Line2D

from lidmelt.products._maps._labels import halo, place_label
from lidmelt.products._maps._style import CANDIDATE_COLOR

#: Marker of a plume centre: a black ring, open so that the colours and any hatching of the
#: flagged cells beneath it stay visible, with a white halo that reads on dark colours.
PLUME_MARKER = {"marker": "o", "mfc": "none", "mec": "black", "mew": 1.3}


@dataclass(frozen=True)
class Plume:
    """A plume centre of the workflow (degrees) and its name."""

    name: str
    lon: float
    lat: float


def plumes_of(summary: dict[str, Any]) -> list[Plume]:
    """The plume centres recorded in a run's summary (empty when the run has none)."""
    entry = (summary.get("inputs") or {}).get("thermal_anomaly_k") or {}
    plumes = entry.get("plumes") if isinstance(entry, dict) else None
    out = []
    for k, p in enumerate(plumes or [], start=1):
        try:
            lon, lat = float(p["longitude"]), float(p["latitude"])
        except (KeyError, TypeError, ValueError):
            continue
        out.append(Plume(str(p.get("name") or f"plume {k}"), lon, lat))
    return out


def draw_plumes(ax: Any, plumes: list[Plume], fs: float, *, names: bool = True) -> list[Any]:
    """Open rings at the plume centres, with their names inside the frame; return the labels."""
    if not plumes:
        return []
    ax.plot(
        [p.lon for p in plumes],
        [p.lat for p in plumes],
        ls="none",
        ms=0.8 * fs,
        transform=ccrs.PlateCarree(),
        zorder=6,
        path_effects=halo(2.6),
        **PLUME_MARKER,
    )
    if not names:
        return []
    return [
        place_label(ax, p.lon, p.lat, p.name, fontsize=0.85 * fs, below=True, style="italic")
        for p in plumes
    ]


def plume_legend_handle(fs: float) -> Any:
    """The legend entry of the plume centres."""
    return Line2D([], [], ls="none", ms=0.8 * fs, label="plume centre (workflow)", **PLUME_MARKER)


def draw_candidate_labels(
    ax: Any, candidates: list[Any], labels: tuple[str, ...], fs: float
) -> list[Any]:
    """The rank label of each candidate polygon at the north-west corner of its outline's
    bounding box, clear of the plume and station marks near its centre (kept in the frame);
    return the labels."""
    out = []
    for geom, text in zip(candidates, labels, strict=False):
        west, _, _, north = geom.bounds
        kw = {"fontsize": 0.85 * fs, "color": CANDIDATE_COLOR, "weight": "bold"}
        out.append(place_label(ax, west, north, text, **kw))
    return out
