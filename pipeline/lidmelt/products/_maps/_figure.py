"""Publication-quality map figures of a run's variables (cartopy, headless, offline).

One figure per variable: the grid drawn with its style's colour map in a projection suited to
the extent (:mod:`._layout`), a colour bar with the variable's name and unit, graticules
labelled on two sides, overlays (the workflow's named plume centres, stations, ranked
candidate outlines, plate-age contours, coastlines; :mod:`._overlays`, :mod:`._marks`) and a
title and caption that say what the run used: lid, water, ambient mantle potential
temperature (:mod:`._captions`). Colours and colour limits come from :mod:`._style`; signed
quantities get a diverging scale and their zero contour (:mod:`._field`); categorical
variables (``melting_regime``) get one legend entry per class and no colour bar. Output
variables are hatched where the run's validity flags mark cells as computed beyond
calibration, without a solidus crossing or with free water (:mod:`._flags`). The map
background outside the grid has its own colour (:data:`._style.OUTSIDE_COLOR`), distinct from
nodata inside the grid.

:func:`make_map_figure` runs these steps: open the variable and its colour limits
(:func:`._field.open_field`), size the page around the projected extent (:func:`_start_page`),
place the legend and wrap the text to measured widths (:func:`_compose_text`), fix the figure
height (:func:`_fix_size`), then draw the data layer, the overlays, the graticule, the colour
bar and the text. Figures are drawn on a
:class:`matplotlib.backends.backend_agg.FigureCanvasAgg` without pyplot, so no display is
needed. The options of every drawing function (here and in :mod:`._write`) are the fields of
:class:`._options.MapOptions`.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

from matplotlib import colormaps
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from lidmelt._variables import ensemble_variable
from lidmelt.grids._rundir import RunDir
from lidmelt.products._maps import _flags as fl
from lidmelt.products._maps import _layout as lay
from lidmelt.products._maps import _marks as mk
from lidmelt.products._maps import _overlays as ov
from lidmelt.products._maps import _page as pg
from lidmelt.products._maps._captions import (
    CaptionOptions,
    lid_grid_share,
    map_caption,
    model_line,
)
from lidmelt.products._maps._field import Field, draw_data, open_field
from lidmelt.products._maps._labels import spread_labels
from lidmelt.products._maps._options import (
    MapInfo,
    MapOptions,
    as_run,
    check_variable,
    resolve_options,
)
from lidmelt.products._maps._probability import (
    contour_legend_handles,
    crossing_levels,
    mark_colorbar,
)
from lidmelt.products._maps._style import (
    NODATA_COLOR,
    OUTSIDE_COLOR,
    ZERO_COLOR,
    class_legend_handles,
    colorbar_label,
    end_ticks,
)


@dataclass
class _View:
    """The map axes as set up before drawing: labels, global view, what else it shows."""

    labels: dict
    global_view: bool
    outside: bool
    plumes: list


def _start_page(
    f: Field, opts: MapOptions, summary: dict
) -> tuple[Figure, Any, pg.PageLayout, _View]:
    """A figure with the map axes in its view; the page columns follow from its aspect."""
    fig = Figure(figsize=(opts.width_in, opts.width_in * 0.75), dpi=opts.dpi, facecolor="white")
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0.1, 0.3, 0.8, 0.6), projection=f.proj)
    box = None if f.region_given else lay.footprint(f.da, f.src_crs, f.proj)
    global_view = lay.set_view(ax, f.proj, f.proj_name, f.region, box)
    labels = lay.label_layout(f.proj, global_view, ax)
    x0, x1 = ax.get_xlim()
    y0, y1 = ax.get_ylim()
    aspect = abs(y1 - y0) / abs(x1 - x0)
    fs = lay.font_size(opts.width_in)
    page = pg.page_columns(opts.width_in, fs, right_labels=labels["right"], aspect=aspect)
    plumes = mk.plumes_of(summary) if opts.plumes else []
    view = _View(labels, global_view, lay.outside_grid(ax, f.da, f.src_crs), plumes)
    return fig, ax, page, view


@dataclass
class _Text:
    """The figure's text, wrapped to its measured widths."""

    title: list[str]
    subtitle: list[str]
    cbar_label: str
    cbar: list[str]
    caption: str
    cap: list[str]


def _compose_text(
    fig: Figure, page: pg.PageLayout, f: Field, run: RunDir, opts: MapOptions, view: _View
) -> _Text:
    """Title, subtitle, colour-bar label and caption, wrapped to the page's widths."""
    renderer = fig.canvas.get_renderer()
    fs = page.fs

    def wrap(text: str, size: float, width: float, **kw: Any) -> list[str]:
        return pg.wrap_measured(text, renderer, FontProperties(size=size, **kw), width * fig.dpi)

    text_w = page.width_in - page.left - 0.1
    summary = run.summary
    cbar_label = "" if f.style.categorical else colorbar_label(f.long_name, f.units)
    caption = map_caption(
        summary,
        CaptionOptions(
            style=f.style,
            no_melt=f.no_melt is not None,
            extend=f.extend,
            proj_name=f.proj_name,
            age=opts.age_contours is not False,
            coast_path=opts.coastlines or None,
            flag_note=_hatch_note(f, opts, summary),
            outside=view.outside,
            plumes=bool(view.plumes),
            grid_share=lid_grid_share(run),
            ensemble=ensemble_variable(f.variable) is not None,
            contours=crossing_levels(f.values, f.style.contours),
        ),
    )
    cap_w = max(page.map_w + page.right - 0.15, text_w - 0.1)
    return _Text(
        title=wrap(f.long_name, 1.2 * fs, text_w, weight="bold"),
        subtitle=wrap(model_line(summary), fs, text_w),
        cbar_label=cbar_label,
        cbar=wrap(cbar_label, fs, page.cb_w) if cbar_label else [],
        caption=caption,
        cap=wrap(caption, 0.85 * fs, cap_w),
    )


def _hatch_note(f: Field, opts: MapOptions, summary: dict[str, Any]) -> str:
    """The caption's sentences on the hatched cells: flagged, then mostly made beyond the
    calibrated pressure."""
    notes = (
        fl.flag_caption(opts.flags or None, f.flag_bits),
        fl.deep_caption(f.deep_cells, summary),
    )
    return " ".join(n for n in notes if n)


def _fix_size(
    fig: Figure, ax: Any, legend: Any, page: pg.PageLayout, text: _Text, *, top: bool, dpi: float
) -> None:
    """Set the figure height from the text and place the map axes and the legend."""
    page_kw = {"n_title": len(text.title), "n_subtitle": len(text.subtitle)}
    page_kw |= {"n_cbar": len(text.cbar), "n_caption": len(text.cap)}
    pg.page_rows(page, top_labels=top, dpi=dpi, **page_kw)
    fig.set_size_inches((round(page.width_in * dpi) + 0.01) / dpi, page.height)
    ax.set_position(page.rect(page.left, page.top_block + page.map_h, page.map_w, page.map_h))
    ax.set_facecolor(OUTSIDE_COLOR)
    legend.set_bbox_to_anchor(
        (page.fx(page.leg_x), page.fy(page.leg_top)), transform=fig.transFigure
    )


def _draw_overlays(ax: Any, opts: MapOptions, fs: float, view: _View) -> tuple[float, ...]:
    """Coastlines, age contours, candidates, plumes and stations; return the age levels."""
    if opts.coastlines:
        ov.draw_coastlines(ax, opts.coastlines)
    age = opts.age_contours
    age_levels = ov.draw_age_contours(ax, age, fs) if age is not False else ()
    labels = []
    if opts.candidates:
        ov.draw_candidates(ax, opts.candidates)
        labels += mk.draw_candidate_labels(
            ax, list(opts.candidates), tuple(opts.candidate_labels), fs
        )
    labels += mk.draw_plumes(ax, view.plumes, fs)
    if opts.stations is not None and len(opts.stations.lon):
        labels += ov.draw_stations(ax, opts.stations, fs)[0]
    spread_labels(ax, labels)  # no two labels overlap, none covers a named point
    return age_levels


def _draw_colorbar(fig: Figure, f: Field, page: pg.PageLayout, lines: list[str]) -> Any:
    """The horizontal colour bar under the map, with extend arrows and the wrapped label."""
    fs = page.fs
    cax = fig.add_axes(page.rect(page.left, page.cb_top + page.cbar_h, page.cb_w, page.cbar_h))
    cmap = colormaps[f.style.cmap].with_extremes(bad=NODATA_COLOR)
    cbar = fig.colorbar(
        ScalarMappable(norm=Normalize(vmin=f.vmin, vmax=f.vmax), cmap=cmap),
        cax=cax,
        orientation="horizontal",
        extend=f.extend,
        extendfrac=0.04,
    )
    cbar.ax.tick_params(labelsize=fs, length=2.5, width=0.6, pad=2)
    ticks, labels = end_ticks(f.vmin, f.vmax, 6 if page.cb_w > 3.0 else 4)
    cbar.set_ticks(ticks, labels=labels)
    cbar.set_label("\n".join(lines), fontsize=fs, labelpad=3)
    cbar.outline.set_linewidth(0.6)
    mark_colorbar(cbar, f.style.contours)
    return cbar


def _draw_text(fig: Figure, f: Field, page: pg.PageLayout, text: _Text) -> Any:
    """Title and subtitle above the map, the colour bar, the caption; return the colour bar.

    Categorical maps have no colour bar (None is returned).
    """
    fs, x = page.fs, page.fx(page.left)
    title_kw = {"fontsize": 1.2 * fs, "fontweight": "bold", "linespacing": 1.2}
    fig.text(x, page.fy(0.12), "\n".join(text.title), ha="left", va="top", **title_kw)
    sub_y = page.fy(0.12 + page.title_h)
    fig.text(x, sub_y, "\n".join(text.subtitle), ha="left", va="top", fontsize=fs, linespacing=1.25)
    cbar = None if f.style.categorical else _draw_colorbar(fig, f, page, text.cbar)
    cap_kw = {"fontsize": 0.85 * fs, "color": "0.15", "linespacing": 1.3}
    fig.text(x, page.fy(page.cap_top), "\n".join(text.cap), ha="left", va="top", **cap_kw)
    return cbar


def _legend_handles(
    f: Field, opts: MapOptions, fs: float, view: _View, summary: dict[str, Any]
) -> list[Any]:
    """Legend entries: the classes of a categorical map, then overlays, then hatching."""
    has_stations = opts.stations is not None and len(opts.stations.lon) > 0
    handles = ov.legend_handles(
        no_melt=f.no_melt is not None,
        coastlines=bool(opts.coastlines),
        age=opts.age_contours is not False,
        candidates=bool(opts.candidates),
        stations=has_stations,
        fs=fs,
        no_melt_label=f.style.no_melt_label,
    )
    if view.outside:
        outside = Patch(facecolor=OUTSIDE_COLOR, edgecolor="0.3", lw=0.5, label="outside the grid")
        handles.insert(1, outside)
    if f.style.diverging:
        handles.append(Line2D([], [], color="black", lw=1.0, label="0 (zero contour)"))
    handles += contour_legend_handles(crossing_levels(f.values, f.style.contours))
    if view.plumes:
        handles.append(mk.plume_legend_handle(fs))
    hatched = fl.flag_legend_handles(f.flag_bits) + fl.deep_legend_handles(f.deep_cells, summary)
    return class_legend_handles(f.style.classes) + handles + hatched


def make_map_figure(
    run: RunDir | str | Path, variable: str, **options: Any
) -> tuple[Figure, MapInfo]:
    """Draw one variable of a run; return the figure (on an Agg canvas) and what was drawn.

    Parameters
    ----------
    run : RunDir, str or Path
        The run directory (see :mod:`lidmelt.grids._rundir`).
    variable : str
        An output variable, or an aligned input (e.g. ``plate_age_ma``).
    **options
        The fields of :class:`MapOptions`: projection, region, stations, candidates,
        age_contours, coastlines, dpi, width_in.

    Returns
    -------
    fig : matplotlib.figure.Figure
    info : MapInfo

    Raises
    ------
    InputError
        Unknown variable or projection, bad region, missing or unreadable overlay files, or
        a non-positive size.
    """
    return render_map(as_run(run), variable, MapOptions(**options))


def render_map(run: RunDir, variable: str, opts: MapOptions) -> tuple[Figure, MapInfo]:
    """:func:`make_map_figure` with the options as one :class:`MapOptions`."""
    ov.forbid_downloads()
    check_variable(run, variable)
    opts = resolve_options(run, opts)
    f = open_field(run, variable, opts)
    fig, ax, page, view = _start_page(f, opts, run.summary)
    legend = pg.place_legend(
        fig,
        _legend_handles(f, opts, page.fs, view, run.summary),
        page,
        colorbar=not f.style.categorical,
    )
    text = _compose_text(fig, page, f, run, opts, view)
    _fix_size(fig, ax, legend, page, text, top=view.labels["top"], dpi=opts.dpi)
    step = draw_data(ax, f, (page.map_w * opts.dpi, page.map_h * opts.dpi), fs=page.fs)
    age_levels = _draw_overlays(ax, opts, page.fs, view)
    gl = lay.draw_graticule(
        ax,
        f.proj,
        f.region,
        size_in=(page.map_w, page.map_h),
        fs=page.fs,
        labels=view.labels,
        global_view=view.global_view,
    )
    cbar = _draw_text(fig, f, page, text)
    info = MapInfo(
        variable=variable,
        units=f.units,
        long_name=f.long_name,
        colorbar_label=cbar.ax.get_xlabel() if cbar is not None else "",
        cmap=f.style.cmap,
        vmin=f.vmin,
        vmax=f.vmax,
        extend=f.extend,
        projection=f.proj_name,
        region=f.region,
        title=f.long_name,
        caption=text.caption,
        coastlines=opts.coastlines or None,
        n_stations=len(opts.stations.lon) if opts.stations is not None else 0,
        n_candidates=len(opts.candidates) if opts.candidates else 0,
        age_levels=age_levels,
        zero_color=ZERO_COLOR if f.no_melt is not None else None,
        decimation=step,
        categorical=f.style.categorical,
        flag_bits=f.flag_bits,
        deep_hatched_cells=0 if f.deep_cells is None else int(f.deep_cells.sum()),
        plumes=tuple(p.name for p in view.plumes),
        zero_contour=f.style.diverging,
        contour_levels=f.contours,
        outside_grid=view.outside,
        legend_labels=tuple(t.get_text() for t in legend.get_texts()),
        ax=ax,
        colorbar=cbar,
        gridliner=gl,
    )
    return fig, info
