"""The report as one self-contained HTML page.

Every string taken from a file is HTML-escaped, and the page loads nothing from outside (no
external CSS, scripts, fonts or images; maps are embedded as base64 ``data:`` URLs), so it can
be mailed or archived as it is.
"""

from __future__ import annotations

import base64
import html
from collections.abc import Sequence
from typing import Any

from lidmelt import __version__
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

_CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, Helvetica, Arial,
  sans-serif; margin: 2rem auto; max-width: 60rem; padding: 0 1rem; color: #1a1a1a;
  line-height: 1.45; }
h1 { font-size: 1.6rem; margin-bottom: 0.3rem; }
h2 { font-size: 1.25rem; border-bottom: 1px solid #ccc; padding-bottom: 0.2rem;
  margin-top: 2rem; }
p.job { font-size: 1.05rem; }
.caution { border-left: 4px solid #b35900; background: #fff5e6; padding: 0.6rem 1rem; }
.warnings { border: 2px solid #b30000; background: #fff0f0; padding: 0.6rem 1rem;
  margin: 1rem 0; }
.warnings ul { margin: 0.3rem 0 0 0; }
table { border-collapse: collapse; margin: 0.6rem 0; font-size: 0.92rem; max-width: 100%;
  display: block; overflow-x: auto; }
nav.toc { background: #f7f7f7; border: 1px solid #ddd; padding: 0.4rem 1rem; margin: 1rem 0; }
nav.toc ol { margin: 0.2rem 0; }
details { margin: 0.6rem 0; }
summary { cursor: pointer; color: #333; }
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


def _html_figure(image: MapImage) -> str:
    """An embedded image with its caption (the variable's label and where it came from)."""
    data = base64.b64encode(image.data).decode("ascii")
    caption = image.caption or figure_caption(image.variable, image.source)
    alt = image.caption or f"Map of {image.variable}"
    return (
        f'<figure><img alt="{_esc(alt)}" src="data:{image.mime};base64,{data}">'
        f"<figcaption>{_esc(caption)}</figcaption></figure>"
    )


def _html_block(block: Block) -> str:
    if isinstance(block, MapImage):
        return _html_figure(block)
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
        pre = f"<pre>{_esc(block.text)}</pre>"
        if block.folded:
            return f"<details><summary>{_esc(block.folded)}</summary>{pre}</details>"
        return pre
    return f"<p>{_esc(block)}</p>"


def _html_section(section: Section) -> list[str]:
    return [
        f'<section id="{section.key}"><h2>{_esc(section.heading)}</h2>',
        *(_html_block(b) for b in section.blocks),
        "</section>",
    ]


def _html_toc(sections: Sequence[Section]) -> list[str]:
    """The table of contents: one link per section, in page order."""
    items = "".join(f'<li><a href="#{s.key}">{_esc(s.heading)}</a></li>' for s in sections)
    return [f'<nav class="toc" id="contents"><strong>Contents</strong><ol>{items}</ol></nav>']


def _html_maps(images: Sequence[MapImage]) -> list[str]:
    parts = ['<section id="maps"><h2>Maps</h2>']
    if not images:
        parts.append("<p>No maps were included.</p>")
    parts.extend(_html_figure(image) for image in images)
    parts.append("</section>")
    return parts


def _html_warnings(warnings: Sequence[str]) -> list[str]:
    """The run's warnings in a framed box (nothing when there are none)."""
    if not warnings:
        return []
    items = "".join(f"<li>{_esc(w)}</li>" for w in warnings)
    return [
        f'<aside class="warnings" id="warnings"><strong>Warnings.</strong><ul>{items}</ul></aside>'
    ]


def render_html(run: RunDir, images: Sequence[MapImage], extra: Sequence[Section] = ()) -> str:
    """The report page as one HTML string (no external resources).

    The job line, the run's warnings and the caution come first, then the summary and flag
    counts, the maps, and the other sections.
    """
    summary = run.summary
    sections = build_sections(run)
    front = [s for s in sections if s.key in FRONT_SECTIONS]
    back = [*extra, *(s for s in sections if s.key not in FRONT_SECTIONS)]
    title = f"lidmelt run report: {_esc(run.path.name)}"
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{title}</title>",
        f"<style>{_CSS}</style>",
        "</head>",
        "<body>",
        "<header>",
        f"<h1>{title}</h1>",
        f'<p class="job">{_esc(job_line(summary))}</p>',
        "</header>",
        *_html_warnings(run_warnings(summary)),
        f'<aside class="caution"><strong>Caution.</strong> {_esc(CAUTION)}</aside>',
    ]
    maps_entry = Section("maps", "Maps", ())
    parts.extend(_html_toc([*front, maps_entry, *back]))
    for section in front:
        parts.extend(_html_section(section))
    parts.extend(_html_maps(images))
    for section in back:
        parts.extend(_html_section(section))
    parts.append(
        f"<footer>Report written by lidmelt {_esc(__version__)}; run made by lidmelt "
        f"{_esc(summary.get('lidmelt_version') or 'unknown')} at "
        f"{_esc(summary.get('created_utc') or 'an unrecorded time')}. Run directory: "
        f"{_esc(run.shown_path)}.</footer>"
    )
    parts.extend(["</body>", "</html>", ""])
    return "\n".join(parts)
