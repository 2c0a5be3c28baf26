"""The options of a map figure, what it drew, and their checks (read once per command).

:class:`MapOptions` holds every option of :func:`._figure.make_map_figure`,
:func:`._write.draw_map` and :func:`._write.draw_run_maps`; :func:`resolve_options` checks them
and loads the overlay files once; :class:`MapInfo` reports what a figure shows.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import cartopy.crs as ccrs

from lidmelt._errors import InputError
from lidmelt._variables import get_variable, legacy_message
from lidmelt.grids._rundir import RunDir, open_run, read_flags
from lidmelt.products._maps import _layout as lay
from lidmelt.products._maps import _overlays as ov
from lidmelt.products._maps._style import NODATA_COLOR


@dataclass(frozen=True, kw_only=True)
class MapOptions:
    """The options of :func:`make_map_figure`, :func:`._write.draw_map` and ``draw_run_maps``.

    Parameters
    ----------
    projection : str, cartopy Projection or None
        None or ``"auto"``: :func:`._layout.choose_projection`; a name:
        :func:`._layout.make_projection`.
    region : (west, east, south, north) or None
        Map extent in degrees; default the grid's extent.
    stations : path, Stations or None
        Points to overlay (:func:`._overlays.load_stations`).
    candidates : path, list of geometries or None
        Polygons (lon/lat) to outline (:func:`._overlays.load_candidates`).
    age_contours : bool (or a loaded plate-age DataArray)
        Draw contours of the run's ``plate_age_ma`` input (Ma) when the run has one.
    coastlines : path, bool or None
        A coastline file; None: look locally (:func:`._overlays.find_coastlines`) and warn if
        none; False: draw none, silently.
    flags : bool (or a loaded :class:`._flags.FlagGrid`)
        Hatch the flagged cells of output variables (:mod:`._flags`) when the run has a
        validity flag grid, and the melt-thickness maps' cells made mostly beyond the
        calibrated pressure (:func:`._flags.deep_share_cells`); False: draw no hatching.
    plumes : bool
        Mark and name the workflow's plume centres (``summary.json``,
        ``inputs.thermal_anomaly_k.plumes``) when the run has any.
    candidate_labels : sequence of str
        One label per candidate outline (filled in from the file's ``rank`` column, or
        1, 2, ... in file order, when ``candidates`` is a path).
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
    plumes: bool = True
    candidate_labels: Sequence[str] = ()
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
    deep_hatched_cells: int = 0
    plumes: tuple[str, ...] = ()
    zero_contour: bool = False
    contour_levels: tuple[float, ...] = ()
    outside_grid: bool = False
    legend_labels: tuple[str, ...] = ()
    ax: Any = field(default=None, repr=False)
    colorbar: Any = field(default=None, repr=False)
    gridliner: Any = field(default=None, repr=False)


def as_run(run: RunDir | str | Path) -> RunDir:
    """``run`` opened as a :class:`~lidmelt.grids._rundir.RunDir` (a RunDir is returned as is)."""
    return run if isinstance(run, RunDir) else open_run(run)


def check_variable(run: RunDir, variable: str) -> str:
    """Return ``variable`` if the run has it (an output or an aligned input), else raise.

    Raises
    ------
    InputError
        Naming the valid variables of the run.
    """
    valid = run.outputs + run.inputs
    if legacy_message(variable):
        get_variable(variable)  # an earlier lidmelt's name: says what it is now, to run again
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
    plate-age DataArray or False, and the validity flag grid (None: the run has none; False:
    hatching turned off); resolving them again
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
    labels = tuple(opts.candidate_labels)
    if isinstance(stations, str | Path):
        stations = ov.load_stations(stations)
    if isinstance(candidates, str | Path):
        candidates, labels = ov.load_ranked_candidates(candidates)
    coast = ov.resolve_coastlines(opts.coastlines)
    age = ov.load_age(run, opts.age_contours)
    flags = read_flags(run) if opts.flags is True else opts.flags
    return replace(
        opts,
        stations=stations,
        candidates=candidates,
        candidate_labels=labels,
        coastlines=coast if coast is not None else False,
        age_contours=age if age is not None else False,
        flags=flags,
    )
