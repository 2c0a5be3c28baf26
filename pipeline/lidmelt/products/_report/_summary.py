"""The report's summary section: the melt volumes, the melting regimes and the statistics.

The volumes lead with the melt the thermal anomaly adds (the number a proposal quotes), then
the ambient melt (total minus anomaly-added: the area integral of min(H, H_ambient), the melt
ambient mantle gives beneath the same lid) and the total, as ``summary.json`` records them
(:func:`lidmelt._statistics.summarize_bands`). The regimes are counted per class with the names
the maps' legend gives them; the per-variable table (minimum, maximum, mean over the cells with
data) leaves out categorical variables, whose classes have no mean. Every row is labelled in
words (:mod:`._labels`); numbers to 3 significant figures, counts exact.
"""

from __future__ import annotations

from typing import Any

from lidmelt.products._report._blocks import Block, Section, Table, format_number, format_sig
from lidmelt.products._report._labels import (
    column_label,
    is_categorical,
    regime_label,
    statistic_label,
    unit_of_key,
    variable_units,
)

#: What the three volumes are (shown under the totals, HTML and PDF alike).
VOLUME_DEFINITION = (
    "Volumes are column melt thicknesses integrated over the cell areas. The melt added by the "
    "thermal anomaly is the melt thickness minus that of ambient mantle beneath the same lid "
    "(never negative); the ambient melt volume is the total minus the anomaly-added volume, i.e. "
    "the area integral of min(H, H_ambient): what the same seafloor would give at the ambient "
    "potential temperature, such as the melt beneath young seafloor near a ridge."
)

#: Statistics in the totals table, in order (the others go to the further table).
_TOTALS = (
    "anomaly_melt_volume_km3",
    "ambient_melt_volume_km3",
    "melt_volume_km3",
    "melting_area_km2",
    "added_melt_area_km2",
    "melting_cells",
    "added_melt_cells",
    "data_cells",
)
_NOT_FURTHER = {*_TOTALS, "variables", "regime_cells"}


def _flat(stats: dict[str, Any], prefix: str = "") -> list[tuple[str, Any]]:
    """Scalar statistics as (key, value), nested dicts as ``outer.inner`` keys."""
    rows: list[tuple[str, Any]] = []
    for key, value in stats.items():
        name = f"{prefix}{key}"
        if isinstance(value, dict):
            rows.extend(_flat(value, prefix=f"{name}."))
        elif isinstance(value, int | float) and not isinstance(value, bool):
            rows.append((name, value))
    return rows


def _row(key: str, value: Any) -> tuple[str, str]:
    """A statistic in words with its value to 3 significant figures (shares in %)."""
    if key.endswith("fraction_of_data_cells") and isinstance(value, float):
        return statistic_label(key), format_sig(100.0 * value, unit="%")
    return statistic_label(key), format_sig(value, unit=unit_of_key(key))


def _totals(stats: dict[str, Any]) -> Table:
    rows = tuple(_row(k, stats[k]) for k in _TOTALS if k in stats)
    return Table(("Quantity", "Value"), rows)


def _regimes(stats: dict[str, Any]) -> Table | None:
    """Cells per melting regime class with the class's name and share of the cells with data."""
    regimes = stats.get("regime_cells")
    if not isinstance(regimes, dict) or not regimes:
        return None
    total = sum(int(v) for v in regimes.values() if isinstance(v, int | float))
    rows = tuple(
        (
            regime_label(k),
            format_number(v),
            f"{100.0 * v / total:.3g} %" if total and isinstance(v, int | float) else "-",
        )
        for k, v in regimes.items()
    )
    return Table(("Melting regime", "Cells", "Share of cells with data"), rows)


def _variables(summary: dict[str, Any], stats: dict[str, Any]) -> Table | None:
    """Minimum, maximum and mean of every amount (categorical variables left out)."""
    rows = tuple(
        (
            column_label(name).rsplit(" (", 1)[0],
            variable_units(name, ((summary.get("outputs") or {}).get(name) or {}).get("units")),
            format_sig(s.get("min") if isinstance(s, dict) else None),
            format_sig(s.get("max") if isinstance(s, dict) else None),
            format_sig(s.get("mean") if isinstance(s, dict) else None),
        )
        for name, s in (stats.get("variables") or {}).items()
        if not is_categorical(name)
    )
    if not rows:
        return None
    return Table(("Variable", "Unit", "Min", "Max", "Mean over cells with data"), rows)


def summary_section(summary: dict[str, Any]) -> Section:
    """The summary: volumes and areas, regimes, further statistics, per-variable ranges."""
    stats = summary.get("statistics") or {}
    if not stats:
        return Section("summary", "Summary", ("The run summary records no statistics.",))
    blocks: list[Block] = [_totals(stats)]
    if "anomaly_melt_volume_km3" in stats:
        blocks.append(VOLUME_DEFINITION)
    regimes = _regimes(stats)
    if regimes is not None:
        blocks += ["Cells per melting regime (the classes of the regime map):", regimes]
    further = tuple(_row(k, v) for k, v in _flat(stats) if k.split(".")[0] not in _NOT_FURTHER)
    if further:
        blocks.append(Table(("Further statistic", "Value"), further))
    variables = _variables(summary, stats)
    if variables is not None:
        blocks.append(variables)
    return Section("summary", "Summary", tuple(blocks))
