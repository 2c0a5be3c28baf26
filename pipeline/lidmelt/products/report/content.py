"""The report's content, independent of the output format: sections of text and tables.

Everything comes from the run's ``summary.json`` (see :mod:`lidmelt.grids.rundir`), except the
flag counts, which are counted in the run's ``validity_flag.tif``; units and long names of the
variables come from the registry (:mod:`lidmelt.variables`) where the run's variables are
listed. Text here is not yet escaped: each writer escapes it for its format.

The summary's ``"warnings"`` (:func:`run_warnings`) are shown near the top of the page; the
summary section shows the totals, every further statistic (those on the anomaly basis, the melt
the thermal anomaly adds, in a table of their own; 3 significant figures), the per-variable
statistics, and the count of cells per validity flag.
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from lidmelt.grids.rundir import FlagGrid, RunDir, read_flags
from lidmelt.products.ensemble import variable_of
from lidmelt.products.maps.captions import lid_model
from lidmelt.products.maps.flags import flag_counts
from lidmelt.variables import VARIABLES

__all__ = [
    "CAUTION",
    "FRONT_SECTIONS",
    "MapImage",
    "Pre",
    "Section",
    "Table",
    "build_sections",
    "flags_section",
    "format_number",
    "format_sig",
    "format_value",
    "job_line",
    "run_warnings",
    "variable_label",
    "variable_units",
]

#: The caution printed at the top of every report (HTML and PDF).
CAUTION = (
    "These maps and numbers are model estimates for research screening. They are not a "
    "volcanic hazard assessment: they follow from the chosen melting model, its parameters and "
    "the input grids, and share their uncertainties. For any question about volcanic hazard, "
    "defer to the responsible volcano observatories and civil-protection agencies."
)


@dataclass(frozen=True)
class Table:
    """A table of text cells (already formatted, not yet escaped)."""

    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    mono: tuple[int, ...] = ()  # columns shown in a monospace font (hashes, paths)


@dataclass(frozen=True)
class Pre:
    """Preformatted text (the workflow, raw JSON); ``folded``: shown folded under that title."""

    text: str
    folded: str = ""


@dataclass(frozen=True)
class MapImage:
    """One embedded map (or figure: a section may hold one among its blocks)."""

    variable: str
    data: bytes
    mime: str  # "image/png" or "image/svg+xml"
    source: str  # "rendered for this report" or the file it came from
    caption: str = ""  # shown instead of the variable's label when given


Block = str | Table | Pre | MapImage


@dataclass(frozen=True)
class Section:
    """A heading and its blocks: paragraphs (str), :class:`Table`, :class:`Pre` or
    :class:`MapImage` (a figure)."""

    key: str
    heading: str
    blocks: tuple[Block, ...]


def format_value(value: Any) -> str:
    """Exact text of a parameter value as stored in summary.json.

    Floats use Python's shortest round-trip form (``repr``: 1085.7, 1e-06), so the report shows
    every digit the run stored; lists, dicts and null are shown as JSON.
    """
    if isinstance(value, bool) or value is None:
        return json.dumps(value)
    if isinstance(value, float):
        return repr(value) if math.isfinite(value) else str(value)
    if isinstance(value, int | str):
        return str(value)
    return json.dumps(value, ensure_ascii=False, sort_keys=True)


def format_number(value: Any, *, unit: str = "") -> str:
    """Readable text of a statistic: thousands separators, 4 significant digits."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        return "not recorded" if value is None else str(value)
    if isinstance(value, int):
        text = f"{value:,}"
    elif not math.isfinite(value):
        text = str(value)
    elif value != 0 and (abs(value) >= 1e4 or abs(value) < 1e-3):
        text = f"{value:,.0f}" if abs(value) >= 1e4 else f"{value:.3e}"
    else:
        text = f"{value:.4g}"
    return f"{text} {unit}".strip()


def format_sig(value: Any, *, unit: str = "", digits: int = 3) -> str:
    """Text of a statistic to ``digits`` significant figures, with thousands separators.

    ``45678.9`` -> ``"45,700"``; ``0.012345`` -> ``"0.0123"``. Integers (counts) are exact
    and shown in full (``"1,234,567"``).
    """
    if isinstance(value, bool) or not isinstance(value, float):
        return format_number(value, unit=unit)
    if value == 0 or not math.isfinite(value):
        text = str(value) if not math.isfinite(value) else "0"
    else:
        rounded = float(f"{value:.{digits}g}")
        exponent = math.floor(math.log10(abs(rounded)))
        if exponent >= digits - 1 and abs(rounded) < 1e15:
            text = f"{round(rounded):,}"
        elif exponent >= -4:
            text = f"{rounded:.{max(digits - 1 - exponent, 0)}f}"
        else:
            text = f"{rounded:.{digits - 1}e}"
    return f"{text} {unit}".strip()


def _get(d: Any, *keys: str, default: Any = None) -> Any:
    for key in keys:
        if not isinstance(d, dict) or key not in d:
            return default
        d = d[key]
    return d


def variable_units(name: str, recorded: Any = "") -> str:
    """Unit of a run variable: the registry's, else the one the run recorded (``recorded``)."""
    var = VARIABLES.get(name)
    if var is not None:
        return var.units
    return str(recorded or "")


def variable_label(name: str) -> str:
    """``"<name>: <long name>"`` for a registered variable, else the name."""
    if name == "overview":
        return "Overview: inputs and predicted melting on one page"
    var = variable_of(name)
    return f"{name}: {var.long_name}" if var is not None else name


def _crs_text(wkt: str | None) -> tuple[str, bool]:
    """Readable name of a CRS (with its EPSG code) and whether it is geographic."""
    if not wkt:
        return "CRS not recorded", False
    try:
        import pyproj

        crs = pyproj.CRS.from_wkt(wkt)
    except Exception:  # pyproj raises CRSError and others for bad WKT
        return "CRS WKT not readable", False
    return crs.name + (f" (EPSG:{crs.to_epsg()})" if crs.to_epsg() else ""), crs.is_geographic


def grid_text(summary: dict[str, Any]) -> tuple[str, list[tuple[str, str]]]:
    """The grid in one phrase (size, CRS, extent) and as (item, value) rows."""
    grid = summary.get("grid") or {}
    crs_name, geographic = _crs_text(grid.get("crs_wkt"))
    width, height = grid.get("width"), grid.get("height")
    size = f"{width} × {height} cells" if width and height else "size not recorded"
    bounds = grid.get("bounds")
    if isinstance(bounds, list) and len(bounds) == 4:
        w, s, e, n = bounds
        unit = "°" if geographic else " (CRS units)"
        extent = f"W {w:g}{unit}, E {e:g}{unit}, S {s:g}{unit}, N {n:g}{unit}"
    else:
        extent = "extent not recorded"
    rows = [("CRS", crs_name), ("Size", size), ("Extent", extent)]
    transform = grid.get("transform")
    if isinstance(transform, list) and len(transform) == 6:
        rows.append(("Cell size", f"{abs(transform[0]):g} × {abs(transform[4]):g} (CRS units)"))
    return f"{size}, {crs_name}, {extent}", rows


def job_line(summary: dict[str, Any]) -> str:
    """The run in one sentence: model, ambient temperature, lid, grid, time and version."""
    grid_phrase, _ = grid_text(summary)
    model = _get(summary, "model", "name", default="an unrecorded model")
    tp = summary.get("ambient_potential_temperature_c")
    tp_text = f"{tp:g} °C" if isinstance(tp, int | float) else "an unrecorded temperature"
    lid_info = lid_model(summary)
    if lid_info is not None:
        name, iso = lid_info
        lid = f"lid from plate age by {name} cooling"
        if iso is not None:
            lid += f" to the {iso:g} °C isotherm"
        elif _get(summary, "cooling", "top_of_melting", default=None) == "geotherm":
            lid += ", melting up to where each column meets its geotherm"
    else:
        lid = "lid from a lid-thickness grid"
    when = summary.get("created_utc") or "an unrecorded time"
    version = summary.get("lidmelt_version") or "unknown"
    return (
        f"Melting model {model} at ambient mantle potential temperature {tp_text}, {lid}, "
        f"on a grid of {grid_phrase}; run at {when} with lidmelt {version}."
    )


def _parameter_table(block: dict[str, Any], *, fallback: str) -> tuple[Table, Table | None]:
    """The parameters with a source number each, and the numbered sources (each once)."""
    params = block.get("parameters") or {}
    sources = block.get("sources") if isinstance(block.get("sources"), dict) else {}
    numbers: dict[str, int] = {}
    rows = []
    for name, value in params.items():
        source = sources.get(name)
        text = str(source) if source else (fallback or "not recorded")
        number = numbers.setdefault(text, len(numbers) + 1)
        rows.append((str(name), format_value(value), f"[{number}]"))
    listed = tuple((f"[{n}]", text) for text, n in numbers.items())
    table = Table(("Parameter", "Value", "Source"), tuple(rows))
    return table, (Table(("Source", "Reference"), listed) if listed else None)


def run_warnings(summary: dict[str, Any]) -> list[str]:
    """The run's warnings (``summary["warnings"]``), as text; empty when there are none."""
    warnings = summary.get("warnings")
    if isinstance(warnings, str):
        warnings = [warnings]
    if not isinstance(warnings, list | tuple):
        return []
    return [str(w) for w in warnings if str(w).strip()]


#: Statistics shown in the totals table (the others go to the further tables).
_TOTALS = ("melting_cells", "melting_area_km2", "melt_volume_km3")
#: Unit suffixes of statistic keys, longest first, and their text.
_STAT_UNITS = (
    ("_km3_yr", "km³/yr"),
    ("_km3", "km³"),
    ("_km2", "km²"),
    ("_mm_yr", "mm/yr"),
    ("_km", "km"),
    ("_gpa", "GPa"),
    ("_k", "K"),
    ("_c", "°C"),
    ("_ma", "Ma"),
)


def _flat_statistics(stats: dict[str, Any], prefix: str = "") -> list[tuple[str, Any]]:
    """Scalar statistics as (key, value), nested dicts as ``outer.inner`` keys."""
    rows: list[tuple[str, Any]] = []
    for key, value in stats.items():
        name = f"{prefix}{key}"
        if isinstance(value, dict):
            rows.extend(_flat_statistics(value, prefix=f"{name}."))
        elif isinstance(value, int | float) and not isinstance(value, bool):
            rows.append((name, value))
    return rows


def _statistic_row(key: str, value: Any) -> tuple[str, str]:
    unit = next((text for suffix, text in _STAT_UNITS if key.endswith(suffix)), "")
    return key, format_sig(value, unit=unit)


def _further_statistics(stats: dict[str, Any]) -> list[Block]:
    """Tables of the statistics beyond the totals: the anomaly basis first, then the rest."""
    rest = {k: v for k, v in stats.items() if k not in _TOTALS and k != "variables"}
    rows = [_statistic_row(k, v) for k, v in _flat_statistics(rest)]
    anomaly = tuple(r for r in rows if "anomaly" in r[0])
    other = tuple(r for r in rows if "anomaly" not in r[0])
    blocks: list[Block] = []
    if anomaly:
        blocks.append(
            "Anomaly basis: the melt the thermal anomaly adds beneath the same lid (melt "
            "thickness minus that of ambient mantle, never negative); 3 significant figures."
        )
        blocks.append(Table(("Statistic (anomaly basis)", "Value"), anomaly))
    if other:
        blocks.append(Table(("Further statistic", "Value"), other))
    return blocks


# --------------------------------------------------------------------------------------------
# The sections, in page order


def _summary_section(summary: dict[str, Any]) -> Section:
    stats = summary.get("statistics") or {}
    if not stats:
        return Section("summary", "Summary", ("The run summary records no statistics.",))
    totals = Table(
        ("Quantity", "Value"),
        (
            ("Melting cells", format_number(stats.get("melting_cells"))),
            ("Melting area", format_sig(stats.get("melting_area_km2"), unit="km²")),
            ("Melt volume", format_sig(stats.get("melt_volume_km3"), unit="km³")),
        ),
    )
    var_rows = tuple(
        (
            str(name),
            variable_units(name, _get(summary, "outputs", name, "units")),
            format_sig(_get(s, "min")),
            format_sig(_get(s, "max")),
            format_sig(_get(s, "mean")),
        )
        for name, s in (stats.get("variables") or {}).items()
    )
    blocks: list[Block] = [totals, *_further_statistics(stats)]
    if var_rows:
        blocks.append(Table(("Variable", "Unit", "Min", "Max", "Mean"), var_rows))
    return Section("summary", "Summary", tuple(blocks))


def _share(count: int, total: int) -> str:
    return f"{100.0 * count / total:.3g} %" if total else "-"


def flags_section(flags: FlagGrid | None) -> Section:
    """The count of cells per validity flag bit, with its meaning and share of the data."""
    heading = "Validity flags"
    if flags is None:
        return Section("flags", heading, ("This run directory has no validity flag grid.",))
    with_data = int(flags.with_data.sum())
    rows = [
        (str(bit), meaning, f"{count:,}", _share(count, with_data))
        for bit, meaning, count in flag_counts(flags)
    ]
    unflagged = int((flags.with_data & (flags.values == 0)).sum())
    rows.append(
        ("0", "no flag: valid and calibrated", f"{unflagged:,}", _share(unflagged, with_data))
    )
    rows.append(("", "cells with data (any flag)", f"{with_data:,}", _share(with_data, with_data)))
    rows.append(("", "cells in the grid", f"{flags.values.size:,}", ""))
    note = (
        "Cells per flag bit (a cell may carry several bits); shares are of the cells with "
        "data. Maps hatch the cells flagged beyond calibration, without a solidus crossing or "
        "with free water."
    )
    table = Table(("Flag", "Meaning", "Cells", "Share of cells with data"), tuple(rows))
    return Section("flags", heading, (note, table))


def _model_section(summary: dict[str, Any]) -> Section:
    model = summary.get("model") or {}
    reference = str(model.get("reference") or "")
    tp = summary.get("ambient_potential_temperature_c")
    table, sources = _parameter_table(
        model, fallback=f"model reference ({reference})" if reference else ""
    )
    blocks: tuple[Block, ...] = (
        f"Model: {model.get('name') or 'not recorded'}.",
        f"Reference: {reference or 'not recorded'}.",
        f"Ambient mantle potential temperature: {format_value(tp)} °C.",
        table if table.rows else "The summary lists no model parameters.",
        *((sources,) if sources is not None else ()),
    )
    return Section("model", "Melting model", blocks)


def _rule_text(cooling: dict[str, Any]) -> str:
    """The run's rule for the top of melting (summary ``cooling.top_of_melting``)."""
    if cooling.get("top_of_melting") == "geotherm":
        return (
            "Top of melting: where each column meets the cooling model's conductive geotherm at "
            "its age, whose mantle side is the column's own isentrope (geotherm rule; "
            'docs/physics.md, "One mantle beneath the lid"). Lid isotherm: not used.'
        )
    return (
        "Top of melting: the lid isotherm (isotherm rule). "
        f"Lid isotherm: {format_value(cooling.get('lid_isotherm_c'))} °C."
    )


def _lid_section(summary: dict[str, Any]) -> Section:
    cooling = summary.get("cooling")
    blocks: list[Block]
    if isinstance(cooling, dict) and cooling:
        blocks = [f"Cooling model: {cooling.get('name') or 'not recorded'}.", _rule_text(cooling)]
        if cooling.get("reference"):
            blocks.append(f"Reference: {cooling['reference']}.")
        table, sources = _parameter_table(cooling, fallback=str(cooling.get("reference") or ""))
        if table.rows:
            blocks.append(table)
        if sources is not None:
            blocks.append(sources)
    else:
        blocks = ["No cooling model: the lid came from a lid-thickness grid."]
    top = summary.get("min_top_of_melting_km")
    if top is not None:
        blocks.append(f"Shallowest top of melting (base of the crust): {format_value(top)} km.")
    return Section("lid", "Lid (lithosphere)", tuple(blocks))


def _grid_section(summary: dict[str, Any]) -> Section:
    _, grid_rows = grid_text(summary)
    return Section("grid", "Grid", (Table(("Item", "Value"), tuple(grid_rows)),))


_INPUT_KEYS_SHOWN = {"file", "source", "sha256", "units", "long_name", "plumes"}


def _input_row(name: str, entry: Any) -> tuple[str, ...]:
    entry = entry if isinstance(entry, dict) else {}
    extra = {k: v for k, v in entry.items() if k not in _INPUT_KEYS_SHOWN}
    return (
        str(name),
        variable_units(name, entry.get("units")),
        str(entry.get("source") or "none recorded"),
        str(entry.get("sha256") or "none recorded"),
        str(entry.get("file") or ""),
        "; ".join(f"{k}={format_value(v)}" for k, v in extra.items()),
    )


def _plume_table(summary: dict[str, Any]) -> Table | None:
    """The workflow's plumes as a table (name, centre, radius, peak excess, shape)."""
    entry = (summary.get("inputs") or {}).get("thermal_anomaly_k")
    plumes = entry.get("plumes") if isinstance(entry, dict) else None
    if not plumes:
        return None
    rows = tuple(
        (
            str(p.get("name", "")),
            format_sig(p.get("longitude")),
            format_sig(p.get("latitude")),
            format_sig(p.get("radius_km"), unit="km"),
            format_sig(p.get("peak_excess_k"), unit="K"),
            str(p.get("shape", "")),
        )
        for p in plumes
        if isinstance(p, dict)
    )
    header = ("Plume", "Longitude (°)", "Latitude (°)", "Radius", "Peak excess", "Shape")
    return Table(header, rows)


def _inputs_section(summary: dict[str, Any]) -> Section:
    inputs = summary.get("inputs") or {}
    rows = tuple(_input_row(name, entry) for name, entry in inputs.items())
    if not rows:
        return Section("inputs", "Input provenance", ("The summary lists no inputs.",))
    header = ("Input", "Unit", "Source", "SHA-256", "Aligned grid", "Details")
    blocks: list[Block] = [Table(header, rows, mono=(2, 3, 4))]
    plumes = _plume_table(summary)
    if plumes is not None:
        blocks += ["Plumes added to the thermal anomaly (from the workflow):", plumes]
    raw = json.dumps(inputs, indent=2, ensure_ascii=False, sort_keys=True)
    blocks.append(Pre(raw, folded="The inputs as recorded in summary.json (JSON)"))
    return Section("inputs", "Input provenance", tuple(blocks))


def _workflow_section(summary: dict[str, Any]) -> Section:
    workflow = summary.get("workflow")
    block = (
        Pre(str(workflow), folded="The workflow file as run (TOML)")
        if workflow
        else "The summary holds no workflow text."
    )
    return Section("workflow", "Workflow", (block,))


#: Keys of the sections shown before the maps (the numbers a reader looks at first).
FRONT_SECTIONS = ("summary", "flags")

_SECTIONS: tuple[Callable[[dict[str, Any]], Section], ...] = (
    _summary_section,
    _model_section,
    _lid_section,
    _grid_section,
    _inputs_section,
    _workflow_section,
)


def build_sections(run: RunDir) -> list[Section]:
    """The report's content as sections of text, tables and preformatted blocks.

    In page order: summary numbers, validity flags, melting model, lid, grid, input
    provenance, workflow.
    """
    summary = run.summary
    sections = [make(summary) for make in _SECTIONS]
    sections.insert(1, flags_section(read_flags(run)))
    return sections
