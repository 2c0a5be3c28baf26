"""The report as a typeset PDF (A4 portrait), composed with reportlab's Platypus.

The same sections as the HTML page (:mod:`._content`), set as a document rather than as text
pages: paragraphs that wrap and flow from page to page, tables with a header row (repeated
where a table continues on the next page) whose cells wrap within their column, figures at the
full text width (scaled down to the page height where a figure is taller) with their caption,
headings kept with what follows. The run's warnings and the caution are framed boxes under the
job line. Each page has a running header (the run) and a footer (page number, lidmelt version),
both inside the page. Text is set in DejaVu Sans (matplotlib's bundled TrueType fonts, embedded:
every character the report uses, units and symbols included), code in DejaVu Sans Mono. Raw
data (:class:`._blocks.Pre` with ``in_pdf`` False) is left to the HTML page, which the PDF
names. The file carries no creation date (reproducible).

Why reportlab: its Platypus engine breaks paragraphs and tables across pages, which
matplotlib's PDF backend (one figure per page, no text flow) does not; printing the HTML page
with a browser would make a browser a dependency of ``lidmelt report --pdf``.
"""

from __future__ import annotations

import functools
import html
import io
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from lidmelt import __version__
from lidmelt._files import atomic_path
from lidmelt.grids._rundir import RunDir
from lidmelt.products._report._blocks import Block, MapImage, Pre, Section, Table
from lidmelt.products._report._content import (
    CAUTION,
    FRONT_SECTIONS,
    build_sections,
    job_line,
    run_warnings,
)
from lidmelt.products._report._labels import figure_caption

#: Page size (A4 portrait) and margins, in points (1/72 in).
PAGE_PT = (595.2756, 841.8898)
MARGIN_PT = 56.0
_HEAD_PT = 28.0  # the running header and footer sit this far inside the page's edge
_FONT, _BOLD, _ITALIC, _MONO = "LmSans", "LmSans-Bold", "LmSans-Oblique", "LmMono"


@functools.cache
def _fonts() -> None:
    """Register DejaVu Sans (regular, bold, oblique) and DejaVu Sans Mono from matplotlib."""
    import matplotlib
    from reportlab.lib.fonts import addMapping
    from reportlab.pdfbase import pdfmetrics
    from reportlab.pdfbase.ttfonts import TTFont

    folder = Path(matplotlib.get_data_path(), "fonts", "ttf")
    for name, file in (
        (_FONT, "DejaVuSans.ttf"),
        (_BOLD, "DejaVuSans-Bold.ttf"),
        (_ITALIC, "DejaVuSans-Oblique.ttf"),
        (_MONO, "DejaVuSansMono.ttf"),
    ):
        pdfmetrics.registerFont(TTFont(name, str(folder / file)))
    addMapping(_FONT, 0, 0, _FONT)
    addMapping(_FONT, 1, 0, _BOLD)
    addMapping(_FONT, 0, 1, _ITALIC)
    addMapping(_FONT, 1, 1, _BOLD)


@functools.cache
def _styles() -> dict[str, Any]:
    from reportlab.lib import colors
    from reportlab.lib.enums import TA_JUSTIFY
    from reportlab.lib.styles import ParagraphStyle

    _fonts()
    body = ParagraphStyle("body", fontName=_FONT, fontSize=9.5, leading=13, spaceAfter=5)
    styles = {
        "title": ParagraphStyle("title", parent=body, fontName=_BOLD, fontSize=17, leading=21),
        "h2": ParagraphStyle(
            "h2",
            parent=body,
            fontName=_BOLD,
            fontSize=12.5,
            leading=16,
            spaceBefore=12,
            spaceAfter=6,
            keepWithNext=True,
        ),
        "body": ParagraphStyle("text", parent=body, alignment=TA_JUSTIFY),
        "job": ParagraphStyle("job", parent=body, fontSize=10.5, leading=14),
        "box": ParagraphStyle("box", parent=body, spaceAfter=2),
        "warning": ParagraphStyle("warning", parent=body, textColor=colors.HexColor("#8a0000")),
        "cell": ParagraphStyle("cell", parent=body, fontSize=8, leading=10, spaceAfter=0),
        "head": ParagraphStyle("head", parent=body, fontName=_BOLD, fontSize=8, leading=10),
        "mono": ParagraphStyle("mono", parent=body, fontName=_MONO, fontSize=7, leading=8.6),
        "caption": ParagraphStyle(
            "caption", parent=body, fontSize=8, leading=10.5, textColor=colors.HexColor("#444444")
        ),
    }
    styles["h2"].spaceAfter, styles["h2"].keepWithNext = 6, True
    styles["warning-head"] = ParagraphStyle(
        "warning-head", parent=styles["warning"], fontName=_BOLD, spaceAfter=3
    )
    return styles


def _frame_width() -> float:
    return PAGE_PT[0] - 2 * MARGIN_PT


def _frame_height() -> float:
    return PAGE_PT[1] - 2 * MARGIN_PT


def _para(text: str, style: str = "body") -> Any:
    """A paragraph of plain text (escaped: reportlab reads a little markup)."""
    from reportlab.platypus import Paragraph

    return Paragraph(html.escape(str(text), quote=False), _styles()[style])


def _column_widths(block: Table, width: float) -> list[float]:
    """Column widths as a browser sets them: each column's natural width (its longest cell on
    one line) where the table fits, else each its longest word plus a share of the rest in
    proportion to what it lacks (cells then wrap between words)."""
    from reportlab.pdfbase.pdfmetrics import stringWidth

    size, pad = _styles()["cell"].fontSize, 6.5  # cell padding, left + right, plus a margin
    columns = [
        [str(block.header[k]), *(str(row[k]) for row in block.rows)]
        for k in range(len(block.header))
    ]
    font = {k: _MONO if k in block.mono else _FONT for k in range(len(columns))}

    def measure(k: int, row: int, text: str) -> float:  # the header row is set in bold
        return stringWidth(text, _BOLD if row == 0 else font[k], size)

    natural = [
        max(measure(k, r, c) for r, c in enumerate(cells)) + pad for k, cells in enumerate(columns)
    ]
    least = [
        max(measure(k, r, w) for r, c in enumerate(cells) for w in (c.split() or [""])) + pad
        for k, cells in enumerate(columns)
    ]
    least = [min(n, width / len(columns)) if k in block.mono else n for k, n in enumerate(least)]
    if sum(natural) <= width:
        return natural
    room = max(width - sum(least), 0.0)
    lack = [max(n - m, 0.0) for n, m in zip(natural, least, strict=True)]
    total = sum(lack) or 1.0
    widths = [m + room * d / total for m, d in zip(least, lack, strict=True)]
    scale = min(1.0, width / sum(widths))
    return [w * scale for w in widths]


def _table(block: Table) -> Any:
    """A table: a header row (repeated on continued pages) and wrapped cells."""
    from reportlab.lib import colors
    from reportlab.platypus import Table as Grid
    from reportlab.platypus import TableStyle

    mono = set(block.mono)
    head = [_para(h, "head") for h in block.header]
    rows = [
        [_para(c, "mono" if k in mono else "cell") for k, c in enumerate(row)] for row in block.rows
    ]
    grid = Grid(
        [head, *rows], colWidths=_column_widths(block, _frame_width()), repeatRows=1, hAlign="LEFT"
    )
    grid.setStyle(
        TableStyle(
            [
                ("GRID", (0, 0), (-1, -1), 0.4, colors.HexColor("#b0b0b0")),
                ("BACKGROUND", (0, 0), (-1, 0), colors.HexColor("#eeeeee")),
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("LEFTPADDING", (0, 0), (-1, -1), 3),
                ("RIGHTPADDING", (0, 0), (-1, -1), 3),
                ("TOPPADDING", (0, 0), (-1, -1), 2),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 2),
            ]
        )
    )
    return grid


def _figure(image: MapImage) -> list[Any]:
    """A PNG at the full text width (or the page height where taller), with its caption."""
    from reportlab.platypus import Image, KeepTogether, Spacer

    caption = _para(image.caption or figure_caption(image.variable, image.source), "caption")
    if image.mime != "image/png":  # an SVG cannot be placed without a converter
        return [_para(f"Figure (in the HTML report only): {image.caption or image.variable}.")]
    from PIL import Image as Pil

    with Pil.open(io.BytesIO(image.data)) as pixels:
        w, h = pixels.size
    scale = min(_frame_width() / w, (_frame_height() - 60.0) / h)
    picture = Image(io.BytesIO(image.data), width=w * scale, height=h * scale)
    return [KeepTogether([picture, Spacer(1, 3), caption]), Spacer(1, 8)]


def _pre(block: Pre) -> list[Any]:
    """Preformatted text in a small monospace font, long lines broken; or a pointer to HTML."""
    from reportlab.platypus import Preformatted

    if not block.in_pdf:
        return [_para(f"{block.folded or 'Raw data'}: in the HTML report.", "caption")]
    chars = int(_frame_width() / (0.6 * _styles()["mono"].fontSize))
    out = [_para(block.folded, "caption")] if block.folded else []
    return [*out, Preformatted(block.text, _styles()["mono"], maxLineLength=chars, newLineChars="")]


def _flowables(block: Block) -> list[Any]:
    from reportlab.platypus import Spacer

    if isinstance(block, MapImage):
        return _figure(block)
    if isinstance(block, Table):
        return [_table(block), Spacer(1, 7)]
    if isinstance(block, Pre):
        return _pre(block)
    return [_para(block)]


def _box(paragraphs: list[Any], colour: str, fill: str) -> Any:
    """Paragraphs in a framed box at the text width (warnings, caution)."""
    from reportlab.lib import colors
    from reportlab.platypus import Table as Grid
    from reportlab.platypus import TableStyle

    box = Grid([[paragraphs]], colWidths=[_frame_width()])
    box.setStyle(
        TableStyle(
            [
                ("BOX", (0, 0), (-1, -1), 1.2, colors.HexColor(colour)),
                ("BACKGROUND", (0, 0), (-1, -1), colors.HexColor(fill)),
                ("LEFTPADDING", (0, 0), (-1, -1), 8),
                ("RIGHTPADDING", (0, 0), (-1, -1), 8),
            ]
        )
    )
    return box


def _front(run: RunDir) -> list[Any]:
    """Title, job line, warnings and caution."""
    from reportlab.platypus import Spacer

    out = [
        _para(f"lidmelt run report: {run.path.name}", "title"),
        _para(job_line(run.summary), "job"),
    ]
    warnings = run_warnings(run.summary)
    if warnings:
        lines = [_para("Warnings", "warning-head"), *(_para(w, "warning") for w in warnings)]
        out += [_box(lines, "#b30000", "#fff0f0"), Spacer(1, 8)]
    out += [_box([_para(f"Caution. {CAUTION}", "box")], "#b35900", "#fff5e6"), Spacer(1, 6)]
    return out


def _story(run: RunDir, images: Sequence[MapImage], extra: Sequence[Section]) -> list[Any]:
    """Everything in page order: front, summary and flags, maps, then the other sections."""
    from reportlab.platypus import KeepTogether

    sections = build_sections(run)
    front = [s for s in sections if s.key in FRONT_SECTIONS]
    back = [*extra, *(s for s in sections if s.key not in FRONT_SECTIONS)]
    maps = Section("maps", "Maps", tuple(images) or ("No maps were included.",))
    story = _front(run)
    for section in [*front, maps, *back]:
        flows = [f for block in section.blocks for f in _flowables(block)]
        # the heading stays on the page of what follows it (a figure is kept whole)
        story.append(KeepTogether([_para(section.heading, "h2"), *flows[:1]]))
        story += flows[1:]
    return story


def _decorate(canvas: Any, doc: Any, *, name: str) -> None:
    """The running header and the footer of every page, inside the page's edges."""
    canvas.saveState()
    canvas.setFont(_FONT, 7.5)
    canvas.setFillGray(0.35)
    top = PAGE_PT[1] - _HEAD_PT
    canvas.drawString(MARGIN_PT, top, f"lidmelt run report: {name}")
    canvas.drawRightString(PAGE_PT[0] - MARGIN_PT, top, "model estimates for research screening")
    canvas.drawString(MARGIN_PT, _HEAD_PT - 7.5, f"lidmelt {__version__}")
    canvas.drawRightString(PAGE_PT[0] - MARGIN_PT, _HEAD_PT - 7.5, f"page {doc.page}")
    canvas.restoreState()


def write_pdf(
    run: RunDir, images: Sequence[MapImage], path: Path, extra: Sequence[Section] = ()
) -> Path:
    """Write the report PDF to ``path`` atomically (see the module notes); return ``path``."""
    from reportlab.platypus import BaseDocTemplate, Frame, PageTemplate

    _fonts()
    frame = Frame(
        MARGIN_PT, MARGIN_PT, _frame_width(), _frame_height(), leftPadding=0, rightPadding=0,
        topPadding=0, bottomPadding=0,
    )  # fmt: skip
    decorate = functools.partial(_decorate, name=run.path.name)
    with atomic_path(path) as tmp:
        doc = BaseDocTemplate(
            str(tmp),
            pagesize=PAGE_PT,
            title=f"lidmelt run report: {run.path.name}",
            author="",
            creator=f"lidmelt {__version__}",
            invariant=True,
            pageTemplates=[PageTemplate("page", [frame], onPage=decorate)],
        )
        doc.build(_story(run, images, extra))
    return path
