"""How probability maps are drawn: a fixed 0-1 scale and labelled contours.

A probability map of an ensemble run (``melt_probability``, ``melt_probability_ge_<T>km``;
:mod:`lidmelt.products._ensemble`) has the style key ``"probability"``
(:data:`._style.STYLES`): the sequential, perceptually uniform ``magma_r`` (light: unlikely,
dark: likely; matplotlib's viridis family, common practice), with colour limits fixed at 0 and
1 (:data:`PROBABILITY_LIMITS`) rather than percentiles of the cells, so that two maps of
probability compare colour for colour, and the 0.5 contour (more likely than not to melt;
:data:`PROBABILITY_CONTOURS`) drawn as a black line over a white halo, labelled with its value,
marked on the colour bar and named in the legend. The contour of a level L is the edge of the
cells with a probability >= L (those the screening and the likely area count): it is traced
just below L, so that a plateau at exactly L (a probability that is k/N for N members) lies
inside it; it is drawn where some cells reach L and others do not (:func:`crossing_levels`),
and the caption says so when it is not. Percentile maps (``<variable>_p<q>``) take their base
variable's style.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from matplotlib.lines import Line2D

#: Colour map of the probability maps (light = unlikely, dark = likely).
PROBABILITY_CMAP = "magma_r"
#: Fixed colour limits of a probability (dimensionless).
PROBABILITY_LIMITS = (0.0, 1.0)
#: Probability contours drawn and labelled: more likely than not to melt.
PROBABILITY_CONTOURS = (0.5,)
#: Colour of a drawn level contour (over a white halo).
CONTOUR_COLOR = "black"

#: Most cells along either axis that a contour is traced over (a coarser stride beyond).
_CONTOUR_CELLS = 800


def fixed_limits(values: np.ndarray, limits: tuple[float, float]) -> tuple[float, float, str]:
    """The fixed colour ``limits`` and the colour-bar ``extend`` for any value beyond them."""
    vmin, vmax = float(limits[0]), float(limits[1])
    finite = np.asarray(values, dtype=float)
    finite = finite[np.isfinite(finite)]
    below = bool(finite.size and finite.min() < vmin)
    above = bool(finite.size and finite.max() > vmax)
    return vmin, vmax, extend_of(below, above)


def crossing_levels(values: np.ndarray, levels: tuple[float, ...]) -> tuple[float, ...]:
    """The ``levels`` L that some finite values reach (>= L) and others do not (drawable)."""
    finite = np.asarray(values, dtype=float)
    finite = finite[np.isfinite(finite)]
    if not finite.size:
        return ()
    return tuple(v for v in levels if finite.min() < v <= finite.max())


def _traced(level: float) -> float:
    """Where the contour of ``level`` is traced: just below it, so cells equal to it are in."""
    return level - 1e-6 * max(1.0, abs(level))


def draw_level_contours(
    ax: Any, da: Any, values: np.ndarray, src_crs: Any, levels: tuple[float, ...], fs: float
) -> tuple[float, ...]:
    """Contours of ``values`` at ``levels`` (the edges of the cells >= each level), black over a
    white halo, each labelled with its value; return the levels that cross the data (the others
    are not drawn)."""
    crossing = crossing_levels(values, levels)
    if not crossing:
        return ()
    step = max(1, int(np.ceil(max(values.shape) / _CONTOUR_CELLS)))
    xs, ys = da["x"].values[::step], da["y"].values[::step]
    grid = values[::step, ::step]
    common = {"levels": [_traced(v) for v in crossing], "transform": src_crs, "zorder": 3}
    ax.contour(xs, ys, grid, colors="white", linewidths=2.4, **common)
    lines = ax.contour(xs, ys, grid, colors=CONTOUR_COLOR, linewidths=1.1, **common)
    labels = ax.clabel(lines, fmt=lambda v: f"{v:.4g}", fontsize=0.85 * fs, inline=True)
    for text in labels:
        text.set_bbox({"boxstyle": "round,pad=0.1", "fc": "white", "ec": "none", "alpha": 0.8})
    return crossing


def contour_legend_handles(levels: tuple[float, ...]) -> list[Any]:
    """One legend line per drawn contour level."""
    return [
        Line2D([], [], color=CONTOUR_COLOR, lw=1.1, label=f"probability {v:g} (contour)")
        for v in levels
    ]


def mark_colorbar(cbar: Any, levels: tuple[float, ...]) -> None:
    """Mark the contour levels on the colour bar with the contours' colour."""
    if levels:
        cbar.add_lines(list(levels), [CONTOUR_COLOR] * len(levels), [1.5] * len(levels))


def extend_of(below: bool, above: bool) -> str:
    """Matplotlib's colour-bar ``extend`` for values below and/or above the limits."""
    return {
        (False, False): "neither",
        (True, False): "min",
        (False, True): "max",
        (True, True): "both",
    }[(below, above)]
