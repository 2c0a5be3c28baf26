"""The report's content, independent of the output format: sections of text and tables.

Everything comes from the run's ``summary.json`` (see :mod:`lidmelt.grids._rundir`), except the
flag counts, which are counted in the run's ``validity_flag.tif``; units and long names of the
variables come from the registry (:mod:`lidmelt._variables`) where the run's variables are
listed. Text here is not yet escaped: each writer escapes it for its format.

The summary's ``"warnings"`` (:func:`run_warnings`) are shown near the top of the page; the
summary section (:mod:`._summary`) shows the melt volumes (the anomaly's first), the regimes,
the further statistics and the per-variable ranges, every row in words (:mod:`._labels`); then
comes the count of cells per validity flag. The blocks (:class:`Table`, :class:`Pre`,
:class:`MapImage`, :class:`Section`) and the number formats live in :mod:`._blocks`.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from typing import Any

from lidmelt.grids._rundir import FlagGrid, RunDir, read_flags
from lidmelt.products._maps._captions import lid_model
from lidmelt.products._maps._flags import flag_counts
from lidmelt.products._report._blocks import (
    Block,
    Pre,
    Section,
    Table,
    format_sig,
    format_value,
)
from lidmelt.products._report._labels import variable_label, variable_units
from lidmelt.products._report._summary import summary_section

#: The caution printed at the top of every report (HTML and PDF).
CAUTION = (
    "These maps and numbers are model estimates for research screening. They are not a "
    "volcanic hazard assessment: they follow from the chosen melting model, its parameters and "
    "the input grids, and share their uncertainties. For any question about volcanic hazard, "
    "defer to the responsible volcano observatories and civil-protection agencies."
)


def _get(d: Any, *keys: str, default: Any = None) -> Any:
    for key in keys:
        if not isinstance(d, dict) or key not in d:
            return default
        d = d[key]
    return d


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


#: Said under a sources table that holds values not checked against their publication.
UNCHECKED_NOTE = (
    "Sources marked 'not checked against the publication' are values recalled from memory that "
    "could not be checked against a readable copy of the publication; docs/sources.md says what "
    "was tried. Treat them as unverified."
)


def _unchecked(sources: Table | None) -> tuple[str, ...]:
    """The note on unchecked values, when a sources table holds one."""
    if sources is None or not any("not checked" in row[1] for row in sources.rows):
        return ()
    return (UNCHECKED_NOTE,)


def run_warnings(summary: dict[str, Any]) -> list[str]:
    """The run's warnings (``summary["warnings"]``), as text; empty when there are none."""
    warnings = summary.get("warnings")
    if isinstance(warnings, str):
        warnings = [warnings]
    if not isinstance(warnings, list | tuple):
        return []
    return [str(w) for w in warnings if str(w).strip()]


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
        *_unchecked(sources),
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
            blocks += [sources, *_unchecked(sources)]
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
    label = variable_label(name)
    return (
        str(name) if label == name else f"{label} ({name})",
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
    blocks.append(Pre(raw, folded="The inputs as recorded in summary.json (JSON)", in_pdf=False))
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
    summary_section,
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
