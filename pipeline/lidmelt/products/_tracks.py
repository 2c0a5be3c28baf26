"""A run's hotspot tracks: their points, distances along them, and the age-distance figure.

A run with a ``[motion]`` table holds ``track_points.csv`` (:mod:`lidmelt.motion._tracks`). Along
each plume's track the distance is measured from its first point (the plume today) through its
points in time order, as great circles on the sphere of the rotations
(:func:`lidmelt.motion._rotations.great_circle_km`); the predicted age progression is the points'
time against that distance. A point of interest is placed on the nearest track by projecting it
onto the track's segments (each divided into :data:`SUBSTEPS` parts; its time and distance
interpolated linearly between the two points).

The age-distance figure (:func:`age_distance_figure`) has one column per plume: on top the
predicted progression as a line (time against distance along the track) with the observed ages
as points with their error bars (hollow outside the melting swath) and the history's predicted
age at each feature (the time of its largest added melt) as crosses; below, the melt thickness
along the track then (and the melt the anomaly added), with the stretch where the seafloor did
not yet exist shaded. Drawn with matplotlib's Agg canvas.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from lidmelt._errors import RunDirError
from lidmelt.grids._rundir import RunDir
from lidmelt.motion._rotations import great_circle_km
from lidmelt.motion._tracks import TRACK_POINTS_FILE

#: Parts each segment between two track points is divided into when a point is placed.
SUBSTEPS = 20
#: Line and point colours (Okabe & Ito 2008 palette, from memory).
_PREDICTED, _OBSERVED, _ADDED = "#0072B2", "#D55E00", "#009E73"


def along_track_km(lon, lat) -> np.ndarray:
    """Distance along a polyline from its first point (km, great circles between points)."""
    lon, lat = np.asarray(lon, float), np.asarray(lat, float)
    if lon.size < 2:
        return np.zeros(lon.shape)
    steps = great_circle_km(lon[:-1], lat[:-1], lon[1:], lat[1:])
    return np.concatenate([[0.0], np.cumsum(steps)])


def read_track_points(run: RunDir) -> pd.DataFrame:
    """The run's track points with ``along_track_km`` per plume; a RunDirError for a run
    without a history through time."""
    if TRACK_POINTS_FILE not in run.manifest_files:
        msg = (
            f"run directory {str(run.shown_path)!r} has no hotspot tracks ({TRACK_POINTS_FILE}): "
            "it was not run with a [motion] table. Add a [motion] table to the workflow "
            "(docs/workflow.md) and run it again."
        )
        raise RunDirError(msg)
    frame = pd.read_csv(run.checked(TRACK_POINTS_FILE), keep_default_na=True)
    frame["plume"] = frame["plume"].astype(str)
    along = np.zeros(len(frame))
    for _, idx in frame.groupby("plume", sort=False).indices.items():
        along[idx] = along_track_km(frame["lon"].to_numpy()[idx], frame["lat"].to_numpy()[idx])
    frame["along_track_km"] = along
    return frame


@dataclass(frozen=True)
class OnTrack:
    """Points placed on their nearest track: its plume, the distance to it and along it (km),
    and the track's time there (Ma, interpolated between its points)."""

    plume: np.ndarray
    distance_km: np.ndarray
    along_km: np.ndarray
    track_time_ma: np.ndarray


def _dense(points: pd.DataFrame) -> dict[str, np.ndarray]:
    """Every track's segments divided into :data:`SUBSTEPS` parts (lon, lat, along, time)."""
    out: dict[str, list] = {"plume": [], "lon": [], "lat": [], "along": [], "time": []}
    f = np.linspace(0.0, 1.0, SUBSTEPS + 1)[:-1]
    for name, idx in points.groupby("plume", sort=False).indices.items():
        cols = [points[c].to_numpy(float)[idx] for c in ("lon", "lat", "along_track_km", "time_ma")]
        if len(idx) == 1:
            dense = [c[:1] for c in cols]
        else:
            dense = [np.concatenate([(c[:-1, None] + f * np.diff(c)[:, None]).ravel(), c[-1:]])
                     for c in cols]  # fmt: skip
        for key, values in zip(("lon", "lat", "along", "time"), dense, strict=True):
            out[key].append(values)
        out["plume"].append(np.full(len(dense[0]), name, dtype=object))
    return {k: np.concatenate(v) if v else np.array([]) for k, v in out.items()}


def place_on_tracks(points: pd.DataFrame, lon, lat) -> OnTrack:
    """Each point (degrees) placed on its nearest track (module notes)."""
    dense = _dense(points)
    lon, lat = np.atleast_1d(np.asarray(lon, float)), np.atleast_1d(np.asarray(lat, float))
    n = lon.size
    if not len(dense["lon"]):
        nan = np.full(n, np.nan)
        return OnTrack(np.full(n, "", dtype=object), nan, nan.copy(), nan.copy())
    dist = great_circle_km(lon[:, None], lat[:, None], dense["lon"][None], dense["lat"][None])
    best = np.argmin(dist, axis=1)
    return OnTrack(
        dense["plume"][best], dist[np.arange(n), best], dense["along"][best], dense["time"][best]
    )


def _draw_progression(
    ax, track: pd.DataFrame, features: pd.DataFrame | None, *, legend: bool = True
) -> None:
    ax.plot(track["along_track_km"], track["time_ma"], color=_PREDICTED, lw=1.8,
            label="predicted: time above the plume")  # fmt: skip
    if features is not None and len(features):
        inside = features["in_melting_swath"].to_numpy(bool)
        err = features.get("age_error_ma")
        err = None if err is None else np.nan_to_num(err.to_numpy(float))
        for keep, style in (
            (inside, {"color": _OBSERVED, "label": "observed ages"}),
            (
                ~inside,
                {"color": "0.5", "mfc": "none", "label": "observed, outside the melting swath"},
            ),
        ):
            if keep.any():
                ax.errorbar(
                    features["distance_along_track_km"][keep], features["age_ma"][keep],
                    yerr=None if err is None else err[keep], fmt="o", ms=5, capsize=3, lw=1,
                    **style,
                )  # fmt: skip
        ax.plot(
            features["distance_along_track_km"],
            features["predicted_age_ma"],
            "x",
            color=_PREDICTED,
            ms=6,
            label="predicted at the feature: largest added melt",
        )
    ax.set_ylabel("age (Ma)")
    ax.grid(alpha=0.3)
    if legend:
        ax.legend(fontsize=8, loc="upper left")


def _draw_melt(ax, track: pd.DataFrame, *, legend: bool = True) -> None:
    d = track["along_track_km"].to_numpy(float)
    ax.plot(d, track["melt_thickness_km"], color="0.15", lw=1.6, label="melt thickness then")
    ax.plot(d, track["anomaly_melt_thickness_km"], color=_ADDED, lw=1.4, ls="--",
            label="melt added by the thermal anomaly")  # fmt: skip
    unformed = track["seafloor_age_then_ma"].to_numpy(float) < 0
    if unformed.any():
        lo, hi = d[unformed].min(), d[unformed].max()
        ax.axvspan(lo, hi, color="0.85", zorder=0, label="seafloor not yet formed")
    ax.set_ylabel("melt (km)")
    ax.set_xlabel("distance along the track from the plume today (km)", fontsize=9)
    ax.set_ylim(bottom=0)
    ax.grid(alpha=0.3)
    if legend:
        ax.legend(fontsize=8, loc="upper right")


def age_distance_figure(
    points: pd.DataFrame, features: pd.DataFrame | None = None, *, plumes=None, title: str = ""
) -> Any:
    """The age-distance figure (module notes) of ``plumes`` (default: every plume of
    ``points``); ``features`` with ``plume``, ``distance_along_track_km``, ``age_ma`` and
    optionally ``age_error_ma`` are drawn on their track's column. Returns the figure."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    names = list(plumes) if plumes is not None else list(dict.fromkeys(points["plume"]))
    fig = Figure(figsize=(max(6.5, 4.6 * len(names)), 6.8), dpi=150, facecolor="white")
    FigureCanvasAgg(fig)
    grid = fig.add_gridspec(2, max(len(names), 1), height_ratios=(1.3, 1), hspace=0.08,
                            wspace=0.25, left=0.09, right=0.97, top=0.88, bottom=0.09)  # fmt: skip
    for k, name in enumerate(names):
        track = points[points["plume"] == name]
        top = fig.add_subplot(grid[0, k])
        bottom = fig.add_subplot(grid[1, k], sharex=top)
        mine = None if features is None else features[features["plume"] == name]
        _draw_progression(top, track, mine, legend=k == 0)
        _draw_melt(bottom, track, legend=k == 0)
        top.set_title(f"hotspot track of {name}", fontsize=10)
        top.tick_params(labelbottom=False, labelsize=8)
        bottom.tick_params(labelsize=8)
    fig.text(0.09, 0.975, title or "Age against distance along the hotspot tracks",
             fontsize=12, fontweight="bold", va="top")  # fmt: skip
    return fig


#: Colours of the plumes in :func:`tracks_figure` (Okabe & Ito 2008, from memory), in turn.
_PLUME_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000")


def tracks_figure(points: pd.DataFrame, *, title: str = "") -> Any:
    """Every plume's track on two shared panels: the predicted age against distance along it
    (top) and the melt thickness then (bottom; dashed: the melt the anomaly added), a colour per
    plume. Returns the figure."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(8.0, 6.4), dpi=150, facecolor="white")
    FigureCanvasAgg(fig)
    grid = fig.add_gridspec(2, 1, height_ratios=(1.2, 1), hspace=0.08, left=0.1, right=0.97,
                            top=0.9, bottom=0.09)  # fmt: skip
    top = fig.add_subplot(grid[0])
    bottom = fig.add_subplot(grid[1], sharex=top)
    for k, name in enumerate(dict.fromkeys(points["plume"])):
        track = points[points["plume"] == name]
        colour = _PLUME_COLOURS[k % len(_PLUME_COLOURS)]
        d = track["along_track_km"]
        top.plot(d, track["time_ma"], color=colour, lw=1.8, label=name)
        bottom.plot(d, track["melt_thickness_km"], color=colour, lw=1.6)
        bottom.plot(d, track["anomaly_melt_thickness_km"], color=colour, lw=1.0, ls="--")
    top.set_ylabel("predicted age (Ma)")
    top.legend(fontsize=8, loc="upper left", title="plume", title_fontsize=8)
    top.tick_params(labelbottom=False, labelsize=8)
    bottom.set_ylabel("melt then (km)")
    bottom.set_xlabel("distance along the hotspot track from the plume today (km)")
    bottom.set_ylim(bottom=0)
    bottom.tick_params(labelsize=8)
    for ax in (top, bottom):
        ax.grid(alpha=0.3)
    fig.text(0.1, 0.975, title or "The hotspot tracks", fontsize=12, fontweight="bold", va="top")
    return fig
