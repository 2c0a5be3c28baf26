"""Publication-quality map figures of a run's variables (cartopy, headless, offline).

One figure per variable: the grid drawn with a perceptually uniform colour map in a projection
suited to the extent (:mod:`.layout`), a colour bar with the variable's long name and unit,
labelled graticules, optional overlays (stations, candidate outlines, plate-age contours,
coastlines; :mod:`.overlays`) and a title and caption that name the melting model and the
ambient mantle potential temperature (:mod:`.captions`). Colours and colour limits come from
:mod:`.style`; categorical variables (``melting_regime``) get one legend entry per class and
no colour bar. Output variables are hatched where the run's validity flags mark cells as
computed beyond calibration, without a solidus crossing or with free water (:mod:`.flags`).

:func:`make_map_figure` runs these steps: open the variable and its colour limits
(:func:`_open_field`), size the page around the projected extent (:func:`_start_page`), place
the legend and wrap the text to measured widths (:func:`_compose_text`), fix the figure height
(:func:`_fix_size`), then draw the data layer, the overlays, the graticule, the colour bar and
the text. Figures are drawn on a :class:`matplotlib.backends.backend_agg.FigureCanvasAgg`
without pyplot, so no display is needed. The options of every drawing function (here and in
:mod:`.write`) are the fields of :class:`MapOptions`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import cartopy.crs as ccrs
import numpy as np
from matplotlib import colormaps
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties
from matplotlib.ticker import FixedLocator, MaxNLocator

from lidmelt.errors import InputError
from lidmelt.grids.rundir import FlagGrid, RunDir, open_run, read_flags
from lidmelt.products.maps import flags as fl
from lidmelt.products.maps import layout as lay
from lidmelt.products.maps import overlays as ov
from lidmelt.products.maps import page as pg
from lidmelt.products.maps.captions import map_caption, model_line
from lidmelt.products.maps.style import (
    NODATA_COLOR,
    ZERO_COLOR,
    VariableStyle,
    class_legend_handles,
    colour_limits,
    encode_categories,
    encode_classes,
    style_for,
    title_of,
    unit_label,
)

__all__ = [
    "MapInfo",
    "MapOptions",
    "as_run",
    "check_variable",
    "make_map_figure",
    "render_map",
    "resolve_options",
]


@dataclass(frozen=True, kw_only=True)
class MapOptions:
    """The options of :func:`make_map_figure`, :func:`.write.draw_map` and ``draw_run_maps``.

    Parameters
    ----------
    projection : str, cartopy Projection or None
        None or ``"auto"``: :func:`.layout.choose_projection`; a name:
        :func:`.layout.make_projection`.
    region : (west, east, south, north) or None
        Map extent in degrees; default the grid's extent.
    stations : path, Stations or None
        Points to overlay (:func:`.overlays.load_stations`).
    candidates : path, list of geometries or None
        Polygons (lon/lat) to outline (:func:`.overlays.load_candidates`).
    age_contours : bool (or a loaded plate-age DataArray)
        Draw contours of the run's ``plate_age_ma`` input (Ma) when the run has one.
    coastlines : path, bool or None
        A coastline file; None: look locally (:func:`.overlays.find_coastlines`) and warn if
        none; False: draw none, silently.
    flags : bool (or a loaded :class:`.flags.FlagGrid`)
        Hatch the flagged cells of output variables (:mod:`.flags`) when the run has a
        validity flag grid; False: draw no hatching.
    dpi : float
        Resolution, dots per inch; the figure is ``width_in * dpi`` pixels wide.
    width_in : float
        Figure width in inches; the height follows from the map's aspect.
    """

    projection: str | ccrs.Projection | None = None
    region: Sequence[float] | None = None
    stations: str | Path | ov.Stations | None = None
    candidates: str | Path | Sequence[Any] | None = None
    age_contours: bool | Any = False
    coastlines: str | Path | bool | None = None
    flags: bool | Any = True
    dpi: float = 150
    width_in: float = 8.0


@dataclass
class MapInfo:
    """What :func:`make_map_figure` drew; for callers, captions and tests.

    Attributes are plain values except ``ax``, ``colorbar`` and ``gridliner`` (the matplotlib
    and cartopy objects).
    """

    variable: str
    units: str
    long_name: str
    colorbar_label: str
    cmap: str
    vmin: float
    vmax: float
    extend: str
    projection: str
    region: lay.Region
    title: str
    caption: str
    coastlines: Path | None
    n_stations: int = 0
    n_candidates: int = 0
    age_levels: tuple[float, ...] = ()
    zero_color: str | None = None
    nodata_color: str = NODATA_COLOR
    decimation: int = 1
    categorical: bool = False
    flag_bits: tuple[int, ...] = ()
    legend_labels: tuple[str, ...] = ()
    ax: Any = field(default=None, repr=False)
    colorbar: Any = field(default=None, repr=False)
    gridliner: Any = field(default=None, repr=False)


def as_run(run: RunDir | str | Path) -> RunDir:
    """``run`` opened as a :class:`~lidmelt.grids.rundir.RunDir` (a RunDir is returned as is)."""
    return run if isinstance(run, RunDir) else open_run(run)


def check_variable(run: RunDir, variable: str) -> str:
    """Return ``variable`` if the run has it (an output or an aligned input), else raise.

    Raises
    ------
    InputError
        Naming the valid variables of the run.
    """
    valid = run.outputs + run.inputs
    if variable not in valid:
        msg = (
            f"variable {variable!r} is not in run {str(run.path)!r}. Valid names: "
            f"{', '.join(valid) or '(none)'}. Give one of them (--variable NAME), or leave "
            "the option out to map every output."
        )
        raise InputError(msg)
    return variable


def resolve_options(run: RunDir, opts: MapOptions) -> MapOptions:
    """Check the figure size, read the overlay files, find coastlines and the age grid, once.

    Returns options holding loaded stations and candidates, a coastline Path or False, the
    plate-age DataArray or False, and the validity flag grid or False; resolving them again
    changes nothing and warns no more.

    Raises
    ------
    InputError
        A size outside 1-40 in or 10-1200 dpi, or a missing or unreadable overlay file.
    """
    if not (math.isfinite(opts.width_in) and 1.0 <= opts.width_in <= 40.0):
        msg = f"width_in={opts.width_in!r} in: expected 1 to 40 inches (e.g. 3.5 or 7.2)."
        raise InputError(msg)
    if not (math.isfinite(opts.dpi) and 10.0 <= opts.dpi <= 1200.0):
        msg = f"dpi={opts.dpi!r}: expected 10 to 1200 dots per inch (e.g. 150 or 300)."
        raise InputError(msg)
    stations, candidates = opts.stations, opts.candidates
    if isinstance(stations, str | Path):
        stations = ov.load_stations(stations)
    if isinstance(candidates, str | Path):
        candidates = ov.load_candidates(candidates)
    coast = ov.resolve_coastlines(opts.coastlines)
    age = ov.load_age(run, opts.age_contours)
    flags = read_flags(run) if opts.flags is True else opts.flags
    return replace(
        opts,
        stations=stations,
        candidates=candidates,
        coastlines=coast if coast is not None else False,
        age_contours=age if age is not None else False,
        flags=flags if flags is not None else False,
    )


# --------------------------------------------------------------------------------------------
# The steps of a figure


@dataclass
class _Field:
    """The variable to draw, where, and with which colours."""

    variable: str
    da: Any
    src_crs: Any
    region: lay.Region
    region_given: bool
    proj: Any
    proj_name: str
    style: VariableStyle
    units: str
    long_name: str
    values: np.ndarray
    vmin: float
    vmax: float
    extend: str
    no_melt: np.ndarray | None
    flag_bits: tuple[int, ...] = ()
    flag_grid: Any = None


def _no_melt_mask(run: RunDir, values: np.ndarray, style: VariableStyle) -> np.ndarray | None:
    """Cells to draw as "no melting", or None when the variable has no such class."""
    if style.zero_is_no_melt:
        return np.isfinite(values) & (values <= 0.0)
    if style.nan_is_no_melt and "melt_thickness_km" in run.outputs:
        melt = np.asarray(run.open("melt_thickness_km").values, dtype=float)
        if melt.shape == values.shape:
            return np.isnan(values) & (melt == 0.0)
    return None


def _open_field(run: RunDir, variable: str, opts: MapOptions) -> _Field:
    """Open ``variable``, choose the region and projection, set its colour limits."""
    da = run.open(variable)
    src_crs = lay.data_crs(da)
    region_given = opts.region is not None
    region = lay.check_region(opts.region) if region_given else lay.grid_region(da)
    if isinstance(opts.projection, ccrs.Projection):
        proj, proj_name = opts.projection, type(opts.projection).__name__
    else:
        proj, proj_name = lay.make_projection(opts.projection, region)
    style = style_for(variable)
    values = np.asarray(da.values, dtype=float)
    in_view = values[lay.region_mask(da, region)] if region_given else values
    if style.categorical:
        vmin, vmax, extend = 0.0, float(len(style.classes) - 1), "neither"
    else:
        vmin, vmax, extend = colour_limits(in_view, zero_is_no_melt=style.zero_is_no_melt)
    flags = opts.flags
    hatch = variable in run.outputs and isinstance(flags, FlagGrid)
    bits = fl.marked_kinds(flags) if hatch and flags.values.shape == values.shape else ()
    return _Field(
        variable=variable,
        da=da,
        src_crs=src_crs,
        region=region,
        region_given=region_given,
        proj=proj,
        proj_name=proj_name,
        style=style,
        units=str(da.attrs.get("units", "")),
        long_name=title_of(variable, da.attrs),
        values=values,
        vmin=vmin,
        vmax=vmax,
        extend=extend,
        no_melt=_no_melt_mask(run, values, style),
        flag_bits=bits,
        flag_grid=flags if bits else None,
    )


def _start_page(f: _Field, opts: MapOptions) -> tuple[Figure, Any, pg.PageLayout, dict, bool]:
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
    return fig, ax, page, labels, global_view


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
    fig: Figure, page: pg.PageLayout, f: _Field, summary: dict, opts: MapOptions
) -> _Text:
    """Title, subtitle, colour-bar label and caption, wrapped to the page's widths."""
    renderer = fig.canvas.get_renderer()
    fs = page.fs

    def wrap(text: str, size: float, width: float, **kw: Any) -> list[str]:
        return pg.wrap_measured(text, renderer, FontProperties(size=size, **kw), width * fig.dpi)

    text_w = page.width_in - page.left - 0.1
    cbar_label = "" if f.style.categorical else f"{f.long_name} ({unit_label(f.units)})"
    caption = map_caption(
        summary,
        style=f.style,
        no_melt=f.no_melt is not None,
        extend=f.extend,
        proj_name=f.proj_name,
        age=opts.age_contours is not False,
        coast_path=opts.coastlines or None,
        flag_note=fl.flag_caption(opts.flags or None, f.flag_bits),
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


def _fix_size(
    fig: Figure, ax: Any, legend: Any, page: pg.PageLayout, text: _Text, *, top: bool, dpi: float
) -> None:
    """Set the figure height from the text and place the map axes and the legend."""
    page_kw = {"n_title": len(text.title), "n_subtitle": len(text.subtitle)}
    page_kw |= {"n_cbar": len(text.cbar), "n_caption": len(text.cap)}
    pg.page_rows(page, top_labels=top, dpi=dpi, **page_kw)
    fig.set_size_inches((round(page.width_in * dpi) + 0.01) / dpi, page.height)
    ax.set_position(page.rect(page.left, page.top_block + page.map_h, page.map_w, page.map_h))
    ax.set_facecolor(NODATA_COLOR)
    legend.set_bbox_to_anchor(
        (page.fx(page.leg_x), page.fy(page.leg_top)), transform=fig.transFigure
    )


def _draw_data(ax: Any, f: _Field, page: pg.PageLayout, dpi: float) -> int:
    """The data layer, thinned to about two cells per output pixel; return the stride."""
    step = lay.decimation(f.values.shape, (page.map_w * dpi, page.map_h * dpi))
    xe, ye = lay.cell_edges(f.da, step)
    if f.style.categorical:
        mesh, cmap_draw, norm_draw = encode_categories(f.values[::step, ::step], f.style.classes)
    else:
        cmap = colormaps[f.style.cmap].with_extremes(bad=NODATA_COLOR)
        no_melt = None if f.no_melt is None else f.no_melt[::step, ::step]
        mesh, cmap_draw, norm_draw = encode_classes(
            f.values[::step, ::step], cmap, f.vmin, f.vmax, no_melt
        )
    ax.pcolormesh(
        xe,
        ye,
        mesh,
        cmap=cmap_draw,
        norm=norm_draw,
        shading="flat",
        rasterized=True,
        transform=f.src_crs,
        zorder=1,
    )
    if f.flag_bits:
        fl.draw_flag_hatching(ax, f.flag_grid, f.flag_bits, da=f.da, src_crs=f.src_crs, step=step)
    return step


def _draw_overlays(ax: Any, opts: MapOptions, fs: float) -> tuple[float, ...]:
    """Coastlines, age contours, candidates and stations; return the age contour levels."""
    if opts.coastlines:
        ov.draw_coastlines(ax, opts.coastlines)
    age = opts.age_contours
    age_levels = ov.draw_age_contours(ax, age, fs) if age is not False else ()
    if opts.candidates:
        ov.draw_candidates(ax, opts.candidates)
    if opts.stations is not None and len(opts.stations.lon):
        ov.draw_stations(ax, opts.stations, fs)
    return age_levels


def _draw_graticule(
    ax: Any, f: _Field, page: pg.PageLayout, labels: dict, global_view: bool
) -> Any:
    """Graticule at about one line per inch of map, labelled per :func:`.layout.label_layout`."""
    region = f.region
    lon_step = lay.nice_step(region[1] - region[0], target=int(np.clip(page.map_w / 1.1, 3, 6)))
    lat_step = lay.nice_step(region[3] - region[2], target=int(np.clip(page.map_h / 1.0, 3, 6)))
    xlocs = lon_step * np.arange(math.ceil(-360.0 / lon_step), math.floor(720.0 / lon_step) + 1)
    ylocs = lat_step * np.arange(math.ceil(-90.0 / lat_step), math.floor(90.0 / lat_step) + 1)
    if global_view:  # the edge meridian would be labelled twice
        lon0 = float(f.proj.proj4_params.get("lon_0", 0.0))
        xlocs = xlocs[np.abs(((xlocs - lon0 + 180.0) % 360.0) - 180.0) < 180.0 - 1e-6]
    gl = ax.gridlines(
        crs=ccrs.PlateCarree(),
        draw_labels=labels["draw_labels"],
        x_inline=False,
        y_inline=labels["y_inline"],
        linewidth=0.5,
        color="0.2",
        alpha=0.6,
        linestyle=":",
        xlocs=FixedLocator(xlocs),
        ylocs=FixedLocator(ylocs),
        ylim=labels["ylim"],
        xlabel_style={"size": page.fs},
        ylabel_style={"size": page.fs},
        zorder=3,
    )
    gl.rotate_labels = False
    ax.spines["geo"].set_linewidth(0.8)
    return gl


def _draw_colorbar(fig: Figure, f: _Field, page: pg.PageLayout, lines: list[str]) -> Any:
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
    cbar.locator = MaxNLocator(nbins=6 if page.cb_w > 3.0 else 4)
    cbar.update_ticks()
    cbar.set_label("\n".join(lines), fontsize=fs, labelpad=3)
    cbar.outline.set_linewidth(0.6)
    return cbar


def _draw_text(fig: Figure, f: _Field, page: pg.PageLayout, text: _Text) -> Any:
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


def _legend_handles(f: _Field, opts: MapOptions, fs: float) -> list[Any]:
    """Legend entries: the classes of a categorical map, then overlays, then hatching."""
    has_stations = opts.stations is not None and len(opts.stations.lon) > 0
    handles = ov.legend_handles(
        no_melt=f.no_melt is not None,
        coastlines=bool(opts.coastlines),
        age=opts.age_contours is not False,
        candidates=bool(opts.candidates),
        stations=has_stations,
        fs=fs,
    )
    return class_legend_handles(f.style.classes) + handles + fl.flag_legend_handles(f.flag_bits)


def make_map_figure(
    run: RunDir | str | Path, variable: str, **options: Any
) -> tuple[Figure, MapInfo]:
    """Draw one variable of a run; return the figure (on an Agg canvas) and what was drawn.

    Parameters
    ----------
    run : RunDir, str or Path
        The run directory (see :mod:`lidmelt.grids.rundir`).
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
    f = _open_field(run, variable, opts)
    fig, ax, page, labels, global_view = _start_page(f, opts)
    legend = pg.place_legend(
        fig, _legend_handles(f, opts, page.fs), page, colorbar=not f.style.categorical
    )
    text = _compose_text(fig, page, f, run.summary, opts)
    _fix_size(fig, ax, legend, page, text, top=labels["top"], dpi=opts.dpi)
    step = _draw_data(ax, f, page, opts.dpi)
    age_levels = _draw_overlays(ax, opts, page.fs)
    gl = _draw_graticule(ax, f, page, labels, global_view)
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
        legend_labels=tuple(t.get_text() for t in legend.get_texts()),
        ax=ax,
        colorbar=cbar,
        gridliner=gl,
    )
    return fig, info
