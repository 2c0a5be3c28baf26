"""The words on a map figure: subtitle (model and ambient temperature) and caption.

Everything is read from the run's ``summary.json`` (see :mod:`lidmelt.grids.rundir`); the
lid's origin (:func:`lid_model`) is shared with the run report.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from lidmelt import __version__
from lidmelt.products.maps.style import MELT_TOP_PERCENTILE, PERCENTILES, VariableStyle

__all__ = ["describe_lid", "lid_model", "map_caption", "model_line"]


def lid_model(summary: dict[str, Any]) -> tuple[str, float | None] | None:
    """The cooling model's name and lid isotherm (deg C, or None) of a run; None without one.

    A run without a cooling model took its lid from a lid-thickness grid.
    """
    cooling = summary.get("cooling")
    if not (isinstance(cooling, dict) and cooling.get("name")):
        return None
    iso = cooling.get("lid_isotherm_c")
    return str(cooling["name"]), iso if isinstance(iso, int | float) else None


def describe_lid(summary: dict[str, Any]) -> str:
    """``"lid from <model> cooling, <T> °C isotherm"`` or ``"lid from the lid-thickness grid"``."""
    lid = lid_model(summary)
    if lid is None:
        return "lid from the lid-thickness grid"
    name, iso = lid
    iso_text = f", {iso:g} °C isotherm" if iso is not None else ""
    return f"lid from {name} cooling{iso_text}"


def model_line(summary: dict[str, Any]) -> str:
    """The figure subtitle: the melting model and the ambient mantle potential temperature."""
    model = summary.get("model") or {}
    name = model.get("name") or "unknown model"
    tp = summary.get("ambient_potential_temperature_c")
    tp_text = f"{tp:g} °C" if isinstance(tp, int | float) else "not recorded"
    return f"Model {name}; ambient mantle potential temperature {tp_text}"


def _limits_text(style: VariableStyle, *, no_melt: bool, extend: str) -> str:
    """How the colour limits were chosen and what white means."""
    if style.categorical:
        return "Colours: the classes named in the legend"
    if style.zero_is_no_melt:
        limits = (
            f"Colour scale from 0 to the {MELT_TOP_PERCENTILE:g}th percentile of the melting "
            "cells; white: no melting (exactly 0)"
        )
    else:
        limits = (
            f"Colour limits: {PERCENTILES[0]:g}nd–{PERCENTILES[1]:g}th percentiles of "
            "the valid cells"
        )
        if no_melt:
            limits += "; white: no melting (the variable is undefined there)"
    if extend != "neither":
        limits += "; arrows: values beyond the limits"
    return limits


def map_caption(
    summary: dict[str, Any],
    *,
    style: VariableStyle,
    no_melt: bool,
    extend: str,
    proj_name: str,
    age: bool,
    coast_path: Path | None,
    flag_note: str = "",
) -> str:
    """The caption: lid, colour limits and classes, hatching, projection, overlays, version.

    ``flag_note`` is the sentence on the hatched (flagged) cells, if any
    (:func:`.flags.flag_caption`).
    """
    lid = describe_lid(summary)
    parts = [
        f"{lid[:1].upper()}{lid[1:]}.",
        f"{_limits_text(style, no_melt=no_melt, extend=extend)}; grey: no data.",
    ]
    if flag_note:
        parts.append(flag_note)
    parts.append(f"Projection: {proj_name}.")
    if age:
        parts.append("Contours: plate age (Ma).")
    if coast_path is None:
        parts.append("No coastlines drawn (no local coastline data).")
    parts.append(f"lidmelt {summary.get('lidmelt_version', __version__)}.")
    return " ".join(parts)
