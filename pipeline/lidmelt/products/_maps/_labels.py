"""Labels on a map without overlaps: plume names, station names, candidate ranks.

:func:`place_label` puts a label beside its point, inside the map frame; :func:`spread_labels`
then moves the labels of one map apart, away from each other and from the marks they name, with
adjustText (a maintained label-placement library for matplotlib, 1.x), drawing a thin leader
line where a label had to move away from its point. The placement is repeatable: a fixed number
of iterations (not a time limit), and adjustText seeds its own random start.
"""

from __future__ import annotations

from typing import Any

import cartopy.crs as ccrs
import numpy as np
from matplotlib import patheffects as mpe

#: adjustText iterations per map (a count, not a time: the result does not depend on speed).
LABEL_ITERATIONS = 300


def halo(width: float) -> list[Any]:
    """A white outline behind text or lines, so they read on any colour."""
    return [mpe.withStroke(linewidth=width, foreground="white")]


def place_label(
    ax: Any, lon: float, lat: float, text: str, *, fontsize: float, below: bool = False, **kw: Any
) -> Any:
    """A label beside the point (lon, lat), kept inside the map frame; None if off the map.

    The label goes up and right of the point (down and left with ``below``, so that plume
    names and station names at the same place start apart); where it would cross the frame
    (measured as rendered) it moves to the other side of the point. The label is placed in
    axes fractions, with its point in ``label.lidmelt_point`` for :func:`spread_labels`.
    """
    x, y = ax.projection.transform_point(lon, lat, ccrs.PlateCarree())
    u, v = (ax.transData + ax.transAxes.inverted()).transform((x, y))
    if not (np.isfinite(u) and np.isfinite(v) and 0.0 <= u <= 1.0 and 0.0 <= v <= 1.0):
        return None
    width, height = ax.get_window_extent().size
    du, dv = 4.0 * ax.figure.dpi / 72.0 / width, 3.0 * ax.figure.dpi / 72.0 / height
    sx, sy = (-1, -1) if below else (1, 1)
    label = ax.text(
        u + sx * du,
        v + sy * dv,
        text,
        transform=ax.transAxes,
        ha="left" if sx > 0 else "right",
        va="bottom" if sy > 0 else "top",
        fontsize=fontsize,
        path_effects=halo(2.0),
        zorder=7,
        clip_on=False,
        **kw,
    )
    renderer = ax.figure.canvas.get_renderer()
    box, frame = label.get_window_extent(renderer), ax.get_window_extent(renderer)
    if box.x1 > frame.x1 or box.x0 < frame.x0:
        sx = -sx
    if box.y1 > frame.y1 or box.y0 < frame.y0:
        sy = -sy
    label.set_position((u + sx * du, v + sy * dv))
    label.set_ha("left" if sx > 0 else "right")
    label.set_va("bottom" if sy > 0 else "top")
    label.lidmelt_point = (u, v)
    return label


def label_overlaps(ax: Any, labels: list[Any]) -> int:
    """How many pairs of ``labels`` overlap as rendered (for callers and tests)."""
    renderer = ax.figure.canvas.get_renderer()
    boxes = [t.get_window_extent(renderer) for t in labels if t is not None]
    return sum(boxes[i].overlaps(boxes[j]) for i in range(len(boxes)) for j in range(i))


def spread_labels(ax: Any, labels: list[Any]) -> list[Any]:
    """Move overlapping ``labels`` apart and off the points they name (the plume and station
    marks), inside the frame; a leader line joins a moved label to its point.

    Returns the labels. Nothing moves when no two labels overlap and no label covers another's
    point (a map with one plume stays as :func:`place_label` drew it).
    """
    from adjustText import adjust_text

    labels = [t for t in labels if t is not None]
    points = np.array([t.lidmelt_point for t in labels]) if labels else np.empty((0, 2))
    if len(labels) < 2 or not _crowded(ax, labels, points):
        return labels
    adjust_text(
        labels,
        x=points[:, 0],
        y=points[:, 1],
        ax=ax,
        iter_lim=LABEL_ITERATIONS,
        expand=(1.15, 1.3),
        ensure_inside_axes=True,
        arrowprops={"arrowstyle": "-", "lw": 0.6, "color": "0.15"},
    )
    return labels


def _crowded(ax: Any, labels: list[Any], points: np.ndarray) -> bool:
    """Whether two labels overlap or a label covers another label's point."""
    if label_overlaps(ax, labels):
        return True
    renderer = ax.figure.canvas.get_renderer()
    to_display = ax.transAxes.transform(points)
    for k, label in enumerate(labels):
        box = label.get_window_extent(renderer)
        others = np.delete(to_display, k, axis=0)
        if any(box.contains(x, y) for x, y in others):
            return True
    return False
