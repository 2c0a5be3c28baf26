"""The interactive map page of a run (``maps/explore.html``): one self-contained HTML file.

Pan and zoom over the run's outputs, switch layers, and read under the cursor every layer's value
with its unit and the cell's validity flags; the workflow's plumes, stations, candidate outlines
and hotspot tracks are drawn over the layers when the run has them (:mod:`._explore_marks`).
The layers, values and flags are embedded in the page (:mod:`._explore_data`) and the page's
script is its own (:mod:`._explore_script`, a plain canvas, no library), so the page needs no
network: a Content-Security-Policy forbids any fetch (``default-src 'none'``; images from
``data:`` only), and it can be mailed or archived as it is. Every string from the run is
escaped: HTML text with :func:`html.escape`; the data as JSON whose ``<``, ``>`` and ``&`` are
written as ``\\u003c`` ... so no text can close the data block; the script sets run text with
``textContent`` only.
"""

from __future__ import annotations

import html
import json
from pathlib import Path
from typing import Any

from lidmelt import __version__
from lidmelt._errors import InputError
from lidmelt._files import write_text_atomic
from lidmelt.grids._rundir import RunDir
from lidmelt.products._maps import _explore_data as xd
from lidmelt.products._maps._explore_marks import marks_entry
from lidmelt.products._maps._explore_script import SCRIPT, STYLE
from lidmelt.products._maps._options import as_run

#: File name of the page in the run's maps folder.
EXPLORE_NAME = "explore.html"
#: The page's Content-Security-Policy: nothing from the network, images from data: URLs only.
CSP = (
    "default-src 'none'; img-src data:; style-src 'unsafe-inline'; "
    "script-src 'unsafe-inline'; connect-src 'none'; base-uri 'none'; form-action 'none'"
)


def embed_json(doc: Any) -> str:
    """``doc`` as JSON that is safe inside a ``<script type="application/json">`` block."""
    text = json.dumps(doc, separators=(",", ":"), allow_nan=False, ensure_ascii=False)
    for char, code in (("&", "\\u0026"), ("<", "\\u003c"), (">", "\\u003e")):
        text = text.replace(char, code)
    return text.replace("\u2028", "\\u2028").replace("\u2029", "\\u2029")


def page_data(
    run: RunDir, *, stations: Any = None, candidates: Any = None, budget: int = xd.CELL_BUDGET
) -> dict[str, Any]:
    """Everything the page shows: the grid frame, the layers, the flags and the marks."""
    if not run.outputs:
        msg = (
            f"run {str(run.shown_path)!r} lists no output variables; the map page has nothing "
            "to show. Run 'lidmelt run' again."
        )
        raise InputError(msg)
    frame = xd.grid_frame(run, len(run.outputs), budget)
    melt = xd.melt_of(run, frame)
    return {
        "frame": xd.frame_entry(frame),
        "layers": [xd.layer_entry(run, name, frame, melt) for name in run.outputs],
        "flags": xd.flag_entry(run, frame),
        "marks": marks_entry(run, frame, stations=stations, candidates=candidates),
    }


def _notes(run: RunDir, data: dict[str, Any]) -> list[str]:
    f = data["frame"]
    notes = [
        f"Grid {f['width']} x {f['height']} cells ({f['crs'] or 'no CRS recorded'}); "
        f"{len(data['layers'])} layers. Drag to pan, wheel or +/- to zoom; the table reads "
        "every layer at the cell under the pointer (the GeoTIFFs' values)."
    ]
    if f["stride"] > 1:
        s = f["stride"]
        notes.append(
            f"This grid is too large for one page: it is shown and read one cell per {s} x {s} "
            f"block ({f['cols']} x {f['rows']} cells; each the GeoTIFF cell at its block's "
            "centre, its value exact). Read any cell with 'lidmelt sample'."
        )
    return notes


def _controls(data: dict[str, Any]) -> str:
    boxes = [
        f'<label><input type="checkbox" id="show-{key}" checked> {key}</label>'
        for key in ("plumes", "stations", "candidates", "tracks")
        if data["marks"][key]
    ]
    return (
        '<div id="bar"><label for="layer">Layer</label> <select id="layer"></select> '
        '<button id="zoom-in" type="button">+</button>'
        '<button id="zoom-out" type="button">-</button>'
        '<button id="fit" type="button">Fit</button> ' + " ".join(boxes) + "</div>"
    )


def render_page(run: RunDir, data: dict[str, Any]) -> str:
    """The page's HTML (every string from the run escaped)."""
    name = run.shown_path.name
    notes = "".join(f'<p class="note">{html.escape(n)}</p>' for n in _notes(run, data))
    return "\n".join(
        [
            "<!DOCTYPE html>",
            '<html lang="en"><head><meta charset="utf-8">',
            f'<meta http-equiv="Content-Security-Policy" content="{CSP}">',
            '<meta name="viewport" content="width=device-width, initial-scale=1">',
            f"<title>{html.escape(name)}: lidmelt map explorer</title>",
            f"<style>{STYLE}</style></head><body>",
            f"<h1>{html.escape(name)}: map explorer</h1>",
            f'<p class="note">Run {html.escape(str(run.shown_path))}; lidmelt {__version__}.</p>',
            notes,
            _controls(data),
            '<div id="main"><div id="view"><canvas id="map"></canvas></div>',
            '<div id="side"><div id="legend"></div><p id="where"></p>',
            '<table><tbody id="values"></tbody></table>',
            '<p>Validity flags</p><ul id="flags"></ul></div></div>',
            f'<script type="application/json" id="lidmelt-data">{embed_json(data)}</script>',
            f"<script>{SCRIPT}</script>",
            "</body></html>",
        ]
    )


def write_explore_page(
    run: RunDir | str | Path,
    *,
    path: str | Path | None = None,
    stations: str | Path | None = None,
    candidates: str | Path | None = None,
) -> Path:
    """Write the interactive map page of a run (default ``RUN_DIR/maps/explore.html``).

    ``stations`` and ``candidates`` default to ``RUN_DIR/stations.csv`` and
    ``RUN_DIR/candidates.gpkg`` when present (as the report's). Written atomically.
    """
    run = as_run(run)
    out = Path(path) if path is not None else run.path / "maps" / EXPLORE_NAME
    data = page_data(run, stations=stations, candidates=candidates)
    return write_text_atomic(out, render_page(run, data))
