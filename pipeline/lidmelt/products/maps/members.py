"""The ensemble's member totals as a histogram (a small figure for the report).

:func:`member_histogram` draws how one basin total (default the melt volume) spreads over the
members of an ensemble run (``ensemble_members.csv``; :mod:`lidmelt.products.ensemble`), with
its percentiles (those the run's summary gives, else computed from the members with numpy's
default linear interpolation) as labelled vertical lines. Drawn on an Agg canvas without pyplot.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from lidmelt.errors import InputError

__all__ = ["HISTOGRAM_COLOR", "TOTAL_LABELS", "member_histogram"]

#: Bar colour of the histogram (a mid viridis blue-green).
HISTOGRAM_COLOR = "#21918c"
#: Axis label of each basin total of the members.
TOTAL_LABELS = {
    "melt_volume_km3": "basin melt volume (km³)",
    "anomaly_melt_volume_km3": "melt volume added by the thermal anomaly (km³)",
    "melting_area_km2": "melting area (km²)",
}
_PERCENTILE_STYLE = {"p10": ":", "p50": "-", "p90": "--"}


def member_histogram(
    members: pd.DataFrame,
    column: str = "melt_volume_km3",
    *,
    percentiles: Mapping[str, Any] | None = None,
    width_in: float = 6.0,
    dpi: float = 100,
) -> Figure:
    """Histogram of one basin total over the members, with its percentiles marked.

    Parameters
    ----------
    members : DataFrame
        ``ensemble_members.csv``, one row per member.
    column : str
        The total to draw (a column of ``members``; units in its suffix).
    percentiles : mapping, optional
        ``{"p10": value, "p50": ..., "p90": ..., "mean": ...}`` from the run's summary; None:
        the 10th, 50th and 90th percentiles of the members.
    width_in, dpi : float
        Figure width (in) and resolution; the height is 0.5 x the width.

    Raises
    ------
    InputError
        If ``members`` has no such column or no finite value in it.
    """
    values = pd.to_numeric(members.get(column, pd.Series(dtype=float)), errors="coerce")
    values = values[np.isfinite(values)].to_numpy(dtype=float)
    if column not in members.columns or not values.size:
        msg = (
            f"the ensemble members have no finite {column!r} (columns: "
            f"{', '.join(map(str, members.columns))}); expected one of "
            f"{', '.join(TOTAL_LABELS)}. Run the ensemble again to rewrite its members file."
        )
        raise InputError(msg)
    marks = _marks(values, percentiles)
    fig = Figure(figsize=(width_in, 0.5 * width_in), dpi=dpi, facecolor="white")
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0.1, 0.17, 0.86, 0.7))
    bins = int(np.clip(np.sqrt(values.size), 5, 30))  # square-root rule, common practice
    ax.hist(values, bins=bins, color=HISTOGRAM_COLOR, edgecolor="white", linewidth=0.5)
    for key, value in marks.items():
        ax.axvline(value, color="black", lw=1.0, ls=_PERCENTILE_STYLE.get(key, "-."))
        ax.annotate(
            key,
            (value, 1.0),
            xycoords=("data", "axes fraction"),
            xytext=(2, -2),
            textcoords="offset points",
            va="top",
            fontsize=8,
        )
    label = TOTAL_LABELS.get(column, column.replace("_", " "))
    ax.set_xlabel(label, fontsize=9)
    ax.set_ylabel("members", fontsize=9)
    ax.tick_params(labelsize=8)
    ax.spines[["top", "right"]].set_visible(False)
    fig.suptitle(
        f"{label[:1].upper()}{label[1:]} of the {values.size} ensemble members",
        x=0.1,
        ha="left",
        fontsize=10,
        fontweight="bold",
    )
    return fig


def _marks(values: np.ndarray, given: Mapping[str, Any] | None) -> dict[str, float]:
    """The percentile lines: p10, p50, p90 from the summary where finite, else the members'."""
    out = {}
    for key in ("p10", "p50", "p90"):
        value = (given or {}).get(key)
        if not isinstance(value, int | float) or not np.isfinite(value):
            value = float(np.percentile(values, float(key[1:])))
        out[key] = float(value)
    return out
