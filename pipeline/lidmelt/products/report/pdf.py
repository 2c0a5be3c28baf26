"""The report as a PDF, composed with matplotlib's ``PdfPages`` (A4 portrait).

Pages: text pages with the job, the run's warnings (bold, red), the caution, the summary and
the flag counts; one page per PNG map; then text
pages with the tables and the workflow. Text is set in DejaVu Sans Mono; tables are set as
aligned columns under a header and a rule (long cells wrap within their column). The file
carries no creation date (reproducible).
"""

from __future__ import annotations

import io
import textwrap
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from lidmelt import __version__
from lidmelt.files import atomic_path
from lidmelt.grids.rundir import RunDir
from lidmelt.products.report.content import (
    CAUTION,
    FRONT_SECTIONS,
    Block,
    MapImage,
    Pre,
    Section,
    Table,
    build_sections,
    job_line,
    run_warnings,
    variable_label,
)

__all__ = ["write_pdf"]

_PAGE_IN = (8.27, 11.69)  # A4 portrait
_PDF_FONT_PT = 8.0
#: Characters per line and lines per page of the text pages (monospace, 0.6 em wide).
_WIDTH_CHARS = int((_PAGE_IN[0] - 1.2) * 72 / (0.6 * _PDF_FONT_PT))
_PER_PAGE = int((_PAGE_IN[1] - 1.4) * 72 / (1.45 * _PDF_FONT_PT))

Line = tuple[str, str]  # (kind, text): "title", "heading", "warning", "text" or "" (blank)


def _text_lines(block: Block, width_chars: int) -> list[str]:
    if isinstance(block, MapImage):  # placed on a page of its own (:func:`_section_pages`)
        where = "next page" if block.mime == "image/png" else "in the HTML report only"
        return [f"Figure: {block.caption or variable_label(block.variable)} ({where})."]
    if isinstance(block, Pre) and block.folded:
        return [f"{block.folded}: folded in the HTML report (not repeated here)."]
    if isinstance(block, Pre):
        lines = []
        for line in block.text.splitlines() or [""]:
            lines.extend(textwrap.wrap(line, width_chars, drop_whitespace=False) or [""])
        return lines
    if isinstance(block, Table):
        return _table_lines(block, width_chars)
    return textwrap.wrap(block, width_chars)


def _column_widths(block: Table, width_chars: int) -> list[int]:
    """Each column's width: its longest cell, the widest shrunk in turn until the row fits."""
    widths = [
        max(len(str(c)) for c in [h, *(row[k] for row in block.rows)])
        for k, h in enumerate(block.header)
    ]
    room = width_chars - 2 * (len(widths) - 1)
    while sum(widths) > room and max(widths) > 8:
        widths[widths.index(max(widths))] -= 1
    return widths


def _table_lines(block: Table, width_chars: int) -> list[str]:
    """A table as aligned columns after a blank line: a header, a rule, then the rows; a cell
    longer than its column wraps onto further lines of the same row."""
    widths = _column_widths(block, width_chars)

    def row_lines(cells: Sequence[Any]) -> list[str]:
        wrapped = [textwrap.wrap(str(c), w) or [""] for c, w in zip(cells, widths, strict=True)]
        height = max(len(w) for w in wrapped)
        return [
            "  ".join(
                (col[i] if i < len(col) else "").ljust(w)
                for col, w in zip(wrapped, widths, strict=True)
            ).rstrip()
            for i in range(height)
        ]

    rule = "  ".join("-" * w for w in widths)
    return ["", *row_lines(block.header), rule] + [
        line for row in block.rows for line in row_lines(row)
    ]


def _text_pages(lines: list[Line], per_page: int) -> list[list[Line]]:
    """Split (kind, text) lines into pages of ``per_page`` lines."""
    pages, page = [], []
    for item in lines:
        if len(page) >= per_page:
            pages.append(page)
            page = []
        page.append(item)
    if page:
        pages.append(page)
    return pages


def _section_lines(sections: Sequence[Section]) -> list[Line]:
    out: list[Line] = []
    for section in sections:
        out.append(("", ""))
        out.append(("heading", section.heading))
        for block in section.blocks:
            out.extend(("text", line) for line in _text_lines(block, _WIDTH_CHARS))
    return out


def _section_pages(sections: Sequence[Section]) -> list[list[Line] | MapImage]:
    """Text pages of the sections, with each PNG figure of a section on a page of its own
    after the text before it."""
    pages: list[list[Line] | MapImage] = []
    lines: list[Line] = []
    for section in sections:
        lines += [("", ""), ("heading", section.heading)]
        for block in section.blocks:
            lines.extend(("text", line) for line in _text_lines(block, _WIDTH_CHARS))
            if isinstance(block, MapImage) and block.mime == "image/png":
                pages += [*_text_pages(lines, _PER_PAGE), block]
                lines = []
    return pages + _text_pages(lines, _PER_PAGE)


def _head_lines(run: RunDir) -> list[Line]:
    head = [("title", f"lidmelt run report: {run.path.name}")]
    head += [("text", line) for line in _text_lines(job_line(run.summary), _WIDTH_CHARS)]
    warnings = run_warnings(run.summary)
    if warnings:
        head += [("", ""), ("warning", "WARNINGS")]
        for text in warnings:
            # warnings are set one point larger: fewer characters fit on a line
            width = int((_WIDTH_CHARS - 2) * _PDF_FONT_PT / (_PDF_FONT_PT + 1))
            wrapped = textwrap.wrap(text, width) or [""]
            head += [("warning", f"! {wrapped[0]}")]
            head += [("warning", f"  {line}") for line in wrapped[1:]]
    head += [("", ""), ("heading", "Caution")]
    head += [("text", line) for line in _text_lines(CAUTION, _WIDTH_CHARS)]
    return head


def _text_page(pdf: Any, lines: list[Line]) -> None:
    from matplotlib.figure import Figure

    fig = Figure(figsize=_PAGE_IN)
    x = 0.6 / _PAGE_IN[0]
    y = 1.0 - 0.7 / _PAGE_IN[1]
    step = 1.45 * _PDF_FONT_PT / 72.0 / _PAGE_IN[1]
    for kind, text in lines:
        if kind == "title":
            fig.text(x, y, text, fontsize=13, fontweight="bold", va="top")
            y -= 2.0 * step
            continue
        bold = kind in {"heading", "warning"}
        fig.text(
            x,
            y,
            text,
            fontsize=_PDF_FONT_PT + (1 if bold else 0),
            fontweight="bold" if bold else "normal",
            color="#b30000" if kind == "warning" else "black",
            va="top",
            family="DejaVu Sans Mono",
        )
        y -= step
    pdf.savefig(fig)


def _map_page(pdf: Any, image: MapImage) -> None:
    """One PNG map, scaled to fit the page inside the margins, under its variable name."""
    from matplotlib.figure import Figure
    from matplotlib.image import imread

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
    label = image.caption or variable_label(image.variable)
    fig.text(0.5, 1.0 - 0.45 / _PAGE_IN[1], label, ha="center", fontsize=10)
    pdf.savefig(fig)


def write_pdf(
    run: RunDir, images: Sequence[MapImage], path: Path, extra: Sequence[Section] = ()
) -> Path:
    """Write the report PDF to ``path`` atomically; SVG maps are left out (no converter)."""
    from matplotlib.backends.backend_pdf import PdfPages

    sections = build_sections(run)
    front = [s for s in sections if s.key in FRONT_SECTIONS]
    back = [*extra, *(s for s in sections if s.key not in FRONT_SECTIONS)]
    first_pages = _text_pages(_head_lines(run) + _section_lines(front), _PER_PAGE)
    last_pages = _section_pages(back)
    metadata = {
        "Title": f"lidmelt run report: {run.path.name}",
        "Creator": f"lidmelt {__version__}",
        "CreationDate": None,
    }
    with atomic_path(path) as tmp, PdfPages(tmp, metadata=metadata) as pdf:
        for lines in first_pages:
            _text_page(pdf, lines)
        for image in images:
            if image.mime == "image/png":  # an SVG map cannot be placed without a converter
                _map_page(pdf, image)
        for page in last_pages:
            if isinstance(page, MapImage):
                _map_page(pdf, page)
            else:
                _text_page(pdf, page)
    return path
