"""Writing the run report: gather the maps, write the HTML page (and the PDF) atomically."""

from __future__ import annotations

import io
from collections.abc import Sequence
from pathlib import Path

from lidmelt._errors import InputError
from lidmelt._files import write_text_atomic
from lidmelt.grids._rundir import SUMMARY_NAME, RunDir, open_run
from lidmelt.products._ensemble import is_ensemble_output
from lidmelt.products._maps._figure import make_map_figure
from lidmelt.products._maps._overlays import require_file, resolve_coastlines
from lidmelt.products._maps._write import default_map_variables
from lidmelt.products._report._assess import assess_section
from lidmelt.products._report._blocks import MapImage
from lidmelt.products._report._ensemble import ensemble_section
from lidmelt.products._report._history import history_section
from lidmelt.products._report._html_page import render_html
from lidmelt.products._report._pdf import write_pdf
from lidmelt.products._report._sites import find_site_files, sites_map, sites_section

#: Inputs mapped in the report, when the run has them.
INPUT_MAPS = ("plate_age_ma", "lid_thickness_km", "thermal_anomaly_k")

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


def _shown(path: Path) -> str:
    """A figure of the run directory named relative to it (``maps/x.png``): a run draws its
    report in a staging folder that is renamed afterwards, so no absolute path is kept."""
    return f"{path.parent.name}/{path.name}"


def collect_maps(
    run: RunDir, maps: Sequence[str | Path] | None, coastlines: str | Path | bool | None
) -> list[MapImage]:
    """The images to embed: given files, or fresh renders / up-to-date RUN_DIR/maps PNGs.

    In order: the overview page (``RUN_DIR/maps/overview.png``, when it is newer than
    ``summary.json``), the outputs (those :func:`~lidmelt.products._maps.default_map_variables`
    maps, but the maps over an ensemble's members: its section shows the probability), then
    the input maps (:data:`INPUT_MAPS` the run has). A
    ``RUN_DIR/maps/<variable>.png`` newer than ``summary.json`` is reused; other maps are drawn
    afresh, with one coastline note per report (not per map).
    """
    if maps is not None:
        return [_given_map(item) for item in maps]
    summary_mtime = (run.path / SUMMARY_NAME).stat().st_mtime
    coast: Path | None = None
    resolved = False
    images = []
    overview = run.path / "maps" / "overview.png"
    if overview.is_file() and overview.stat().st_mtime >= summary_mtime:
        images.append(MapImage("overview", overview.read_bytes(), "image/png", _shown(overview)))
    names = [n for n in default_map_variables(run) if not is_ensemble_output(n)]
    names += [v for v in INPUT_MAPS if v in run.inputs]
    for name in names:
        existing = run.path / "maps" / f"{name}.png"
        if existing.is_file() and existing.stat().st_mtime >= summary_mtime:
            images.append(MapImage(name, existing.read_bytes(), "image/png", _shown(existing)))
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
    stations: str | Path | None = None,
    candidates: str | Path | None = None,
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
        For maps drawn afresh; as in :func:`lidmelt.products._maps.make_map_figure`.
    stations, candidates : path or None
        A station file and a screening result (``lidmelt screen``); default
        ``RUN_DIR/stations.csv`` and ``RUN_DIR/candidates.gpkg`` when present. They add a
        map with both overlaid and their tables (:mod:`._sites`).

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
    station_file, candidate_file = find_site_files(run, stations, candidates)
    for given, what in ((station_file, "stations"), (candidate_file, "candidates")):
        if given is not None:
            require_file(given, what=what, fix=f"Give an existing file with --{what}.")
    extra = sites_section(run, station_file, candidate_file)
    site_map = sites_map(
        run, station_file, candidate_file, dpi=REPORT_MAP_DPI, width_in=REPORT_MAP_WIDTH_IN
    )
    if site_map is not None:
        images.append(site_map)
    ensemble = ensemble_section(run, dpi=REPORT_MAP_DPI, width_in=REPORT_MAP_WIDTH_IN)
    history = history_section(run, dpi=REPORT_MAP_DPI, width_in=REPORT_MAP_WIDTH_IN)
    scored = assess_section(run, dpi=REPORT_MAP_DPI)
    extra_sections = [s for s in (ensemble, history, scored, extra) if s is not None]
    write_text_atomic(out, render_html(run, images, extra_sections))
    if pdf:
        write_pdf(run, images, out.with_suffix(".pdf"), extra_sections)
    return out
