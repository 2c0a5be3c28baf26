"""The ensemble's member totals as a histogram (a small figure for the report).

:func:`member_histogram` draws how one basin total (default the melt volume) spreads over the
members of an ensemble run (``ensemble_members.csv``; :mod:`lidmelt.products._ensemble`), with
its percentiles (those the run's summary gives, else computed from the members with numpy's
``"linear"`` method: the same definition, Hyndman & Fan 1996 definition 7) as labelled vertical
lines. The value axis is in the total's own unit (km³ or km²), its ticks written out in full with
thousands separators (no offset or power-of-ten multiplier). Members without a value (NaN) are
left out and the title says how many were drawn. Drawn on an Agg canvas without pyplot.
"""

from __future__ import annotations

import textwrap
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, MaxNLocator

from lidmelt._errors import InputError

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
        Figure width (in) and resolution; the height follows (the plot is 0.4 x the width).

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
    label = TOTAL_LABELS.get(column, column.replace("_", " "))
    title = textwrap.wrap(f"{label[:1].upper()}{label[1:]} of the ensemble members",
                          width=max(20, int((width_in - 0.8) * 10)))  # fmt: skip
    top = 0.1 + 0.2 * len(title) + 0.22  # inches: title lines, the count line
    height = top + 0.4 * width_in + 0.6
    fig = Figure(figsize=(width_in, height), dpi=dpi, facecolor="white")
    FigureCanvasAgg(fig)
    ax = fig.add_axes(
        (0.7 / width_in, 0.6 / height, 1.0 - 0.95 / width_in, 0.4 * width_in / height)
    )
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
    ax.set_xlabel(label, fontsize=9)
    ax.set_ylabel("members", fontsize=9)
    ax.xaxis.set_major_locator(MaxNLocator(nbins=max(3, int(width_in / 1.2))))
    ax.xaxis.set_major_formatter(FuncFormatter(_full_number))
    ax.yaxis.set_major_locator(MaxNLocator(integer=True))
    ax.tick_params(labelsize=8)
    ax.spines[["top", "right"]].set_visible(False)
    fig.text(0.1, 1.0 - 0.1 / height, "\n".join(title), ha="left", va="top", fontsize=10,
             fontweight="bold", linespacing=1.2)  # fmt: skip
    drawn = f"{values.size} members"
    if values.size < len(members):
        drawn = (
            f"{values.size} of the {len(members)} members: the {len(members) - values.size} "
            "without a value are left out"
        )
    fig.text(0.1, 1.0 - (top - 0.04) / height, drawn, ha="left", va="bottom", fontsize=8,
             color="0.25")  # fmt: skip
    return fig


def _full_number(value: float, _position: Any = None) -> str:
    """A tick label in full with thousands separators: ``20000000`` -> ``"20,000,000"``."""
    if abs(value) >= 1000 or float(value).is_integer():
        return f"{value:,.0f}"
    return f"{value:.3g}"


def _marks(values: np.ndarray, given: Mapping[str, Any] | None) -> dict[str, float]:
    """The percentile lines: p10, p50, p90 from the summary where finite, else the members'."""
    out = {}
    for key in ("p10", "p50", "p90"):
        value = (given or {}).get(key)
        if not isinstance(value, int | float) or not np.isfinite(value):
            value = float(np.percentile(values, float(key[1:]), method="linear"))
        out[key] = float(value)
    return out
