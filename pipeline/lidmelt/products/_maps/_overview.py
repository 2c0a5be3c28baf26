"""One overview page for a proposal: the inputs and the results of a run as panels.

Panels, in reading order (those the run has): (a) plate age and (b) thermal anomaly, the
inputs; (c) melt thickness (the anomaly melt thickness where the run has it: the melt the
thermal anomaly adds), (d) onset depth, (e) excess to melt (the melting regime where the run
has no excess), (f) top of the melting column, the results. Every panel uses the variable's
own style (:mod:`._style`: colour map, limits, no-melt and nodata colours, zero contour), the
same projection (:func:`._layout.make_projection` of the grid's extent) and the plume centres
of the workflow; each has its colour bar under it. An ensemble run adds two panels: (g) its
probability of melting (:func:`lidmelt.products._ensemble.run_probability`, with the 0.5
contour) and (h) the spread of the melt the anomaly adds over the members, its 90th minus its
10th percentile (the widest pair of percentiles the run wrote), drawn like a melt amount (white:
every member alike). One caption under the panels says what the run used and what the colours
mean. :func:`draw_overview` writes it as PNG (300 dpi) and as vector PDF and SVG (the data
layers are embedded images; text and lines stay vector); the PNG carries :func:`run_stamp` in
its metadata (``lidmelt-run``), so a copy of it (the README's) can be checked against a fresh
run of the same workflow.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
from matplotlib import colormaps
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties

from lidmelt._errors import InputError
from lidmelt._variables import ordinal, parse_ensemble_name, percentile_name
from lidmelt.grids._rundir import RunDir
from lidmelt.products import _ensemble as ens
from lidmelt.products._maps import _flags as fl
from lidmelt.products._maps import _layout as lay
from lidmelt.products._maps import _marks as mk
from lidmelt.products._maps import _overlays as ov
from lidmelt.products._maps import _page as pg
from lidmelt.products._maps._captions import lid_grid_share, model_line, run_basis
from lidmelt.products._maps._field import Field, draw_data, open_field
from lidmelt.products._maps._labels import spread_labels
from lidmelt.products._maps._options import MapOptions, as_run, resolve_options
from lidmelt.products._maps._style import (
    OUTSIDE_COLOR,
    class_legend_handles,
    colorbar_label,
    colour_limits,
    end_ticks,
)
from lidmelt.products._maps._write import save_figure

#: Panel choices in order: each panel shows the first variable of its tuple the run has.
OVERVIEW_PANELS = (
    ("plate_age_ma", "lid_thickness_km"),
    ("thermal_anomaly_k",),
    ("anomaly_melt_thickness_km", "melt_thickness_km"),
    ("onset_depth_km",),
    ("excess_to_melt_k", "melting_regime"),
    ("melting_top_km",),
)
#: Height (in) above each panel for its two-line title.
_TITLE_H = 0.36
#: Resolution of the PNG overview (dots per inch).
OVERVIEW_DPI = 300


@dataclass
class OverviewInfo:
    """What :func:`make_overview_figure` drew (for callers and tests)."""

    variables: tuple[str, ...]
    titles: tuple[str, ...]
    colorbar_labels: tuple[str, ...]
    limits: tuple[tuple[float, float], ...]
    projection: str
    caption: str
    plumes: tuple[str, ...] = ()
    axes: list[Any] = field(default_factory=list, repr=False)


def _panel_variables(run: RunDir) -> list[str]:
    have = set(run.outputs) | set(run.inputs)
    chosen = [next((v for v in choice if v in have), None) for choice in OVERVIEW_PANELS]
    names = [v for v in chosen if v is not None]
    if not names:
        msg = (
            f"run {str(run.path)!r} has none of the overview's variables "
            f"({', '.join(v for c in OVERVIEW_PANELS for v in c)}). Run 'lidmelt run' again."
        )
        raise InputError(msg)
    return names


#: The output whose spread over an ensemble's members the overview shows.
SPREAD_OF = "anomaly_melt_thickness_km"


def _spread_field(run: RunDir, opts: MapOptions) -> Field | None:
    """The spread over the members of :data:`SPREAD_OF`: its highest minus its lowest
    percentile map (90th minus 10th by default); None without two percentiles."""
    qs = sorted(
        p.percentile
        for n in run.outputs
        if (p := parse_ensemble_name(n)) and p.kind == "percentile" and p.base == SPREAD_OF
    )
    if len(qs) < 2:
        return None
    low, high = (open_field(run, percentile_name(SPREAD_OF, q), opts) for q in (qs[0], qs[-1]))
    values = high.values - low.values
    vmin, vmax, extend = colour_limits(values, zero_is_no_melt=True)
    long_name = (
        f"Spread of the melt the anomaly adds over the ensemble ({ordinal(qs[-1])} minus "
        f"{ordinal(qs[0])} percentile)"
    )
    alike = np.isfinite(values) & (values <= 0.0)  # drawn white: every member alike
    return replace(high, variable=f"{SPREAD_OF}_spread", values=values, vmin=vmin, vmax=vmax,
                   extend=extend, long_name=long_name, no_melt=alike, flag_bits=(),
                   flag_grid=None)  # fmt: skip


def _ensemble_fields(run: RunDir, opts: MapOptions) -> list[Field]:
    """The ensemble's panels (module notes): its probability of melting and the spread."""
    fields = []
    probability = ens.run_probability(run)
    if probability is not None:
        fields.append(replace(open_field(run, probability, opts), flag_bits=(), flag_grid=None))
    spread = _spread_field(run, opts)
    return [*fields, spread] if spread is not None else fields


def _colorbar(fig: Figure, rect: tuple, f: Field, fs: float) -> str:
    """A horizontal colour bar in ``rect`` (figure fractions); return its label."""
    cax = fig.add_axes(rect)
    if f.style.categorical:
        cax.set_axis_off()
        cax.legend(
            handles=class_legend_handles(f.style.classes),
            loc="upper left",
            fontsize=0.85 * fs,
            frameon=False,
            borderaxespad=0.0,
        )
        return ""
    cbar = fig.colorbar(
        ScalarMappable(norm=Normalize(f.vmin, f.vmax), cmap=colormaps[f.style.cmap]),
        cax=cax,
        orientation="horizontal",
        extend=f.extend,
        extendfrac=0.04,
    )
    ticks, labels = end_ticks(f.vmin, f.vmax, 5)
    cbar.set_ticks(ticks, labels=labels)
    cbar.ax.tick_params(labelsize=0.85 * fs, length=2, width=0.5, pad=1.5)
    label = colorbar_label(f.long_name, f.units)
    width_px = rect[2] * fig.get_figwidth() * fig.dpi  # long labels wrap to the bar's width
    lines = pg.wrap_measured(
        label, fig.canvas.get_renderer(), FontProperties(size=0.9 * fs), width_px
    )
    cbar.set_label("\n".join(lines), fontsize=0.9 * fs, labelpad=2)
    cbar.outline.set_linewidth(0.5)
    return label


def _ensemble_caption(run: RunDir, fields: list[Field], first: int) -> str:
    """What the ensemble panels (from letter index ``first``) show."""
    entry = ens.ensemble_entry(run) or {}
    parts = []
    for k, f in enumerate(fields[first:], start=first):
        letter = chr(ord("a") + k)
        if f.style.contours:
            parts.append(
                f"({letter}) over the {entry.get('members', '?')} members of the ensemble, "
                "among those with a value in the cell (black line: 0.5, where it is crossed)"
            )
        else:
            parts.append(
                f"({letter}) where the members disagree on the melt the anomaly adds (white: "
                "every member alike)"
            )
    varied = ", ".join(entry.get("vary") or {}) or "nothing"
    return f"Ensemble panels: {'; '.join(parts)}; the members vary {varied}."


def _caption(
    run: RunDir, proj_name: str, outside: bool, fields: list[Field], deterministic: int
) -> str:
    summary = run.summary
    parts = [run_basis(summary, lid_grid_share(run))]
    if len(fields) > deterministic:
        parts.append(_ensemble_caption(run, fields, deterministic))
    parts.append(
        "Colour limits per panel as on the single maps: melt amounts from 0 to the 99.5th "
        "percentile of the melting cells, depths and the thermal anomaly over their whole "
        "range, others from the 2nd to 98th percentiles; signed quantities diverging about 0 "
        "(black line: 0); the ends of each colour bar are labelled."
    )
    grey = "White: no melting (undefined variables are not drawn there)"
    for k, f in enumerate(fields):
        if f.no_melt is not None and f.style.no_melt_label != "no melting":
            grey += f", in ({chr(ord('a') + k)}) {f.style.no_melt_label}"
    grey += "; grey: no data"
    parts.append(grey + ("; pale blue-grey: outside the grid." if outside else "."))
    if mk.plumes_of(summary):
        parts.append("Rings: plume centres named in the workflow.")
    if any(f.flag_bits for f in fields):
        parts.append("Hatched: cells the validity flags mark (see the single maps).")
    for k, f in enumerate(fields):  # the melt panel: cells made mostly beyond calibration
        parts.append(fl.deep_caption(f.deep_cells, summary, chr(ord("a") + k)))
    parts.append(f"Projection: {proj_name}. {model_line(summary)}.")
    return " ".join(p for p in parts if p)


@dataclass
class _Grid:
    """Panel positions in inches (x from the left, y from the top of the page)."""

    width_in: float
    fs: float
    pw: float
    ph: float
    left: float = 0.5
    gap: float = 0.6
    top: float = 0.5
    row_h: float = 0.0
    height: float = 10.0

    def panel(self, k: int) -> tuple[float, float]:
        """Left edge and top of panel ``k`` (two columns)."""
        row, col = divmod(k, 2)
        return self.left + col * (self.pw + self.gap), self.top + row * self.row_h

    def rect(self, x: float, y_top: float, w: float, h: float) -> tuple[float, ...]:
        """Axes rectangle in figure fractions of a box ``w`` x ``h`` whose top is ``y_top``."""
        return (
            x / self.width_in,
            1.0 - (y_top + h) / self.height,
            w / self.width_in,
            h / self.height,
        )


def _layout(fig: Figure, first: Field, width_in: float, n: int) -> tuple[_Grid, bool, bool]:
    """Panel sizes from the projected extent; return the grid, global view, outside flag."""
    probe = fig.add_axes((0.0, 0.0, 0.5, 0.5), projection=first.proj)
    box = None if first.region_given else lay.footprint(first.da, first.src_crs, first.proj)
    global_view = lay.set_view(probe, first.proj, first.proj_name, first.region, box)
    outside = lay.outside_grid(probe, first.da, first.src_crs)
    (x0, x1), (y0, y1) = probe.get_xlim(), probe.get_ylim()
    probe.remove()
    fs = 0.85 * lay.font_size(width_in)
    grid = _Grid(width_in=width_in, fs=fs, pw=0.0, ph=0.0)
    grid.pw = (width_in - grid.left - 0.45 - grid.gap) / 2.0
    grid.ph = min(grid.pw * abs(y1 - y0) / abs(x1 - x0), 1.2 * grid.pw)
    grid.row_h = grid.ph + _TITLE_H + 0.27 + 0.1 + 0.45
    grid.height = grid.top + math.ceil(n / 2) * grid.row_h
    return grid, global_view, outside


def _draw_panel(
    fig: Figure, grid: _Grid, k: int, f: Field, *, global_view: bool, plumes: list, dpi: float
) -> tuple[Any, str]:
    """Panel ``k``: letter and title, the map, plume dots, graticule, its colour bar."""
    x, y = grid.panel(k)
    ax = fig.add_axes(grid.rect(x, y + _TITLE_H, grid.pw, grid.ph), projection=f.proj)
    box = None if f.region_given else lay.footprint(f.da, f.src_crs, f.proj)
    lay.set_view(ax, f.proj, f.proj_name, f.region, box)
    ax.set_facecolor(OUTSIDE_COLOR)
    draw_data(ax, f, (grid.pw * dpi, grid.ph * dpi))
    spread_labels(ax, mk.draw_plumes(ax, plumes, grid.fs, names=k == 1))
    labels = {
        "draw_labels": {"bottom": "x", "left": "y"},
        "y_inline": False,
        "ylim": None,
        "top": False,
        "right": False,
    }
    if type(f.proj).__name__ in ("NorthPolarStereo", "SouthPolarStereo") or global_view:
        labels = lay.label_layout(f.proj, global_view, ax)
    size = (grid.pw, grid.ph)
    lay.draw_graticule(
        ax,
        f.proj,
        f.region,
        size_in=size,
        fs=0.85 * grid.fs,
        labels=labels,
        global_view=global_view,
    )
    title = f"({chr(ord('a') + k)}) {f.long_name}"
    lines = pg.wrap_measured(
        title, fig.canvas.get_renderer(), FontProperties(size=grid.fs, weight="bold"), grid.pw * dpi
    )
    fig.text(
        x / grid.width_in,
        1.0 - y / grid.height,
        "\n".join(lines[:2]),
        fontsize=grid.fs,
        fontweight="bold",
        va="top",
        ha="left",
    )
    cb_top = y + _TITLE_H + grid.ph + 0.27
    label = _colorbar(fig, grid.rect(x, cb_top, grid.pw, 0.1), f, grid.fs)
    return ax, label


def make_overview_figure(
    run: RunDir | str | Path, *, width_in: float = 7.2, dpi: float = OVERVIEW_DPI, **options: Any
) -> tuple[Figure, OverviewInfo]:
    """Draw the overview page of a run (see the module notes); return it and what it shows.

    ``options`` are fields of :class:`._options.MapOptions` (``coastlines``, ``projection``,
    ``region``, ``plumes``...); stations and candidates are left to the single maps.

    Raises
    ------
    InputError
        If the run has none of the overview's variables, or an option is invalid.
    """
    ov.forbid_downloads()
    run = as_run(run)
    opts = resolve_options(run, MapOptions(dpi=dpi, width_in=width_in, **options))
    names = _panel_variables(run)
    first = open_field(run, names[0], opts)
    fields = [first] + [open_field(run, n, replace(opts, projection=first.proj)) for n in names[1:]]
    fields += _ensemble_fields(run, replace(opts, projection=first.proj))
    fig = Figure(figsize=(width_in, 10.0), dpi=dpi, facecolor="white")
    FigureCanvasAgg(fig)
    grid, global_view, outside = _layout(fig, first, width_in, len(fields))
    caption = _caption(run, first.proj_name, outside, fields, len(names))
    cap_fs = 0.9 * grid.fs
    cap = pg.wrap_measured(
        caption, fig.canvas.get_renderer(), FontProperties(size=cap_fs), (width_in - 0.8) * dpi
    )
    cap_top = grid.height + 0.1
    grid.height = cap_top + len(cap) * 1.3 * cap_fs / 72.0 + 0.2
    fig.set_size_inches(width_in, grid.height)
    plumes = mk.plumes_of(run.summary) if opts.plumes else []
    axes, labels = [], []
    for k, f in enumerate(fields):
        ax, label = _draw_panel(fig, grid, k, f, global_view=global_view, plumes=plumes, dpi=dpi)
        axes.append(ax)
        labels.append(label)
    ensemble = ""
    if len(fields) > len(names):
        letters = ", ".join(chr(ord("a") + k) for k in range(len(names), len(fields)))
        ensemble = f" and its ensemble ({letters})"
    fig.text(
        grid.left / width_in,
        1.0 - 0.12 / grid.height,
        f"Run {run.path.name}: inputs (a, b) and predicted melting (c-f){ensemble}",
        fontsize=1.25 * grid.fs,
        fontweight="bold",
        va="top",
    )
    fig.text(
        grid.left / width_in,
        1.0 - cap_top / grid.height,
        "\n".join(cap),
        fontsize=cap_fs,
        va="top",
        ha="left",
        color="0.15",
        linespacing=1.3,
    )
    info = OverviewInfo(
        variables=tuple(f.variable for f in fields),
        titles=tuple(f.long_name for f in fields),
        colorbar_labels=tuple(labels),
        limits=tuple((f.vmin, f.vmax) for f in fields),
        projection=first.proj_name,
        caption=caption,
        plumes=tuple(p.name for p in plumes),
        axes=axes,
    )
    return fig, info


def draw_overview(
    run: RunDir | str | Path,
    *,
    out_dir: str | Path | None = None,
    formats: tuple[str, ...] = ("png", "pdf", "svg"),
    **options: Any,
) -> list[Path]:
    """Write the overview page as ``out_dir/overview.<fmt>`` (default ``RUN_DIR/maps``).

    PNG at :data:`OVERVIEW_DPI` (unless ``dpi`` is given), PDF and SVG as vector pages.
    Returns the files written.
    """
    run = as_run(run)
    fig, _ = make_overview_figure(run, **options)
    out = Path(out_dir) if out_dir is not None else run.path / "maps"
    stamp = run_stamp(run.summary)
    return [save_figure(fig, out / f"overview.{fmt}", dpi=fig.dpi, stamp=stamp) for fmt in formats]


def _rounded(value: Any) -> Any:
    """Floats to 6 significant figures, in nested dicts and lists (a stable fingerprint)."""
    if isinstance(value, dict):
        return {k: _rounded(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_rounded(v) for v in value]
    if isinstance(value, float):
        return float(f"{value:.6g}")
    return value


def run_stamp(summary: dict[str, Any]) -> str:
    """Which run an overview shows: the lidmelt version and a SHA-256 of the run's statistics
    (6 significant figures), as JSON. A change of the physics changes the statistics and so
    the stamp: an image whose stamp differs from a fresh run's is out of date."""
    import hashlib
    import json

    stats = json.dumps(_rounded(summary.get("statistics") or {}), sort_keys=True)
    digest = hashlib.sha256(stats.encode("utf-8")).hexdigest()
    return json.dumps({"lidmelt": summary.get("lidmelt_version"), "statistics_sha256": digest})
