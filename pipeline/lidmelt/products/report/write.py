"""Writing the run report: gather the maps, write the HTML page (and the PDF) atomically."""

from __future__ import annotations

import io
from collections.abc import Sequence
from pathlib import Path

from lidmelt.errors import InputError
from lidmelt.files import write_text_atomic
from lidmelt.grids.rundir import SUMMARY_NAME, RunDir, open_run
from lidmelt.products.maps import make_map_figure, require_file, resolve_coastlines
from lidmelt.products.report.content import MapImage
from lidmelt.products.report.html_page import render_html
from lidmelt.products.report.pdf import write_pdf

__all__ = ["REPORT_MAP_DPI", "REPORT_MAP_WIDTH_IN", "collect_maps", "write_report"]

#: Width (in) and resolution (dpi) of maps rendered for the report.
REPORT_MAP_WIDTH_IN = 8.0
REPORT_MAP_DPI = 100

_MIME = {".png": "image/png", ".svg": "image/svg+xml"}


def _given_map(item: str | Path) -> MapImage:
    """A map file the caller gave, checked to be an existing PNG or SVG."""
    path = require_file(
        item,
        what="map",
        fix="Give existing PNG or SVG files (e.g. from 'lidmelt map'), or leave maps out to "
        "draw them.",
    )
    mime = _MIME.get(path.suffix.lower())
    if mime is None:
        msg = (
            f"map file {str(path)!r} has suffix {path.suffix!r}; the report embeds "
            ".png or .svg images. Draw the maps with 'lidmelt map --format png'."
        )
        raise InputError(msg)
    return MapImage(path.stem, path.read_bytes(), mime, str(path))


def _rendered_map(run: RunDir, name: str, coast: Path | None) -> MapImage:
    """``name`` drawn afresh at the report's size, as PNG bytes."""
    fig, _ = make_map_figure(
        run,
        name,
        coastlines=coast if coast else False,
        dpi=REPORT_MAP_DPI,
        width_in=REPORT_MAP_WIDTH_IN,
    )
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=REPORT_MAP_DPI)
    return MapImage(name, buf.getvalue(), "image/png", "rendered for this report")


def collect_maps(
    run: RunDir, maps: Sequence[str | Path] | None, coastlines: str | Path | bool | None
) -> list[MapImage]:
    """The images to embed: given files, or fresh renders / up-to-date RUN_DIR/maps PNGs.

    A ``RUN_DIR/maps/<variable>.png`` newer than ``summary.json`` is reused; other outputs
    are drawn afresh, with one coastline note per report (not per map).
    """
    if maps is not None:
        return [_given_map(item) for item in maps]
    summary_mtime = (run.path / SUMMARY_NAME).stat().st_mtime
    coast: Path | None = None
    resolved = False
    images = []
    for name in run.outputs:
        existing = run.path / "maps" / f"{name}.png"
        if existing.is_file() and existing.stat().st_mtime >= summary_mtime:
            images.append(MapImage(name, existing.read_bytes(), "image/png", str(existing)))
            continue
        if not resolved:
            coast = resolve_coastlines(coastlines)
            resolved = True
        images.append(_rendered_map(run, name, coast))
    return images


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
    images = collect_maps(run, maps, coastlines)
    write_text_atomic(out, render_html(run, images))
    if pdf:
        write_pdf(run, images, out.with_suffix(".pdf"))
    return out
