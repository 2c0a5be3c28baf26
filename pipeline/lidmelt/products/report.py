"""The run report: one self-contained HTML page (and optionally a PDF) describing a run.

The page holds the job in one line, a caution on what the numbers are for, the summary numbers
and per-variable statistics, the maps (embedded as base64 PNG), the melting model's parameter
table with the source of each value, the cooling model and lid isotherm, the grid, the input
provenance (source path and SHA-256 of each input), the workflow text and the lidmelt version.
Everything comes from ``summary.json`` (see :mod:`lidmelt.grids.rundir`) and the run's grids;
every string taken from a file is HTML-escaped, and the page loads nothing from outside (no
external CSS, scripts, fonts or images), so it can be mailed or archived as it is.

The PDF (``pdf=True``) is composed with matplotlib's ``PdfPages``: a text page with the job,
the caution and the summary, one page per map, then text pages with the tables and workflow.
"""

from __future__ import annotations

import base64
import html
import io
import json
import logging
import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from lidmelt import __version__
from lidmelt.errors import InputError
from lidmelt.grids.rundir import SUMMARY_NAME, RunDir, open_run
from lidmelt.products import maps as _maps

log = logging.getLogger(__name__)

#: The caution printed at the top of every report (HTML and PDF).
CAUTION = (
    "These maps and numbers are model estimates for research screening. They are not a "
    "volcanic hazard assessment: they follow from the chosen melting model, its parameters and "
    "the input grids, and share their uncertainties. For any question about volcanic hazard, "
    "defer to the responsible volcano observatories and civil-protection agencies."
)

#: Width (in) and resolution (dpi) of maps rendered for the report.
REPORT_MAP_WIDTH_IN = 8.0
REPORT_MAP_DPI = 100


# --------------------------------------------------------------------------------------------
# The report's content, independent of the output format


@dataclass(frozen=True)
class Table:
    """A table of text cells (already formatted, not yet escaped)."""

    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    mono: tuple[int, ...] = ()  # columns shown in a monospace font (hashes, paths)


@dataclass(frozen=True)
class Pre:
    """Preformatted text (the workflow)."""

    text: str


@dataclass(frozen=True)
class Section:
    """A heading and its blocks: paragraphs (str), :class:`Table` or :class:`Pre`."""

    key: str
    heading: str
    blocks: tuple[str | Table | Pre, ...]


@dataclass(frozen=True)
class MapImage:
    """One embedded map."""

    variable: str
    data: bytes
    mime: str  # "image/png" or "image/svg+xml"
    source: str  # "rendered for this report" or the file it came from


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


def _get(d: Any, *keys: str, default: Any = None) -> Any:
    for key in keys:
        if not isinstance(d, dict) or key not in d:
            return default
        d = d[key]
    return d


def _grid_text(summary: dict[str, Any]) -> tuple[str, list[tuple[str, str]]]:
    grid = summary.get("grid") or {}
    crs_name = "CRS not recorded"
    geographic = False
    if grid.get("crs_wkt"):
        try:
            import pyproj

            crs = pyproj.CRS.from_wkt(grid["crs_wkt"])
            crs_name = crs.name + (f" (EPSG:{crs.to_epsg()})" if crs.to_epsg() else "")
            geographic = crs.is_geographic
        except Exception:  # pyproj raises CRSError and others for bad WKT
            crs_name = "CRS WKT not readable"
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


def _job_line(summary: dict[str, Any]) -> str:
    grid_text, _ = _grid_text(summary)
    model = _get(summary, "model", "name", default="an unrecorded model")
    tp = summary.get("ambient_potential_temperature_c")
    tp_text = f"{tp:g} °C" if isinstance(tp, int | float) else "an unrecorded temperature"
    cooling = summary.get("cooling")
    if isinstance(cooling, dict) and cooling.get("name"):
        iso = cooling.get("lid_isotherm_c")
        lid = f"lid from plate age by {cooling['name']} cooling"
        if isinstance(iso, int | float):
            lid += f" to the {iso:g} °C isotherm"
    else:
        lid = "lid from a lid-thickness grid"
    when = summary.get("created_utc") or "an unrecorded time"
    version = summary.get("lidmelt_version") or "unknown"
    return (
        f"Melting model {model} at ambient mantle potential temperature {tp_text}, {lid}, "
        f"on a grid of {grid_text}; run at {when} with lidmelt {version}."
    )


def _parameter_table(block: dict[str, Any], *, fallback: str) -> Table:
    params = block.get("parameters") or {}
    sources = block.get("sources") if isinstance(block.get("sources"), dict) else {}
    rows = []
    for name, value in params.items():
        source = sources.get(name)
        source_text = str(source) if source else (fallback or "not recorded")
        rows.append((str(name), format_value(value), source_text))
    return Table(("Parameter", "Value", "Source"), tuple(rows))


def build_sections(run: RunDir) -> list[Section]:
    """The report's content as sections of text, tables and preformatted blocks."""
    summary = run.summary
    sections = []

    stats = summary.get("statistics") or {}
    blocks: list[str | Table | Pre] = []
    if stats:
        blocks.append(
            Table(
                ("Quantity", "Value"),
                (
                    ("Melting cells", format_number(stats.get("melting_cells"))),
                    ("Melting area", format_number(stats.get("melting_area_km2"), unit="km²")),
                    ("Melt volume", format_number(stats.get("melt_volume_km3"), unit="km³")),
                ),
            )
        )
        outputs = summary.get("outputs") or {}
        var_rows = []
        for name, s in (stats.get("variables") or {}).items():
            units = _get(outputs, name, "units", default="")
            var_rows.append(
                (
                    str(name),
                    str(units),
                    format_number(_get(s, "min")),
                    format_number(_get(s, "max")),
                    format_number(_get(s, "mean")),
                )
            )
        if var_rows:
            blocks.append(Table(("Variable", "Unit", "Min", "Max", "Mean"), tuple(var_rows)))
    else:
        blocks.append("The run summary records no statistics.")
    sections.append(Section("summary", "Summary", tuple(blocks)))

    model = summary.get("model") or {}
    reference = str(model.get("reference") or "")
    blocks = [
        f"Model: {model.get('name') or 'not recorded'}.",
        f"Reference: {reference or 'not recorded'}.",
    ]
    tp = summary.get("ambient_potential_temperature_c")
    blocks.append(f"Ambient mantle potential temperature: {format_value(tp)} °C.")
    table = _parameter_table(model, fallback=f"model reference ({reference})" if reference else "")
    blocks.append(table if table.rows else "The summary lists no model parameters.")
    sections.append(Section("model", "Melting model", tuple(blocks)))

    cooling = summary.get("cooling")
    if isinstance(cooling, dict) and cooling:
        blocks = [
            f"Cooling model: {cooling.get('name') or 'not recorded'}.",
            f"Lid isotherm: {format_value(cooling.get('lid_isotherm_c'))} °C.",
        ]
        if cooling.get("reference"):
            blocks.append(f"Reference: {cooling['reference']}.")
        table = _parameter_table(cooling, fallback=str(cooling.get("reference") or ""))
        if table.rows:
            blocks.append(table)
    else:
        blocks = ["No cooling model: the lid came from a lid-thickness grid."]
    top = summary.get("min_top_of_melting_km")
    if top is not None:
        blocks.append(f"Shallowest top of melting (base of the crust): {format_value(top)} km.")
    sections.append(Section("lid", "Lid (lithosphere)", tuple(blocks)))

    _, grid_rows = _grid_text(summary)
    sections.append(Section("grid", "Grid", (Table(("Item", "Value"), tuple(grid_rows)),)))

    inputs = summary.get("inputs") or {}
    rows = []
    for name, entry in inputs.items():
        entry = entry if isinstance(entry, dict) else {}
        extra = {
            k: v
            for k, v in entry.items()
            if k not in {"file", "source", "sha256", "units", "long_name"}
        }
        rows.append(
            (
                str(name),
                str(entry.get("units") or ""),
                str(entry.get("source") or "none recorded"),
                str(entry.get("sha256") or "none recorded"),
                str(entry.get("file") or ""),
                "; ".join(f"{k}={format_value(v)}" for k, v in extra.items()),
            )
        )
    blocks = (
        [
            Table(
                ("Input", "Unit", "Source", "SHA-256", "Aligned grid", "Details"),
                tuple(rows),
                mono=(2, 3, 4),
            )
        ]
        if rows
        else ["The summary lists no inputs."]
    )
    sections.append(Section("inputs", "Input provenance", tuple(blocks)))

    workflow = summary.get("workflow")
    sections.append(
        Section(
            "workflow",
            "Workflow",
            (Pre(str(workflow)) if workflow else "The summary holds no workflow text.",),
        )
    )
    return sections


# --------------------------------------------------------------------------------------------
# Maps


def _collect_maps(
    run: RunDir, maps: Sequence[str | Path] | None, coastlines: str | Path | bool | None
) -> list[MapImage]:
    """The images to embed: given files, or fresh renders / up-to-date RUN_DIR/maps PNGs."""
    if maps is not None:
        images = []
        for item in maps:
            path = Path(item)
            if not path.is_file():
                msg = (
                    f"map file {str(path)!r} does not exist. Give existing PNG or SVG files "
                    "(e.g. from 'lidmelt map'), or leave maps out to draw them."
                )
                raise InputError(msg)
            suffix = path.suffix.lower()
            if suffix not in {".png", ".svg"}:
                msg = (
                    f"map file {str(path)!r} has suffix {path.suffix!r}; the report embeds "
                    ".png or .svg images. Draw the maps with 'lidmelt map --format png'."
                )
                raise InputError(msg)
            mime = "image/png" if suffix == ".png" else "image/svg+xml"
            images.append(MapImage(path.stem, path.read_bytes(), mime, str(path)))
        return images
    summary_mtime = (run.path / SUMMARY_NAME).stat().st_mtime
    coast: Path | bool | None = None
    resolved = False
    images = []
    for name in run.outputs:
        existing = run.path / "maps" / f"{name}.png"
        if existing.is_file() and existing.stat().st_mtime >= summary_mtime:
            images.append(MapImage(name, existing.read_bytes(), "image/png", str(existing)))
            continue
        if not resolved:  # one coastline note per report, not per map
            coast = _maps.resolve_coastlines(coastlines)
            resolved = True
        fig, _ = _maps.make_map_figure(
            run,
            name,
            coastlines=coast if coast else False,
            dpi=REPORT_MAP_DPI,
            width_in=REPORT_MAP_WIDTH_IN,
        )
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=REPORT_MAP_DPI)
        images.append(MapImage(name, buf.getvalue(), "image/png", "rendered for this report"))
    return images


# --------------------------------------------------------------------------------------------
# HTML

_CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, Helvetica, Arial,
  sans-serif; margin: 2rem auto; max-width: 60rem; padding: 0 1rem; color: #1a1a1a;
  line-height: 1.45; }
h1 { font-size: 1.6rem; margin-bottom: 0.3rem; }
h2 { font-size: 1.25rem; border-bottom: 1px solid #ccc; padding-bottom: 0.2rem;
  margin-top: 2rem; }
p.job { font-size: 1.05rem; }
.caution { border-left: 4px solid #b35900; background: #fff5e6; padding: 0.6rem 1rem; }
table { border-collapse: collapse; margin: 0.6rem 0; font-size: 0.92rem; }
th, td { border: 1px solid #d0d0d0; padding: 0.25rem 0.5rem; text-align: left;
  vertical-align: top; }
th { background: #f2f2f2; }
td.mono, pre { font-family: ui-monospace, "DejaVu Sans Mono", Menlo, Consolas, monospace;
  font-size: 0.85rem; word-break: break-all; }
pre { background: #f7f7f7; border: 1px solid #ddd; padding: 0.6rem; white-space: pre-wrap; }
figure { margin: 1rem 0 2rem 0; }
figure img { max-width: 100%; height: auto; border: 1px solid #e0e0e0; }
figcaption { font-size: 0.85rem; color: #555; }
footer { margin-top: 2.5rem; font-size: 0.85rem; color: #555; }
"""


def _esc(text: Any) -> str:
    return html.escape(str(text), quote=True)


def _html_block(block: str | Table | Pre) -> str:
    if isinstance(block, Table):
        head = "".join(f"<th>{_esc(h)}</th>" for h in block.header)
        body = []
        for row in block.rows:
            cells = "".join(
                f'<td class="mono">{_esc(c)}</td>' if i in block.mono else f"<td>{_esc(c)}</td>"
                for i, c in enumerate(row)
            )
            body.append(f"<tr>{cells}</tr>")
        return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"
    if isinstance(block, Pre):
        return f"<pre>{_esc(block.text)}</pre>"
    return f"<p>{_esc(block)}</p>"


def render_html(run: RunDir, images: Sequence[MapImage]) -> str:
    """The report page as one HTML string (no external resources)."""
    summary = run.summary
    sections = build_sections(run)
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>lidmelt run report: {_esc(run.path.name)}</title>",
        f"<style>{_CSS}</style>",
        "</head>",
        "<body>",
        "<header>",
        f"<h1>lidmelt run report: {_esc(run.path.name)}</h1>",
        f'<p class="job">{_esc(_job_line(summary))}</p>',
        "</header>",
        f'<aside class="caution"><strong>Caution.</strong> {_esc(CAUTION)}</aside>',
    ]
    first, rest = sections[0], sections[1:]
    parts.append(f'<section id="{first.key}"><h2>{_esc(first.heading)}</h2>')
    parts.extend(_html_block(b) for b in first.blocks)
    parts.append("</section>")
    parts.append('<section id="maps"><h2>Maps</h2>')
    if not images:
        parts.append("<p>No maps were included.</p>")
    for image in images:
        data = base64.b64encode(image.data).decode("ascii")
        parts.append(
            f'<figure><img alt="Map of {_esc(image.variable)}" '
            f'src="data:{image.mime};base64,{data}">'
            f"<figcaption>{_esc(image.variable)} ({_esc(image.source)})</figcaption></figure>"
        )
    parts.append("</section>")
    for section in rest:
        parts.append(f'<section id="{section.key}"><h2>{_esc(section.heading)}</h2>')
        parts.extend(_html_block(b) for b in section.blocks)
        parts.append("</section>")
    parts.append(
        f"<footer>Report written by lidmelt {_esc(__version__)}; run made by lidmelt "
        f"{_esc(summary.get('lidmelt_version') or 'unknown')} at "
        f"{_esc(summary.get('created_utc') or 'an unrecorded time')}. Run directory: "
        f"{_esc(run.path)}.</footer>"
    )
    parts.extend(["</body>", "</html>", ""])
    return "\n".join(parts)


# --------------------------------------------------------------------------------------------
# PDF

_PAGE_IN = (8.27, 11.69)  # A4 portrait
_PDF_FONT_PT = 8.0


def _text_lines(block: str | Table | Pre, width_chars: int) -> list[str]:
    import textwrap

    if isinstance(block, Pre):
        lines = []
        for line in block.text.splitlines() or [""]:
            lines.extend(textwrap.wrap(line, width_chars, drop_whitespace=False) or [""])
        return lines
    if isinstance(block, Table):
        out = []
        for row in block.rows:
            cells = [f"{h}: {c}" for h, c in zip(block.header, row, strict=True) if c]
            first, *others = cells
            out.extend(textwrap.wrap(first, width_chars, subsequent_indent="    "))
            for cell in others:
                out.extend(
                    textwrap.wrap(
                        cell, width_chars, initial_indent="    ", subsequent_indent="      "
                    )
                )
        return out
    return textwrap.wrap(block, width_chars)


def _text_pages(title_lines: list[tuple[str, str]], per_page: int) -> list[list[tuple[str, str]]]:
    """Split (kind, text) lines into pages of ``per_page`` lines."""
    pages, page = [], []
    for item in title_lines:
        if len(page) >= per_page:
            pages.append(page)
            page = []
        page.append(item)
    if page:
        pages.append(page)
    return pages


def _write_pdf(run: RunDir, images: Sequence[MapImage], path: Path) -> Path:
    from matplotlib.backends.backend_pdf import PdfPages
    from matplotlib.figure import Figure
    from matplotlib.image import imread

    width_chars = int((_PAGE_IN[0] - 1.2) * 72 / (0.6 * _PDF_FONT_PT))
    per_page = int((_PAGE_IN[1] - 1.4) * 72 / (1.45 * _PDF_FONT_PT))
    sections = build_sections(run)

    def lines_of(section_list: Sequence[Section]) -> list[tuple[str, str]]:
        out: list[tuple[str, str]] = []
        for section in section_list:
            out.append(("", ""))
            out.append(("heading", section.heading))
            for block in section.blocks:
                out.extend(("text", line) for line in _text_lines(block, width_chars))
        return out

    head = [("title", f"lidmelt run report: {run.path.name}")]
    head += [("text", line) for line in _text_lines(_job_line(run.summary), width_chars)]
    head += [("", ""), ("heading", "Caution")]
    head += [("text", line) for line in _text_lines(CAUTION, width_chars)]
    first_pages = _text_pages(head + lines_of(sections[:1]), per_page)
    last_pages = _text_pages(lines_of(sections[1:]), per_page)

    def text_page(pdf: Any, lines: list[tuple[str, str]]) -> None:
        fig = Figure(figsize=_PAGE_IN)
        y = 1.0 - 0.7 / _PAGE_IN[1]
        step = 1.45 * _PDF_FONT_PT / 72.0 / _PAGE_IN[1]
        for kind, text in lines:
            if kind == "title":
                fig.text(0.6 / _PAGE_IN[0], y, text, fontsize=13, fontweight="bold", va="top")
                y -= 2.0 * step
                continue
            weight = "bold" if kind == "heading" else "normal"
            fig.text(
                0.6 / _PAGE_IN[0],
                y,
                text,
                fontsize=_PDF_FONT_PT + (1 if weight == "bold" else 0),
                fontweight=weight,
                va="top",
                family="DejaVu Sans Mono",
            )
            y -= step
        pdf.savefig(fig)

    with (
        _maps.atomic_output(path) as tmp,
        PdfPages(
            tmp,
            metadata={
                "Title": f"lidmelt run report: {run.path.name}",
                "Creator": f"lidmelt {__version__}",
                "CreationDate": None,
            },
        ) as pdf,
    ):
        for lines in first_pages:
            text_page(pdf, lines)
        for image in images:
            if image.mime != "image/png":
                continue  # an SVG map cannot be placed on a PDF page without a converter
            pixels = imread(io.BytesIO(image.data), format="png")
            fig = Figure(figsize=_PAGE_IN)
            h, w = pixels.shape[:2]
            box_w, box_h = _PAGE_IN[0] - 1.0, _PAGE_IN[1] - 1.4
            scale = min(box_w / w, box_h / h)
            iw, ih = w * scale, h * scale
            ax = fig.add_axes(
                (
                    (_PAGE_IN[0] - iw) / 2 / _PAGE_IN[0],
                    1.0 - (0.7 + ih) / _PAGE_IN[1],
                    iw / _PAGE_IN[0],
                    ih / _PAGE_IN[1],
                )
            )
            ax.imshow(pixels, interpolation="none")
            ax.set_axis_off()
            fig.text(0.5, 1.0 - 0.45 / _PAGE_IN[1], image.variable, ha="center", fontsize=10)
            pdf.savefig(fig)
        for lines in last_pages:
            text_page(pdf, lines)
    return path


# --------------------------------------------------------------------------------------------
# Public API and command line


def write_report(
    run: RunDir | str | Path,
    *,
    path: str | Path | None = None,
    maps: Sequence[str | Path] | None = None,
    pdf: bool = False,
    coastlines: str | Path | bool | None = None,
) -> Path:
    """Write the run report as one self-contained HTML file (and optionally a PDF).

    Parameters
    ----------
    run : RunDir, str or Path
        The run directory.
    path : str, Path or None
        The HTML file to write; default ``RUN_DIR/report.html``.
    maps : list of paths or None
        PNG or SVG images to embed, in order. None: for each output variable, embed
        ``RUN_DIR/maps/<variable>.png`` if it is newer than ``summary.json`` (as drawn by
        ``lidmelt map``), else draw the map afresh (8 in at 100 dpi). An empty list embeds none.
    pdf : bool
        Also write a PDF beside the HTML (same name, ``.pdf``): a text page with the job,
        caution and summary, one page per PNG map, then the tables and workflow.
    coastlines : path, bool or None
        For maps drawn afresh; as in :func:`lidmelt.products.maps.make_map_figure`.

    Returns
    -------
    Path
        The HTML file.

    Raises
    ------
    InputError
        If a given map file is missing or not PNG/SVG, or ``path`` is not an ``.html`` file.
    RunDirError
        If ``run`` is not a run directory.
    """
    run = run if isinstance(run, RunDir) else open_run(run)
    out = Path(path) if path is not None else run.path / "report.html"
    if out.suffix.lower() not in {".html", ".htm"}:
        msg = (
            f"report file {str(out)!r} must end in .html (the PDF, with --pdf, is written "
            "beside it with the same name). Give e.g. -o report.html."
        )
        raise InputError(msg)
    images = _collect_maps(run, maps, coastlines)
    text = render_html(run, images)
    with _maps.atomic_output(out) as tmp:
        tmp.write_text(text, encoding="utf-8")
    if pdf:
        _write_pdf(run, images, out.with_suffix(".pdf"))
    return out
