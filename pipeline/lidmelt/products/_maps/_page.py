"""The page of a map figure: where the map, colour bar, legend and text go, in inches.

The layout is computed before anything is drawn: the map width follows from the figure width
minus the label margins, its height from the projected extent's aspect (:func:`page_columns`);
the legend is measured as rendered (:func:`place_legend`), and the blocks below the map
(colour bar, legend, caption) get the height of their wrapped text (:func:`page_rows`,
:func:`wrap_measured`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

#: One typographic point in inches.
PT_IN = 1.0 / 72.0

#: Legend options (the legend sits right of the colour bar, or below it on narrow figures).
_LEGEND_KW = {
    "loc": "upper left",
    "frameon": False,
    "handlelength": 1.6,
    "handleheight": 0.9,
    "borderaxespad": 0.0,
    "borderpad": 0.0,
    "columnspacing": 1.2,
    "labelspacing": 0.35,
}


@dataclass
class PageLayout:
    """Positions on a map figure in inches (x from the left, y from the top).

    Filled in three steps: :func:`page_columns` (map width and height), :func:`place_legend`
    (colour-bar width, legend position) and :func:`page_rows` (every block's top and the
    figure height). ``colorbar`` is False for categorical maps: the legend then takes the
    colour bar's place.
    """

    width_in: float
    fs: float
    left: float
    right: float
    map_w: float
    map_h: float
    cb_w: float = 0.0
    leg_x: float = 0.0
    leg_h: float = 0.0
    legend_below: bool = False
    colorbar: bool = True
    title_h: float = 0.0
    top_block: float = 0.0
    cbar_h: float = 0.0
    cb_top: float = 0.0
    leg_top: float = 0.0
    cap_top: float = 0.0
    height: float = 0.0

    def fx(self, inches: float) -> float:
        """Figure fraction of ``inches`` from the left."""
        return inches / self.width_in

    def fy(self, inches_from_top: float) -> float:
        """Figure fraction (from the bottom) of ``inches_from_top``."""
        return 1.0 - inches_from_top / self.height

    def rect(
        self, left: float, bottom: float, width: float, height: float
    ) -> tuple[float, float, float, float]:
        """Axes rectangle in figure fractions; ``bottom`` in inches from the top."""
        return self.fx(left), self.fy(bottom), self.fx(width), height / self.height


def page_columns(width_in: float, fs: float, *, right_labels: bool, aspect: float) -> PageLayout:
    """Horizontal layout: latitude labels on the left, the map, a narrow right margin.

    ``aspect`` is the projected extent's height over its width; regions taller than 1.15 times
    their width get a narrower map, centred.
    """
    left = 0.3 + 5.0 * 0.6 * fs * PT_IN
    right = left if right_labels else 0.35
    map_w = width_in - left - right
    map_h = map_w * aspect
    if map_h > 1.15 * map_w:  # tall regions: a narrower map, centred
        map_h = 1.15 * map_w
        map_w = map_h / aspect
        left += (width_in - left - right - map_w) / 2.0
    return PageLayout(width_in=width_in, fs=fs, left=left, right=right, map_w=map_w, map_h=map_h)


def place_legend(fig: Any, handles: list[Any], page: PageLayout, *, colorbar: bool = True) -> Any:
    """Add the legend right of the colour bar (2 columns if they fit), or below it.

    The colour bar takes the left 55 % of the map width; the legend is measured as rendered,
    and on narrow figures it goes under a full-width colour bar. Without a colour bar
    (``colorbar=False``, categorical maps) the legend starts at the map's left edge. Sets
    ``page.cb_w``, ``leg_x``, ``leg_h``, ``legend_below`` and ``colorbar``; returns the
    legend (anchored later).
    """
    page.colorbar = colorbar
    page.cb_w = 0.55 * page.map_w if colorbar else 0.0
    page.leg_x = page.left + page.cb_w + (0.3 if colorbar else 0.0)
    leg_avail = page.width_in - page.leg_x - 0.1
    renderer = fig.canvas.get_renderer()
    legend = None
    for ncol in (2, 1) if len(handles) > 3 else (1,):
        if legend is not None:
            legend.remove()
        legend = fig.legend(handles=handles, ncol=ncol, fontsize=0.9 * page.fs, **_LEGEND_KW)
        box = legend.get_window_extent(renderer)
        leg_w, page.leg_h = box.width / fig.dpi, box.height / fig.dpi
        if leg_w <= leg_avail:
            break
    page.legend_below = leg_w > leg_avail
    if page.legend_below:
        page.cb_w = page.map_w
        page.leg_x = page.left
    return legend


def page_rows(
    page: PageLayout,
    *,
    n_title: int,
    n_subtitle: int,
    n_cbar: int,
    n_caption: int,
    top_labels: bool,
    dpi: float,
) -> None:
    """Vertical layout from the number of text lines in each block; sets the figure height.

    Blocks from the top: title and subtitle, (top graticule labels), the map, the bottom
    graticule labels, the colour bar with its label and the legend, the caption.
    """
    fs = page.fs
    cap_fs = 0.85 * fs
    page.title_h = n_title * 1.2 * fs * PT_IN * 1.3
    page.top_block = 0.12 + page.title_h + n_subtitle * 1.35 * fs * PT_IN + 0.1
    if top_labels:
        page.top_block += 0.1 + 1.35 * fs * PT_IN
    xlabel_block = 0.1 + 1.35 * fs * PT_IN
    page.cbar_h = max(0.1, 1.1 * fs * PT_IN) if page.colorbar else 0.0
    cbar_text_h = 0.05 + 1.35 * fs * PT_IN + n_cbar * 1.3 * fs * PT_IN if page.colorbar else 0.0
    page.cb_top = page.top_block + page.map_h + xlabel_block + 0.16
    if page.legend_below:
        page.leg_top = page.cb_top + page.cbar_h + cbar_text_h + 0.12
        below_end = page.leg_top + page.leg_h
    else:
        page.leg_top = page.cb_top - 0.04
        below_end = max(page.cb_top + page.cbar_h + cbar_text_h, page.leg_top + page.leg_h)
    page.cap_top = below_end + 0.14
    height = page.cap_top + n_caption * 1.3 * cap_fs * PT_IN + 0.12
    # Agg truncates the size in pixels: aim a hair above whole pixels so that the image is
    # exactly round(width_in * dpi) pixels wide (3.3 in x 300 dpi would otherwise give 989).
    page.height = (math.ceil(height * dpi) + 0.01) / dpi


def wrap_measured(text: str, renderer: Any, prop: Any, width_px: float) -> list[str]:
    """Greedy word wrap of ``text`` to lines no wider than ``width_px`` as rendered."""
    lines: list[str] = []
    for paragraph in text.split("\n"):
        current = ""
        for word in paragraph.split():
            trial = f"{current} {word}" if current else word
            w, _, _ = renderer.get_text_width_height_descent(trial, prop, ismath=False)
            if current and w > width_px:
                lines.append(current)
                current = word
            else:
                current = trial
        lines.append(current)
    return lines
