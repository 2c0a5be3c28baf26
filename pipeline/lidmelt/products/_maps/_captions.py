"""The words on a map figure: subtitle (model and ambient temperature) and caption.

Everything is read from the run's ``summary.json`` (see :mod:`lidmelt.grids._rundir`); the
lid's origin (:func:`lid_model`) is shared with the run report.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from lidmelt import __version__
from lidmelt._variables import ordinal
from lidmelt.products._maps._style import MELT_TOP_PERCENTILE, VariableStyle


def lid_model(summary: dict[str, Any]) -> tuple[str, float | None] | None:
    """The cooling model's name and lid isotherm (deg C, or None) of a run; None without one.

    A run without a cooling model took its lid from a lid-thickness grid.
    """
    cooling = summary.get("cooling")
    if not (isinstance(cooling, dict) and cooling.get("name")):
        return None
    iso = cooling.get("lid_isotherm_c")
    return str(cooling["name"]), iso if isinstance(iso, int | float) else None


def lid_grid_share(run: Any) -> float | None:
    """Share (0-1) of the cells with data whose lid came from the run's lid-thickness grid.

    None when the run has no ``input_lid_thickness_km`` grid. The engine takes the lid from
    that grid where it has data and from the cooling model of the plate age elsewhere.
    """
    if "lid_thickness_km" not in getattr(run, "inputs", ()):
        return None
    lid = np.asarray(run.open("lid_thickness_km").values, dtype=float)
    melt = None
    if "melt_thickness_km" in run.outputs:
        melt = np.asarray(run.open("melt_thickness_km").values, dtype=float)
    data = np.ones(lid.shape, bool)
    if melt is not None and melt.shape == lid.shape:
        data = np.isfinite(melt)
    n = int(data.sum())
    return float((np.isfinite(lid) & data).sum() / n) if n else 0.0


def describe_lid(summary: dict[str, Any], grid_share: float | None = None) -> str:
    """Where the lid came from, as used: the lid-thickness grid, the cooling model, or both.

    ``grid_share`` is :func:`lid_grid_share` (None: the run has no lid-thickness grid).
    """
    lid = lid_model(summary)
    cooling = ""
    if lid is not None:
        name, iso = lid
        iso_text = f" to the {iso:g} °C isotherm" if iso is not None else ""
        if (summary.get("cooling") or {}).get("top_of_melting") == "geotherm":
            iso_text = " (melting up to where each column meets that geotherm)"
        cooling = f"{name} cooling of the plate age{iso_text}"
    if grid_share is None or grid_share <= 0.0:
        return f"lid from {cooling}" if cooling else "lid from the lid-thickness grid"
    if not cooling or grid_share >= 1.0:
        return "lid from the lid-thickness grid (every cell)"
    return (
        f"lid from the lid-thickness grid where it has data ({100.0 * grid_share:.3g} % of the "
        f"cells), elsewhere from {cooling}"
    )


def describe_water(summary: dict[str, Any]) -> str:
    """The source water as used: a constant (wt %) or the grid it came from."""
    water = (summary.get("inputs") or {}).get("water_wt_pct")
    if not isinstance(water, dict):
        return "water not recorded"
    constant = water.get("constant")
    if isinstance(constant, int | float) and not water.get("source"):
        return f"source water {constant:g} wt % (constant)"
    source = str(water.get("source") or water.get("file") or "a grid")
    return f"source water from {Path(source).name}"


def run_basis(summary: dict[str, Any], grid_share: float | None = None) -> str:
    """One sentence: lid, top of melting, water and ambient temperature, as the run used them."""
    lid = describe_lid(summary, grid_share)
    parts = [lid[:1].upper() + lid[1:]]
    top = summary.get("min_top_of_melting_km")
    if isinstance(top, int | float):
        parts.append(f"melting stops at least {top:g} km deep (crust base)")
    parts.append(describe_water(summary))
    tp = summary.get("ambient_potential_temperature_c")
    if isinstance(tp, int | float):
        parts.append(f"ambient mantle potential temperature {tp:g} °C")
    return "; ".join(parts) + "."


def ensemble_basis(summary: dict[str, Any]) -> str:
    """One sentence for an ensemble layer: how many members, how drawn, what was varied around
    the run's own values (its lid, water and ambient Tp are not those of every member)."""
    ens = summary.get("ensemble") or {}
    varied = ", ".join(ens.get("vary") or {}) or "nothing"
    sampling = str(ens.get("sampling", "")).replace("_", " ")
    text = (
        f"Ensemble of {ens.get('members', '?')} members ({sampling} sampling, seed "
        f"{ens.get('seed', '?')}) varying {varied} around the workflow's own values; "
        f"{run_basis(summary)[:1].lower()}{run_basis(summary)[1:-1]} in the workflow itself."
    )
    prob = ens.get("probability")
    if isinstance(prob, dict) and isinstance(prob.get("min_melt_fraction"), int | float):
        text += (
            " Each cell over the members with a value there; a member counts toward a "
            "probability where its melt reaches the threshold with a melt fraction of at least "
            f"{100 * prob['min_melt_fraction']:g} % at the top of melting."
        )
    lacking = (ens.get("members_without_value") or {}).get("members")
    if isinstance(lacking, int) and lacking:
        text += f" {lacking} members have no value in some cells (see the run report)."
    return text


def model_line(summary: dict[str, Any]) -> str:
    """The figure subtitle: the melting model and the ambient mantle potential temperature."""
    model = summary.get("model") or {}
    name = model.get("name") or "unknown model"
    tp = summary.get("ambient_potential_temperature_c")
    tp_text = f"{tp:g} °C" if isinstance(tp, int | float) else "not recorded"
    return f"Model {name}; ambient mantle potential temperature {tp_text}"


def _contour_text(style: VariableStyle, drawn: tuple[float, ...] | None) -> str:
    """The labelled contours of the style: those drawn, and why the others are not."""
    if drawn is None:
        drawn = style.contours
    levels = ", ".join(f"{v:g}" for v in drawn)
    text = f"; labelled black line: the {levels} contour (edge of the cells >= it)" if drawn else ""
    missing = [v for v in style.contours if v not in drawn]
    if missing:
        text += (
            f"; no {', '.join(f'{v:g}' for v in missing)} contour: no cell crosses it (every "
            "cell is on one side)"
        )
    return text


def _limits_text(
    style: VariableStyle, *, no_melt: bool, extend: str, contours: tuple[float, ...] | None = None
) -> str:
    """How the colour limits were chosen and what white means."""
    if style.categorical:
        return "Colours: the classes named in the legend"
    low, high = style.percentiles
    if style.zero_is_no_melt and style.negligible_below > 0.0:
        limits = (
            f"Colour scale from 0 to the {ordinal(MELT_TOP_PERCENTILE)} percentile of the melting "
            f"cells; white: {style.no_melt_label}, below lidmelt's least amount (the GeoTIFF "
            "keeps the exact values)"
        )
    elif style.zero_is_no_melt:
        limits = (
            f"Colour scale from 0 to the {ordinal(MELT_TOP_PERCENTILE)} percentile of the melting "
            f"cells; white: {style.no_melt_label} (exactly 0)"
        )
    elif style.limits is not None:
        limits = f"Colour scale fixed from {style.limits[0]:g} to {style.limits[1]:g}"
    elif (low, high) == (0.0, 100.0):
        limits = "Colour scale over the whole range of the cells drawn (minimum to maximum)"
    else:
        limits = (
            f"Colour limits from the {ordinal(low)} and {ordinal(high)} percentiles of the valid "
            "cells"
        )
    if style.diverging:
        limits += ", symmetric about 0 (white); black line: 0"
    if style.contours:
        limits += _contour_text(style, contours)
    if no_melt and not style.zero_is_no_melt:
        limits += "; white: no melting (the variable is not defined there and is not drawn)"
    if extend != "neither":
        limits += "; arrows: values beyond the limits"
    return limits


@dataclass(frozen=True, kw_only=True)
class CaptionOptions:
    """What a map's caption says beyond its run's ``summary.json`` (:func:`map_caption`).

    Attributes
    ----------
    style : VariableStyle
        The map style of the variable drawn (its colour limits, contours, classes).
    no_melt : bool
        Cells that do not melt are drawn white (the variable is not defined there).
    extend : str
        The colour bar's arrows (matplotlib's ``"neither"``, ``"min"``, ``"max"``, ``"both"``).
    proj_name : str
        The name of the map projection.
    age : bool
        Dashed plate-age contours are drawn.
    coast_path : Path or None
        The coastline file drawn; None: no coastlines.
    flag_note : str
        The sentence on the hatched (flagged) cells, if any (:func:`._flags.flag_caption`).
    outside : bool
        The view shows area beyond the grid.
    plumes : bool
        Rings mark the plume centres of the workflow.
    grid_share : float or None
        :func:`lid_grid_share` (None: the run has no lid-thickness grid).
    ensemble : bool
        The layer is one of an ensemble (its basis is the ensemble's, :func:`ensemble_basis`).
    contours : tuple of float or None
        The style's contour levels that are drawn (None: all of them).
    """

    style: VariableStyle
    no_melt: bool
    extend: str
    proj_name: str
    age: bool
    coast_path: Path | None
    flag_note: str = ""
    outside: bool = False
    plumes: bool = False
    grid_share: float | None = None
    ensemble: bool = False
    contours: tuple[float, ...] | None = None


def map_caption(summary: dict[str, Any], options: CaptionOptions) -> str:
    """The caption: what the run used, colour limits and classes, hatching, projection, version
    (``options``: :class:`CaptionOptions`)."""
    o = options
    grey = "grey: no data in the grid"
    if o.outside:
        grey += "; pale blue-grey: outside the grid"
    limits = _limits_text(o.style, no_melt=o.no_melt, extend=o.extend, contours=o.contours)
    parts = [
        ensemble_basis(summary) if o.ensemble else run_basis(summary, o.grid_share),
        f"{limits}; {grey}.",
    ]
    if o.flag_note:
        parts.append(o.flag_note)
    if o.plumes:
        parts.append("Rings: plume centres named in the workflow.")
    parts.append(f"Projection: {o.proj_name}.")
    if o.age:
        parts.append("Dashed contours: plate age (Ma).")
    if o.coast_path is None:
        parts.append("No coastlines drawn (no local coastline data).")
    parts.append(f"lidmelt {summary.get('lidmelt_version', __version__)}.")
    return " ".join(parts)
