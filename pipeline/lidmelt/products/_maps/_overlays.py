"""What is drawn over the data: coastlines, plate-age contours, stations, candidate outlines.

Offline: cartopy's downloaders are cleared when this module is imported (and again before every
figure, :func:`forbid_downloads`), and coastlines are drawn only from a file that is present:
the one the caller gives, or ``shapefiles/natural_earth/physical/ne_110m_coastline.shp`` under
cartopy's pre-existing data directory (``CARTOPY_DATA_DIR``) or its data directory. Without one,
maps are drawn without coastlines and one warning says so per command.
"""

from __future__ import annotations

import logging
import math
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import cartopy
import cartopy.crs as ccrs
import numpy as np
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import MaxNLocator

from lidmelt._errors import InputError
from lidmelt.grids._rundir import RunDir
from lidmelt.grids._vector import read_labelled_points, read_polygons, read_vector
from lidmelt.products._maps._labels import halo, place_label
from lidmelt.products._maps._layout import data_crs
from lidmelt.products._maps._style import CANDIDATE_COLOR, NODATA_COLOR, ZERO_COLOR

log = logging.getLogger(__name__)

#: Relative path of the Natural Earth 1:110m coastline inside a cartopy data directory.
COASTLINE_RELPATH = Path("shapefiles", "natural_earth", "physical", "ne_110m_coastline.shp")


def forbid_downloads() -> None:
    """Remove cartopy's downloaders so that a missing data file fails at once, never fetches."""
    downloaders = cartopy.config.get("downloaders")
    if downloaders:
        downloaders.clear()


forbid_downloads()


def require_file(path: str | Path, *, what: str, fix: str) -> Path:
    """``path`` as a Path if it is an existing file; else an :class:`InputError`.

    The message names the file and what it is for (``what``, e.g. ``"stations"``) and ends
    with ``fix``, the remedy.
    """
    path = Path(path)
    if not path.is_file():
        msg = f"{what} file {str(path)!r} does not exist or is not a file. {fix}"
        raise InputError(msg)
    return path


def _existing_file(path: str | Path, what: str, option: str) -> Path:
    fix = f"Give the path of an existing file with {option}, or leave the option out."
    return require_file(path, what=what, fix=fix)


@dataclass(frozen=True)
class Stations:
    """Station positions in degrees (EPSG:4326) with optional names."""

    lon: np.ndarray
    lat: np.ndarray
    names: tuple[str, ...] = ()
    source: str = ""


def load_stations(path: str | Path) -> Stations:
    """Read station positions with :func:`lidmelt.grids._vector.read_labelled_points`.

    Parameters
    ----------
    path : str or Path
        A CSV/text table with longitude and latitude columns in degrees (the column names
        :data:`lidmelt.grids._vector.LON_NAMES` / ``LAT_NAMES`` accept, any case) and optionally
        a name column; or any point file that geopandas reads, in any CRS it declares.

    Raises
    ------
    InputError
        If the file is missing or unreadable, lacks lon/lat columns, or holds non-points.
    """
    path = _existing_file(path, "stations", "--stations")
    points = read_labelled_points(path, what="stations")
    labels = list(points["label"])
    names = tuple(str(v) for v in labels) if any(v is not None for v in labels) else ()
    return Stations(
        lon=points["lon"].to_numpy(float),
        lat=points["lat"].to_numpy(float),
        names=names,
        source=str(path),
    )


def load_candidates(path: str | Path) -> list[Any]:
    """Read candidate outlines with :func:`lidmelt.grids._vector.read_polygons`, in EPSG:4326.

    Parameters
    ----------
    path : str or Path
        Any polygon file geopandas reads, e.g. the screening GeoPackage.

    Returns
    -------
    list of shapely geometries
        Polygons and multipolygons in lon/lat degrees.

    Raises
    ------
    InputError
        If the file is missing, unreadable, without CRS, or holds no polygon.
    """
    path = _existing_file(path, "candidates", "--candidates")
    return list(read_polygons(path, what="candidates").to_crs("EPSG:4326").geometry)


def load_ranked_candidates(path: str | Path) -> tuple[list[Any], tuple[str, ...]]:
    """Candidate outlines (as :func:`load_candidates`) and a label for each.

    The label is the ``rank`` column of the screening file (``lidmelt screen``: 1 = largest
    melt volume), else the position in the file (1, 2, ...).
    """
    path = _existing_file(path, "candidates", "--candidates")
    gdf = read_polygons(path, what="candidates").to_crs("EPSG:4326")
    if "rank" in gdf.columns:
        labels = tuple(f"#{v}" for v in gdf["rank"].tolist())
    else:
        labels = tuple(f"#{k}" for k in range(1, len(gdf) + 1))
    return list(gdf.geometry), labels


def find_coastlines(coastlines: str | Path | None = None) -> Path | None:
    """The coastline file to draw, or None when none is available locally.

    Parameters
    ----------
    coastlines : str, Path or None
        A shapefile (or any line/polygon file geopandas reads) given by the user; it must
        exist. With None, look for ``ne_110m_coastline.shp`` (see :data:`COASTLINE_RELPATH`)
        under ``CARTOPY_DATA_DIR``, cartopy's pre-existing data directory and its data
        directory. Nothing is ever downloaded.

    Raises
    ------
    InputError
        If a given file does not exist.
    """
    if coastlines is not None:
        return _existing_file(coastlines, "coastlines", "--coastlines")
    roots = []
    if os.environ.get("CARTOPY_DATA_DIR"):
        roots.append(Path(os.environ["CARTOPY_DATA_DIR"]))
    for key in ("pre_existing_data_dir", "data_dir"):
        if cartopy.config.get(key):
            roots.append(Path(cartopy.config[key]))
    for root in roots:
        candidate = root / COASTLINE_RELPATH
        if candidate.is_file():
            return candidate
    return None


_NO_COASTLINE_NOTE = (
    "note: no local coastline data (looked for {rel} under CARTOPY_DATA_DIR and cartopy's data "
    "directories); maps are drawn without coastlines. Give a coastline shapefile with "
    "--coastlines FILE (Python: coastlines=...) to draw them."
)


def resolve_coastlines(coastlines: str | Path | bool | None) -> Path | None:
    """Resolve the coastline option; warn (once per call) when none can be drawn.

    ``False`` means: draw none and say nothing (used when the caller already warned).
    """
    if coastlines is False:
        return None
    if coastlines is True:
        coastlines = None
    found = find_coastlines(coastlines)
    if found is None:
        log.warning(_NO_COASTLINE_NOTE.format(rel=COASTLINE_RELPATH.as_posix()))
    return found


def load_age(run: RunDir, age_contours: bool | Any) -> Any:
    """The plate-age grid to contour, or None (not asked for, or the run has none: a warning).

    ``age_contours`` is a bool, or an already loaded DataArray (returned as it is).
    """
    if age_contours is False or age_contours is None:
        return None
    if age_contours is not True:
        return age_contours  # an already loaded DataArray
    if "plate_age_ma" not in run.inputs:
        log.warning(
            "plate-age contours asked for, but run %s has no input_plate_age_ma grid "
            "(it used a lid-thickness grid); maps are drawn without them",
            run.path,
        )
        return None
    return run.open("plate_age_ma")


def draw_coastlines(ax: Any, path: Path) -> None:
    """Draw a local coastline file (never a download)."""
    try:
        from cartopy.io import shapereader

        geoms = list(shapereader.Reader(path).geometries())
    except Exception:  # not a shapefile cartopy reads: try geopandas
        gdf = read_vector(Path(path), crs=None, what="coastlines")
        geoms = list(gdf.to_crs("EPSG:4326").geometry)
    ax.add_geometries(
        geoms, crs=ccrs.PlateCarree(), facecolor="none", edgecolor="black", linewidth=0.9, zorder=2
    )


def draw_age_contours(ax: Any, age: Any, fs: float) -> tuple[float, ...]:
    """Dashed, labelled plate-age contours (Ma) at 1-2-2.5-5 steps; return their levels."""
    values = np.asarray(age.values, dtype=float)
    finite = values[np.isfinite(values)]
    if finite.size < 4 or finite.min() == finite.max():
        return ()
    levels = MaxNLocator(nbins=6, steps=[1, 2, 2.5, 5, 10]).tick_values(finite.min(), finite.max())
    levels = levels[(levels > finite.min()) & (levels < finite.max())]
    if not levels.size:
        return ()
    step = max(1, math.ceil(max(values.shape) / 800))
    xs, ys = age["x"].values[::step], age["y"].values[::step]
    cs = ax.contour(
        xs,
        ys,
        values[::step, ::step],
        levels=levels,
        colors="0.1",
        linewidths=0.8,
        linestyles=[(0, (5.0, 2.0))],
        transform=data_crs(age),
        zorder=3,
    )
    cs.set_path_effects(halo(2.0))  # the dashes stay visible on dark colours
    labels = ax.clabel(
        cs, fmt="%g Ma", fontsize=0.75 * fs, inline=True, inline_spacing=2, use_clabeltext=True
    )
    to_axes = ax.transData + ax.transAxes.inverted()
    for text in labels:
        u, v = to_axes.transform(text.get_position())
        if not (0.03 < u < 0.97 and 0.03 < v < 0.97):  # a label cut by the frame: drop it
            text.remove()
        else:
            text.set_path_effects(halo(1.8))
    return tuple(float(v) for v in levels)


# --------------------------------------------------------------------------------------------
# Writing


def draw_candidates(ax: Any, candidates: Any) -> None:
    """Outline candidate polygons (lon/lat) in red over a white halo."""
    for colour, width, zorder in (("white", 2.2, 4), (CANDIDATE_COLOR, 1.1, 5)):
        ax.add_geometries(
            candidates,
            crs=ccrs.PlateCarree(),
            facecolor="none",
            edgecolor=colour,
            linewidth=width,
            zorder=zorder,
        )


def station_marker_size(fs: float) -> float:
    """Station triangle size (pt) for base font size ``fs``."""
    return max(3.0, 0.6 * fs)


_STATION_MARKER = {"marker": "^", "mfc": "black", "mec": "white", "mew": 0.7}


def draw_stations(ax: Any, stations: Stations, fs: float) -> tuple[list[Any], Any]:
    """Mark stations with black triangles; label them by name (inside the frame) when <= 30.

    Returns the labels and the markers (for :func:`._labels.spread_labels`).
    """
    n_stations = len(stations.lon)
    (marks,) = ax.plot(
        stations.lon,
        stations.lat,
        ls="none",
        ms=station_marker_size(fs),
        transform=ccrs.PlateCarree(),
        zorder=6,
        **_STATION_MARKER,
    )
    labels = []
    if stations.names and n_stations <= 30:
        for lon, lat, name in zip(stations.lon, stations.lat, stations.names, strict=True):
            labels.append(place_label(ax, lon, lat, name, fontsize=0.8 * fs))
    return labels, marks


def legend_handles(
    *,
    no_melt: bool,
    coastlines: bool,
    age: bool,
    candidates: bool,
    stations: bool,
    fs: float,
    no_melt_label: str = "no melting",
) -> list[Any]:
    """Legend entries for what the map shows, known before drawing (the layout needs them);
    ``no_melt_label`` names the white class (:attr:`.style.VariableStyle.no_melt_label`)."""
    handles: list[Any] = [Patch(facecolor=NODATA_COLOR, edgecolor="0.3", lw=0.5, label="no data")]
    if no_melt:
        handles.append(Patch(facecolor=ZERO_COLOR, edgecolor="0.3", lw=0.5, label=no_melt_label))
    if coastlines:
        handles.append(Line2D([], [], color="black", lw=0.9, label="coastline"))
    if age:
        handles.append(
            Line2D([], [], color="0.1", lw=0.7, ls=(0, (5.0, 2.0)), label="plate age (Ma)")
        )
    if candidates:
        handles.append(
            Line2D(
                [],
                [],
                color=CANDIDATE_COLOR,
                lw=1.1,
                path_effects=halo(2.2),
                label="candidate region",
            )
        )
    if stations:
        handles.append(
            Line2D(
                [], [], ls="none", ms=station_marker_size(fs), label="station", **_STATION_MARKER
            )
        )
    return handles
