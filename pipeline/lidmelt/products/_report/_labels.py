"""Human labels for the report's tables: statistics, table columns, variables, regimes.

No table of the report shows a raw key (``regime_cells.0``, ``melt_volume_km3``): every
statistic of ``summary.json`` and every column of a station or candidate table is named in
words with its unit (:func:`statistic_label`, :func:`column_label`). Variables take their long
names and units from the registry (:mod:`lidmelt._variables`); the melting regime's classes take
the names the maps draw in their legend (:data:`lidmelt.products._maps._style.REGIME_CLASSES`).
A key that is not listed here is still put into words (underscores to spaces, the unit suffix
to its unit), so a statistic added later never shows as code.
"""

from __future__ import annotations

from typing import Any

from lidmelt._variables import OUTPUTS, VARIABLES
from lidmelt.products._ensemble import variable_of
from lidmelt.products._maps._style import REGIME_CLASSES, colorbar_label

#: Unit suffixes of keys, longest first, and their text.
STAT_UNITS = (
    ("_km3_yr", "km³/yr"),
    ("_km3", "km³"),
    ("_km2", "km²"),
    ("_mm_yr", "mm/yr"),
    ("_wt_pct", "wt %"),
    ("_km", "km"),
    ("_gpa", "GPa"),
    ("_k", "K"),
    ("_c", "°C"),
    ("_ma", "Ma"),
)

_LEAST = OUTPUTS["anomaly_melt_thickness_km"].negligible_below

#: Words for the statistics of ``summary.json`` (nested keys joined with ".").
_STATISTICS = {
    "data_cells": "Cells with data",
    "melting_cells": "Melting cells (melt thickness > 0)",
    "melting_area_km2": "Melting area",
    "anomaly_melt_volume_km3": "Melt volume added by the thermal anomaly",
    "ambient_melt_volume_km3": "Ambient melt volume (total minus anomaly-added)",
    "melt_volume_km3": "Total melt volume",
    "added_melt_cells": f"Cells with added melt (at least {_LEAST:g} km)",
    "added_melt_area_km2": f"Area with added melt (at least {_LEAST:g} km)",
    "melt_production_km3_yr": "Melt production",
    "ambient_melting.cells": "Cells where ambient mantle melts (regime 1)",
    "ambient_melting.fraction_of_data_cells": "Their share of the cells with data",
    "ambient_melting.median_top_of_melting_km": "Their median top of melting",
    "ambient_melting.median_plate_age_ma": "Their median plate age",
}

#: Words for the columns of station, candidate and region tables that are not variables.
_COLUMNS = {
    "rank": "Rank",
    "plume": "Plume",
    "plume_match": "Plume found by",
    "area_km2": "Area (km²)",
    "n_cells": "Cells",
    "data_area_km2": "Area with data (km²)",
    "melting_area_km2": "Melting area (km²)",
    "mean_melt_thickness_km": "Mean melt thickness (km)",
    "max_melt_thickness_km": "Largest melt thickness (km)",
    "anomaly_melt_volume_km3": "Added by the anomaly (km³)",
    "ambient_melt_volume_km3": "Ambient (km³)",
    "melt_volume_km3": "Total melt volume (km³)",
    "shallowest_onset_depth_km": "Shallowest onset (km)",
    "mean_thermal_anomaly_k": "Mean thermal anomaly (K)",
    "min_plate_age_ma": "Youngest plate (Ma)",
    "max_plate_age_ma": "Oldest plate (Ma)",
    "flagged_fraction": "Share of flagged cells",
    "melt_production_km3_yr": "Melt production (km³/yr)",
    "validity_flag": "Validity flag",
    "flag_meaning": "Validity flag",
    "status": "Data coverage",
}


def unit_of_key(key: str) -> str:
    """The unit a key's suffix names (``"_km3"`` -> ``"km³"``), '' for none."""
    return next((text for suffix, text in STAT_UNITS if key.endswith(suffix)), "")


def _words(key: str) -> str:
    """A key put into words: the unit suffix dropped, underscores to spaces, "." to ": "."""
    suffix = next((s for s, _ in STAT_UNITS if key.endswith(s)), "")
    text = key[: len(key) - len(suffix)] if suffix else key
    text = text.replace(".", ": ").replace("_", " ").strip()
    return text[:1].upper() + text[1:]


def regime_label(value: Any) -> str:
    """The name of a melting regime class as the maps' legend gives it."""
    for item in REGIME_CLASSES:
        if str(item.value) == str(value):
            return f"{item.value}: {item.label}"
    return f"class {value}"


def statistic_label(key: str) -> str:
    """Words for a statistic of ``summary.json`` (nested keys joined with ".")."""
    if key in _STATISTICS:
        return _STATISTICS[key]
    if key.startswith("regime_cells."):
        return f"Cells of melting regime {regime_label(key.split('.', 1)[1])}"
    return _words(key)


def column_label(name: str) -> str:
    """The heading of a table column: words and unit, for variables from the registry."""
    if name in _COLUMNS:
        return _COLUMNS[name]
    var = variable_of(name)
    if var is not None:
        if var.categorical:
            return var.long_name.split(" (")[0].capitalize()
        return colorbar_label(var.title, var.units)
    unit = unit_of_key(name)
    return f"{_words(name)} ({unit})" if unit else _words(name)


def is_categorical(name: str) -> bool:
    """Whether a variable's values are classes (no minimum, mean or maximum of them)."""
    var = VARIABLES.get(name)
    return bool(var and var.categorical)


def variable_units(name: str, recorded: Any = "") -> str:
    """Unit of a run variable: the registry's, else the one the run recorded (``recorded``)."""
    var = VARIABLES.get(name)
    if var is not None:
        return var.units
    return str(recorded or "")


def variable_label(name: str) -> str:
    """The long name of a registered variable (capitalised), else the name."""
    if name == "overview":
        return "Overview: inputs and predicted melting on one page"
    var = variable_of(name)
    return var.title if var is not None else name


def figure_caption(name: str, source: str) -> str:
    """A figure's caption: what it shows, the variable's file name, where the image came from."""
    label = variable_label(name)
    shown = "" if name in ("overview", label) else f"{name}; "
    return f"{label} ({shown}{source})"
