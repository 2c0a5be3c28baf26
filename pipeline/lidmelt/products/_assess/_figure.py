"""Figures of an assessment: the success-rate curve, and an ensemble's keys before and after
the known features weighed its members.

:func:`success_rate_figure` draws the curve of an assessment (:mod:`._assessment`: the fraction
of the known features captured against the fraction of the ocean area, cells ranked by V from
the highest; Chung & Fabbri 2003) with its 90 % band over the features, the chance line (a map
that ranks the features no better than a random cell: y = x) and the AUC with its interval in
the legend. :func:`posterior_figure` draws, for each varied key of an ensemble, the members'
drawn values (the prior sample, equal weights) and the same values weighted by the members'
GLUE weights (:mod:`lidmelt.ensemble._posterior`): histograms on common bins for a number, bars
of the shares for a choice. Both on Agg canvases without pyplot.
"""

from __future__ import annotations

import math
import textwrap
from typing import Any

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

#: The curve's colour (a dark viridis blue) and its band's.
CURVE_COLOR = "#31688e"
#: The prior sample's colour (grey) beside the weighted one (:data:`CURVE_COLOR`).
PRIOR_COLOR = "#9a9a9a"


def _variable_text(doc: dict[str, Any]) -> str:
    units = doc.get("units") or ""
    return f"{doc.get('variable', 'V')}" + (f" ({units})" if units and units != "1" else "")


def success_rate_figure(doc: dict[str, Any], *, width_in: float = 5.5, dpi: float = 150) -> Figure:
    """The success-rate curve of assessment ``doc`` (module notes)."""
    fig = Figure(figsize=(width_in, 0.82 * width_in), dpi=dpi, layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    band = doc["curve"]["band"]
    low, high = doc["auc_ci90"]
    ax.fill_between(band["area_fraction"], band["low"], band["high"], color=CURVE_COLOR,
                    alpha=0.25, lw=0, label="90 % interval over the features")  # fmt: skip
    label = f"success rate: AUC {doc['auc']:.3f} ({low:.3f} to {high:.3f})"
    curve = doc["curve"]
    ax.plot(curve["area_fraction"], curve["feature_fraction"], color=CURVE_COLOR, lw=2,
            label=label)  # fmt: skip
    ax.plot([0, 1], [0, 1], color="k", ls="--", lw=1, label="chance (AUC 0.5)")
    for t in doc.get("thresholds", []):
        if t.get("screening"):
            ax.plot([t["area_fraction"]], [t["captured_fraction"]], "o", color="#b5367a",
                    label=f"V ≥ {t['value']:g}: {t['captured']} of "
                    f"{doc['n_features_used']} features in {100 * t['area_fraction']:.3g} % "
                    "of the area")  # fmt: skip
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1.005)
    ax.set_xlabel("\n".join(textwrap.wrap(
        f"fraction of the ocean area, cells ranked by {_variable_text(doc)}, highest first", 60
    )))  # fmt: skip
    ax.set_ylabel("fraction of the known features captured")
    ax.grid(True, lw=0.4, alpha=0.5)
    ax.legend(loc="lower right", fontsize="small", framealpha=0.9)
    dropped = doc["n_features"] - doc["n_features_used"]
    title = f"Success rate of {doc['n_features_used']} known features" + (
        f" ({dropped} outside the grid or on nodata, not scored)" if dropped else ""
    )
    ax.set_title("\n".join(textwrap.wrap(title, 70)), fontsize="medium")
    return fig


def _numeric_panel(ax, entry: dict[str, Any], values: np.ndarray, weights: np.ndarray) -> None:
    bins = np.histogram_bin_edges(values, bins=min(12, max(4, int(math.sqrt(values.size)))))
    prior = np.full(values.size, 1.0 / values.size)
    ax.hist(values, bins=bins, weights=prior, color=PRIOR_COLOR, alpha=0.7,
            label="prior (members as drawn)")  # fmt: skip
    ax.hist(values, bins=bins, weights=weights, histtype="step", lw=2, color=CURVE_COLOR,
            label="weighted by the known features")  # fmt: skip
    for stats, color in ((entry["prior"], PRIOR_COLOR), (entry["posterior"], CURVE_COLOR)):
        ax.axvline(stats["mean"], color=color, ls="--", lw=1)
    ax.set_ylabel("share of the members")


def _choice_panel(ax, entry: dict[str, Any]) -> None:
    names = list(entry["prior"]["shares"])
    x = np.arange(len(names))
    ax.bar(x - 0.2, [entry["prior"]["shares"][n] for n in names], 0.4, color=PRIOR_COLOR,
           label="prior (members as drawn)")  # fmt: skip
    ax.bar(x + 0.2, [entry["posterior"]["shares"][n] for n in names], 0.4, color=CURVE_COLOR,
           label="weighted by the known features")  # fmt: skip
    ax.set_xticks(x, names)
    ax.set_ylabel("share of the members")


def posterior_figure(
    entries: list[dict[str, Any]], samples: dict[str, np.ndarray], weights: np.ndarray,
    *, width_in: float = 7.0, dpi: float = 120,
) -> Figure:  # fmt: skip
    """One panel per varied key (``entries``: the summary's weighted distributions; ``samples``
    each key's drawn values by member; ``weights`` the members' weights, summing to 1)."""
    cols = 2 if len(entries) > 1 else 1
    rows = math.ceil(len(entries) / cols)
    fig = Figure(figsize=(width_in, 2.3 * rows + 0.4), dpi=dpi, layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(rows, cols, squeeze=False).ravel()
    for ax, entry in zip(axes, entries, strict=False):
        if entry["kind"] == "choice":
            _choice_panel(ax, entry)
        else:
            _numeric_panel(ax, entry, np.asarray(samples[entry["key"]], float), weights)
        ax.set_title(_key_title(entry["key"]), fontsize="small")
        ax.tick_params(labelsize="small")
    for ax in axes[len(entries) :]:
        ax.set_visible(False)
    # above the panels, not on one: a legend inside a panel hides its tallest bars
    handles, labels = axes[0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside upper center", ncols=2, fontsize="small")
    return fig


def _key_title(key: str, width: int = 40) -> str:
    """A workflow key on lines of at most about ``width`` characters, broken after its dots
    (a dotted key has no spaces for textwrap to break at)."""
    lines = [""]
    for part in key.replace(".", ".\0").split("\0"):
        if lines[-1] and len(lines[-1]) + len(part) > width:
            lines.append("")
        lines[-1] += part
    return "\n".join(lines)
