"""The data layer of a map: the variable, its colour limits, its no-melt cells, its mesh.

Shared by the one-variable figure (:mod:`._figure`) and the overview page (:mod:`._overview`):
:func:`open_field` opens a variable of a run with its style and colour limits,
:func:`draw_data` draws it on a cartopy axes (thinned to about two cells per output pixel),
and :func:`draw_zero_contour` draws the zero line of a signed (diverging) variable; the
labelled contours of a probability are :func:`._probability.draw_level_contours`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import cartopy.crs as ccrs
import numpy as np
from matplotlib import colormaps

from lidmelt.grids._rundir import FlagGrid, RunDir
from lidmelt.products._maps import _flags as fl
from lidmelt.products._maps import _layout as lay
from lidmelt.products._maps._options import MapOptions
from lidmelt.products._maps._probability import draw_level_contours, fixed_limits
from lidmelt.products._maps._style import (
    NODATA_COLOR,
    VariableStyle,
    colour_limits,
    encode_categories,
    encode_classes,
    style_for,
    title_of,
)


@dataclass
class Field:
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
    deep_cells: np.ndarray | None = None  # hatched: melt mostly made beyond calibration
    contours: tuple[float, ...] = ()  # the labelled contour levels drawn (set by draw_data)


def no_melt_mask(run: RunDir, values: np.ndarray, style: VariableStyle) -> np.ndarray | None:
    """Cells to draw as "no melting", or None when the variable has no such class.

    For a melt amount, the cells that are 0 or below the variable's ``negligible_below``
    (:meth:`._style.VariableStyle.melting`). For a variable that is undefined where nothing
    melts (onset depth, onset pressure, mean melt pressure), every cell with
    ``melt_thickness_km == 0`` is "no melting", whether the file holds NaN or a value there
    (runs before issue 20 kept an onset where the solidus is crossed beneath the lid, but
    nothing melts): the map never shows such a value as data. For the times of a history's
    peaks, a NaN cell where the run has data is "no melting" (it never melted, or the melt the
    anomaly added never reached the threshold).
    """
    wanted = style.nan_is_no_melt or style.nan_with_data_is_no_melt
    melt = None
    if wanted and not style.zero_is_no_melt and "melt_thickness_km" in run.outputs:
        melt = np.asarray(run.open("melt_thickness_km").values, dtype=float)
    return no_melt_cells(values, style, melt)


def no_melt_cells(
    values: np.ndarray, style: VariableStyle, melt: np.ndarray | None
) -> np.ndarray | None:
    """The "no melting" cells of :func:`no_melt_mask`, given the run's ``melt_thickness_km``
    on the same cells (or None when the run has none)."""
    if style.zero_is_no_melt:
        return np.isfinite(values) & ~style.melting(values)
    wanted = style.nan_is_no_melt or style.nan_with_data_is_no_melt
    if wanted and melt is not None and melt.shape == values.shape:
        if style.nan_with_data_is_no_melt:
            return np.isnan(values) & np.isfinite(melt)
        return melt == 0.0
    return None


def field_limits(style: VariableStyle, shown: np.ndarray) -> tuple[float, float, str]:
    """Colour limits and colour-bar ``extend`` of the cells ``shown`` (no-melt cells NaN
    except for the melt amounts), as the style sets them (:func:`._style.colour_limits`)."""
    if style.categorical:
        return 0.0, float(len(style.classes) - 1), "neither"
    if style.limits is not None:
        return fixed_limits(shown, style.limits)
    return colour_limits(
        shown,
        zero_is_no_melt=style.zero_is_no_melt,
        diverging=style.diverging,
        percentiles=style.percentiles,
        negligible_below=style.negligible_below,
    )


def open_field(run: RunDir, variable: str, opts: MapOptions) -> Field:
    """Open ``variable``, choose the region and projection, set its colour limits.

    The limits follow the style (:func:`._style.colour_limits`) over the cells in view that
    are not "no melting".
    """
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
    no_melt = no_melt_mask(run, values, style)
    shown = values
    if no_melt is not None and not style.zero_is_no_melt:
        shown = np.where(no_melt, np.nan, values)
    in_view = shown[lay.region_mask(da, region)] if region_given else shown
    vmin, vmax, extend = field_limits(style, in_view)
    flags = opts.flags
    hatch = variable in run.outputs and isinstance(flags, FlagGrid)
    same = hatch and flags.values.shape == values.shape
    bits = fl.marked_kinds(flags, variable) if same else ()
    return Field(
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
        no_melt=no_melt,
        flag_bits=bits,
        flag_grid=flags if bits else None,
        deep_cells=None
        if opts.flags is False
        else fl.deep_share_cells(run, variable, values.shape),
    )


def draw_data(ax: Any, f: Field, map_px: tuple[float, float], *, fs: float = 8.0) -> int:
    """The data layer, thinned to about two cells per output pixel; return the stride.

    ``map_px`` is the map's size in output pixels (width, height); ``fs`` the font size (pt)
    of contour labels.
    """
    step = lay.decimation(f.values.shape, map_px)
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
    if f.deep_cells is not None:
        fl.draw_hatching(ax, f.deep_cells, fl.DEEP_HATCH, da=f.da, src_crs=f.src_crs, step=step)
    if f.style.diverging:
        draw_zero_contour(ax, f)
    if f.style.contours:
        f.contours = draw_level_contours(ax, f.da, f.values, f.src_crs, f.style.contours, fs)
    return step


def draw_zero_contour(ax: Any, f: Field) -> bool:
    """The zero line of a signed variable (black over a white halo); True if drawn."""
    values = f.values
    finite = values[np.isfinite(values)]
    if not finite.size or finite.min() >= 0.0 or finite.max() <= 0.0:
        return False
    step = max(1, int(np.ceil(max(values.shape) / 800)))
    xs, ys = f.da["x"].values[::step], f.da["y"].values[::step]
    for colour, width in (("white", 2.2), ("black", 1.0)):
        ax.contour(
            xs,
            ys,
            values[::step, ::step],
            levels=[0.0],
            colors=colour,
            linewidths=width,
            transform=f.src_crs,
            zorder=3,
        )
    return True
