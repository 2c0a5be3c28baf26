"""Publication-quality map figures of a run's output variables (cartopy, headless, offline).

One figure per variable: the grid drawn with a perceptually uniform colour map in a projection
suited to the extent, a colour bar with the variable's long name and unit, labelled graticules,
optional overlays (stations, candidate outlines, plate-age contours, coastlines) and a title and
caption that name the melting model and the ambient mantle potential temperature.

Automatic projection (:func:`choose_projection`), for a region W, E, S, N in degrees with centre
(lon0, lat0), checked in this order:

1. polar (abs(lat0) >= 60 deg): ``NorthPolarStereo`` or ``SouthPolarStereo``;
2. global (longitude span >= 270 deg or latitude span >= 150 deg): ``Robinson``;
3. low latitudes (abs(S) and abs(N) both <= 30 deg): ``Mercator`` (conformal; its scale
   error is at most sec(30 deg) - 1 = 15 %);
4. mid latitudes (abs(lat0) >= 15 deg): ``LambertConformal`` for a longitude span up to
   60 deg, ``AlbersEqualArea`` (equal-area) for wider regions, both with standard parallels
   one sixth of the latitude span inside S and N (the "one-sixth rule" for conic projections,
   common practice; Snyder 1987, USGS Prof. Paper 1395, conic projections, from memory);
5. anything else (wide regions that straddle the equator beyond +-30 deg): ``Robinson``.

Every projection is centred on lon0 (and lat0 where it takes one). Any other cartopy projection
can be asked for by class name (case-insensitive), or as ``EPSG:<code>`` for a projected CRS.

Colours: nodata is a neutral light grey (:data:`NODATA_COLOR`); in ``melt_thickness_km`` and
``max_melt_fraction`` a cell with zero (no melting) is white (:data:`ZERO_COLOR`), so it differs
both from nodata and from the lowest colour of the scale (the smallest non-zero melt); in
``onset_depth_km``, ``onset_pressure_gpa`` and ``mean_melt_pressure_gpa``, which are undefined
where nothing melts, cells where ``melt_thickness_km`` is 0 are white too.
Colour limits are the 2nd and 98th percentiles of the valid cells (:data:`PERCENTILES`; for the
two melt amounts: 0 to the 99.5th percentile of the melting cells, :data:`MELT_TOP_PERCENTILE`,
so that the few hot plume cells keep their structure), with extend arrows where the
data go beyond them. Depths and pressures use ``cividis_r``: shallow is light, deep is dark.

Offline: cartopy's downloaders are cleared when this module is imported (and again before every
figure), and coastlines are drawn only from a file that is present: the one the caller gives, or
``shapefiles/natural_earth/physical/ne_110m_coastline.shp`` under cartopy's pre-existing data
directory (``CARTOPY_DATA_DIR``) or its data directory. Without one, maps are drawn without
coastlines and one warning says so per command. Figures are drawn on a
:class:`matplotlib.backends.backend_agg.FigureCanvasAgg` without pyplot, so no display is needed.
"""

from __future__ import annotations

import contextlib
import inspect
import logging
import math
import os
import uuid
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import cartopy
import cartopy.crs as ccrs
import numpy as np
from matplotlib import colormaps
from matplotlib import patheffects as mpe
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.colors import ListedColormap, Normalize, to_rgba_array
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import FixedLocator, MaxNLocator

from lidmelt import __version__
from lidmelt.errors import InputError
from lidmelt.grids.rundir import RunDir, open_run

log = logging.getLogger(__name__)


def _forbid_downloads() -> None:
    """Remove cartopy's downloaders so that a missing data file fails at once, never fetches."""
    downloaders = cartopy.config.get("downloaders")
    if downloaders:
        downloaders.clear()


_forbid_downloads()

#: Colour of nodata cells and of the map background outside the grid (neutral light grey).
NODATA_COLOR = "#c8c8c8"
#: Colour of cells with exactly zero melt in the melt-amount variables.
ZERO_COLOR = "#ffffff"
#: Percentiles of the valid cells that set the colour limits (robust limits, common practice).
PERCENTILES = (2.0, 98.0)
MELT_TOP_PERCENTILE = 99.5
_CANDIDATE_COLOR = "#d62728"
#: Figure formats that :func:`draw_map` writes.
FORMATS = ("png", "pdf", "svg")
#: Relative path of the Natural Earth 1:110m coastline inside a cartopy data directory.
COASTLINE_RELPATH = Path("shapefiles", "natural_earth", "physical", "ne_110m_coastline.shp")


@dataclass(frozen=True)
class VariableStyle:
    """How one variable is drawn.

    Parameters
    ----------
    cmap : str
        Name of a perceptually uniform matplotlib colour map.
    zero_is_no_melt : bool
        Cells with value 0 mean "no melting" and are drawn in :data:`ZERO_COLOR`; the colour
        scale then starts at 0 and covers the melting cells only.
    nan_is_no_melt : bool
        The variable is undefined (NaN) where a valid cell does not melt (e.g. onset depth);
        such cells, found from ``melt_thickness_km == 0``, are drawn in :data:`ZERO_COLOR`
        rather than as nodata.
    title : str
        Readable name, used when the run gives no long name.
    """

    cmap: str
    zero_is_no_melt: bool = False
    nan_is_no_melt: bool = False
    title: str = ""


STYLES: dict[str, VariableStyle] = {
    "melt_thickness_km": VariableStyle("viridis", zero_is_no_melt=True, title="Melt thickness"),
    "max_melt_fraction": VariableStyle(
        "plasma", zero_is_no_melt=True, title="Maximum melt fraction"
    ),
    "onset_depth_km": VariableStyle(
        "cividis_r", nan_is_no_melt=True, title="Depth of melting onset"
    ),
    "onset_pressure_gpa": VariableStyle(
        "cividis_r", nan_is_no_melt=True, title="Pressure of melting onset"
    ),
    "lid_depth_km": VariableStyle("cividis_r", title="Top of the melting column"),
    "mean_melt_pressure_gpa": VariableStyle(
        "cividis_r", nan_is_no_melt=True, title="Mean pressure of melting"
    ),
    "excess_to_melt_k": VariableStyle("inferno", title="Thermal anomaly needed to melt"),
    "plate_age_ma": VariableStyle("viridis", title="Plate age"),
    "lid_thickness_km": VariableStyle("cividis_r", title="Lid thickness"),
    "thermal_anomaly_k": VariableStyle("inferno", title="Mantle thermal anomaly"),
    "water_wt_pct": VariableStyle("cividis", title="Mantle water content"),
}
_DEFAULT_STYLE = VariableStyle("viridis")

_UNIT_LABELS = {"1": "dimensionless", "": "no unit given", "degC": "°C", "wt%": "wt %"}

Region = tuple[float, float, float, float]


# --------------------------------------------------------------------------------------------
# Regions and projections


def check_region(region: Sequence[float]) -> Region:
    """Validate a map region ``(west, east, south, north)`` in degrees; return it as floats.

    Parameters
    ----------
    region : sequence of 4 floats
        West, east, south, north, in degrees of longitude and latitude. Longitudes may run
        -180..180 or 0..360; for a region across the antimeridian give east > 180
        (e.g. 170 190).

    Raises
    ------
    InputError
        If there are not four finite numbers, south >= north, latitudes leave -90..90,
        west >= east or the longitude span exceeds 360 deg.
    """
    try:
        west, east, south, north = (float(v) for v in region)
    except (TypeError, ValueError) as exc:
        msg = (
            f"region {region!r} must be four numbers W E S N in degrees "
            "(e.g. --region -40 -10 -35 -15)."
        )
        raise InputError(msg) from exc
    if not all(math.isfinite(v) for v in (west, east, south, north)):
        msg = f"region {region!r} has a non-finite value; give four finite degrees W E S N."
        raise InputError(msg)
    if not -90.0 <= south < north <= 90.0:
        msg = (
            f"region south={south:g}, north={north:g} deg: expected -90 <= S < N <= 90. "
            "Give the region as W E S N (south before north)."
        )
        raise InputError(msg)
    if not west < east or east - west > 360.0:
        msg = (
            f"region west={west:g}, east={east:g} deg: expected W < E and E - W <= 360. "
            "For a region across the antimeridian give E > 180 (e.g. 170 190)."
        )
        raise InputError(msg)
    return west, east, south, north


def _nice_step(span: float, *, target: int = 5) -> float:
    """A graticule step (deg) from 1-2-2.5-5 multiples giving about ``target`` lines (common)."""
    steps = [0.1, 0.2, 0.25, 0.5, 1, 2, 2.5, 5, 10, 15, 20, 30, 45, 60, 90]
    for step in steps:
        if span / step <= target:
            return float(step)
    return 90.0


def _one_sixth_parallels(south: float, north: float, lat0: float) -> tuple[float, float]:
    """Conic standard parallels one sixth of the span inside S and N, on lat0's side."""
    span = north - south
    p1, p2 = south + span / 6.0, north - span / 6.0
    sign = 1.0 if lat0 >= 0 else -1.0
    # Both parallels must lie in lat0's hemisphere, or the cone degenerates.
    p1, p2 = (sign * max(1.0, sign * p) for p in (p1, p2))
    return (p1, p2) if p1 != p2 else (p1, p2 + sign * 1.0)


def _lambert_cutoff(south: float, north: float, lat0: float) -> float:
    """Latitude where a Lambert conformal map is cut, beyond the region on the far side."""
    cutoff = min(-30.0, south - 15.0) if lat0 > 0 else max(30.0, north + 15.0)
    return float(np.clip(cutoff, -80.0, 80.0))


def choose_projection(region: Sequence[float]) -> tuple[ccrs.Projection, str]:
    """The projection this module uses for ``region`` when none is asked for.

    Parameters
    ----------
    region : sequence of 4 floats
        West, east, south, north in degrees.

    Returns
    -------
    projection : cartopy.crs.Projection
    reason : str
        Short text for the caption, e.g. ``"Mercator (automatic: low latitudes)"``.

    Notes
    -----
    The rule is in this module's docstring.
    """
    west, east, south, north = check_region(region)
    lon0, lat0 = (west + east) / 2.0, (south + north) / 2.0
    lon0 = ((lon0 + 180.0) % 360.0) - 180.0
    lon_span, lat_span = east - west, north - south
    if lat0 >= 60.0:
        proj = ccrs.NorthPolarStereo(central_longitude=lon0)
        return proj, "north polar stereographic (automatic: high latitudes)"
    if lat0 <= -60.0:
        proj = ccrs.SouthPolarStereo(central_longitude=lon0)
        return proj, "south polar stereographic (automatic: high latitudes)"
    if lon_span >= 270.0 or lat_span >= 150.0:
        return ccrs.Robinson(central_longitude=lon0), "Robinson (automatic: global extent)"
    if max(abs(south), abs(north)) <= 30.0:
        return ccrs.Mercator(central_longitude=lon0), "Mercator (automatic: low latitudes)"
    if abs(lat0) >= 15.0:
        parallels = _one_sixth_parallels(south, north, lat0)
        if lon_span <= 60.0:
            proj = ccrs.LambertConformal(
                central_longitude=lon0,
                central_latitude=lat0,
                standard_parallels=parallels,
                cutoff=_lambert_cutoff(south, north, lat0),
            )
            return proj, "Lambert conformal conic (automatic: mid latitudes)"
        proj = ccrs.AlbersEqualArea(
            central_longitude=lon0, central_latitude=lat0, standard_parallels=parallels
        )
        return proj, "Albers equal-area conic (automatic: wide mid-latitude region)"
    return ccrs.Robinson(central_longitude=lon0), "Robinson (automatic: wide, across the equator)"


def projection_names() -> list[str]:
    """Names of the cartopy projections that :func:`make_projection` accepts."""
    names = []
    for name in dir(ccrs):
        obj = getattr(ccrs, name)
        if (
            isinstance(obj, type)
            and issubclass(obj, ccrs.Projection)
            and obj is not ccrs.Projection
            and not name.startswith("_")
        ):
            names.append(name)
    return sorted(names)


def make_projection(name: str | None, region: Sequence[float]) -> tuple[ccrs.Projection, str]:
    """A cartopy projection by class name (or ``EPSG:<code>``), centred on ``region``.

    Parameters
    ----------
    name : str or None
        A cartopy projection class name, case-insensitive (see :func:`projection_names`),
        ``"EPSG:<code>"`` for a projected CRS, or None / ``"auto"`` for
        :func:`choose_projection`.
    region : sequence of 4 floats
        West, east, south, north in degrees; sets the centre (and conic standard parallels).

    Raises
    ------
    InputError
        If the name is unknown (the message lists the valid names) or the projection cannot be
        built with the region's centre.
    """
    west, east, south, north = check_region(region)
    if name is None or name.strip().lower() == "auto":
        return choose_projection(region)
    text = name.strip()
    if text.upper().startswith("EPSG:"):
        try:
            return ccrs.epsg(int(text[5:])), f"{text.upper()}"
        except (ValueError, RuntimeError) as exc:
            msg = (
                f"projection {name!r} cannot be used ({exc}). Give a projected EPSG code "
                "(e.g. EPSG:3031) or a cartopy projection name."
            )
            raise InputError(msg) from exc
    lookup = {n.lower(): n for n in projection_names()}
    cls_name = lookup.get(text.lower())
    if cls_name is None:
        msg = (
            f"unknown projection {name!r}. Valid names: auto, EPSG:<code>, "
            f"{', '.join(projection_names())}."
        )
        raise InputError(msg)
    cls = getattr(ccrs, cls_name)
    params = inspect.signature(cls).parameters
    lon0 = (((west + east) / 2.0 + 180.0) % 360.0) - 180.0
    lat0 = (south + north) / 2.0
    kwargs: dict[str, Any] = {}
    if "central_longitude" in params:
        kwargs["central_longitude"] = lon0
    if "central_latitude" in params:
        kwargs["central_latitude"] = lat0
    if "standard_parallels" in params and abs(lat0) > 1.0:
        kwargs["standard_parallels"] = _one_sixth_parallels(south, north, lat0)
    if "cutoff" in params:
        kwargs["cutoff"] = _lambert_cutoff(south, north, lat0)
    try:
        proj = cls(**kwargs)
    except Exception as exc:  # cartopy raises several types for bad arguments
        msg = (
            f"projection {cls_name} cannot be built for the region centre lon {lon0:g}, "
            f"lat {lat0:g} deg ({exc}). Choose another projection, or for UTM give "
            "EPSG:326<zone> (north) or EPSG:327<zone> (south)."
        )
        raise InputError(msg) from exc
    return proj, cls_name


# --------------------------------------------------------------------------------------------
# Overlays


@dataclass(frozen=True)
class Stations:
    """Station positions in degrees (EPSG:4326) with optional names."""

    lon: np.ndarray
    lat: np.ndarray
    names: tuple[str, ...] = ()
    source: str = ""


_LON_COLUMNS = ("lon", "longitude", "long", "lon_deg", "longitude_deg")
_LAT_COLUMNS = ("lat", "latitude", "lat_deg", "latitude_deg")
_NAME_COLUMNS = ("name", "station", "site", "id", "label")


def _existing_file(path: str | Path, what: str, option: str) -> Path:
    path = Path(path)
    if not path.is_file():
        msg = (
            f"{what} file {str(path)!r} does not exist or is not a file. Give the path of "
            f"an existing file with {option}, or leave the option out."
        )
        raise InputError(msg)
    return path


def load_stations(path: str | Path) -> Stations:
    """Read station positions from a CSV (lon/lat columns) or a point vector file.

    Parameters
    ----------
    path : str or Path
        A ``.csv``/``.txt`` table with longitude and latitude columns in degrees (names such as
        ``lon``/``lat`` or ``longitude``/``latitude``, any case) and optionally a ``name``
        column; or any point file that geopandas reads (GeoPackage, GeoJSON, shapefile...),
        reprojected to EPSG:4326 (a file without a CRS is taken as EPSG:4326, with a warning).

    Raises
    ------
    InputError
        If the file is missing or unreadable, lacks lon/lat columns, or holds non-points.
    """
    path = _existing_file(path, "stations", "--stations")
    if path.suffix.lower() in {".csv", ".txt", ".tsv"}:
        import pandas as pd

        try:
            table = pd.read_csv(path, sep=None, engine="python")
        except Exception as exc:  # pandas raises many parser error types
            msg = f"stations file {str(path)!r} cannot be read as CSV ({exc})."
            raise InputError(msg) from exc
        columns = {str(c).strip().lower(): c for c in table.columns}
        lon_col = next((columns[c] for c in _LON_COLUMNS if c in columns), None)
        lat_col = next((columns[c] for c in _LAT_COLUMNS if c in columns), None)
        if lon_col is None or lat_col is None:
            msg = (
                f"stations file {str(path)!r} has columns {list(table.columns)!r}; expected "
                "a longitude column (lon or longitude) and a latitude column (lat or "
                "latitude), in degrees. Rename the columns."
            )
            raise InputError(msg)
        lon = pd.to_numeric(table[lon_col], errors="coerce").to_numpy(float)
        lat = pd.to_numeric(table[lat_col], errors="coerce").to_numpy(float)
        name_col = next((columns[c] for c in _NAME_COLUMNS if c in columns), None)
        names = tuple(str(v) for v in table[name_col]) if name_col is not None else ()
    else:
        gdf = _read_vector(path, "stations")
        if not all(t in {"Point", "MultiPoint"} for t in gdf.geom_type.dropna().unique()):
            msg = (
                f"stations file {str(path)!r} holds {sorted(set(gdf.geom_type))} geometries; "
                "expected points. Give a point file or a CSV with lon/lat columns."
            )
            raise InputError(msg)
        pts = gdf.geometry.representative_point()
        lon, lat = pts.x.to_numpy(float), pts.y.to_numpy(float)
        columns = {str(c).lower(): c for c in gdf.columns if c != "geometry"}
        name_col = next((columns[c] for c in _NAME_COLUMNS if c in columns), None)
        names = tuple(str(v) for v in gdf[name_col]) if name_col is not None else ()
    bad = ~(np.isfinite(lon) & np.isfinite(lat) & (np.abs(lat) <= 90.0))
    if bad.any():
        rows = np.flatnonzero(bad)[:5].tolist()
        msg = (
            f"stations file {str(path)!r} has {int(bad.sum())} row(s) without valid "
            f"lon/lat degrees (first rows, 0-based: {rows}). Fix or remove those rows."
        )
        raise InputError(msg)
    return Stations(lon=lon, lat=lat, names=names, source=str(path))


def _read_vector(path: Path, what: str) -> Any:
    import geopandas as gpd

    try:
        gdf = gpd.read_file(path)
    except Exception as exc:  # pyogrio raises several error types
        msg = (
            f"{what} file {str(path)!r} cannot be read as a vector file ({exc}). Give a "
            "GeoPackage, GeoJSON or shapefile."
        )
        raise InputError(msg) from exc
    if gdf.crs is None:
        log.warning(
            "%s file %s has no CRS; taking its coordinates as lon/lat degrees (EPSG:4326)",
            what,
            path,
        )
        gdf = gdf.set_crs("EPSG:4326")
    return gdf.to_crs("EPSG:4326")


def load_candidates(path: str | Path) -> list[Any]:
    """Read candidate outlines (polygons) from a vector file, in EPSG:4326.

    Parameters
    ----------
    path : str or Path
        Any polygon file geopandas reads, e.g. the screening GeoPackage.

    Returns
    -------
    list of shapely geometries
        Polygons and multipolygons in lon/lat degrees (other geometry types are ignored).

    Raises
    ------
    InputError
        If the file is missing, unreadable or holds no polygon.
    """
    path = _existing_file(path, "candidates", "--candidates")
    gdf = _read_vector(path, "candidates")
    geoms = [
        g
        for g in gdf.geometry
        if g is not None and not g.is_empty and g.geom_type in {"Polygon", "MultiPolygon"}
    ]
    if not geoms and len(gdf):
        msg = (
            f"candidates file {str(path)!r} holds no polygons (types "
            f"{sorted(set(gdf.geom_type.dropna()))}). Give the polygon file of candidate "
            "regions."
        )
        raise InputError(msg)
    return geoms


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


# --------------------------------------------------------------------------------------------
# Colours


def colour_limits(values: np.ndarray, *, zero_is_no_melt: bool = False) -> tuple[float, float, str]:
    """Robust colour limits and the matching colour-bar ``extend``.

    Parameters
    ----------
    values : ndarray
        The grid values; NaN is nodata.
    zero_is_no_melt : bool
        For melt amounts: the scale starts at 0 and its top is the 99.5th percentile of the
        positive values only.

    Returns
    -------
    vmin, vmax : float
        Colour limits (in the variable's unit), vmin < vmax.
    extend : {"neither", "min", "max", "both"}
        Which ends of the colour bar get an arrow because valid values lie beyond the limits.
    """
    finite = np.asarray(values, dtype=float)
    finite = finite[np.isfinite(finite)]
    if finite.size > 4_000_000:  # percentiles of a regular subsample are as robust
        finite = finite[:: finite.size // 4_000_000 + 1]
    if zero_is_no_melt:
        positive = finite[finite > 0]
        vmin = 0.0
        vmax = float(np.percentile(positive, MELT_TOP_PERCENTILE)) if positive.size else 1.0
        if vmax <= 0.0:
            vmax = float(positive.max()) if positive.size else 1.0
        below, above = False, bool(positive.size and positive.max() > vmax)
    elif finite.size:
        vmin, vmax = (float(v) for v in np.percentile(finite, PERCENTILES))
        below, above = bool(finite.min() < vmin), bool(finite.max() > vmax)
    else:
        vmin, vmax, below, above = 0.0, 1.0, False, False
    if not vmax > vmin:  # a constant field: open a small window around it
        half = max(abs(vmin) * 0.01, 1e-6)
        vmin, vmax = vmin - half, vmax + half
        below = above = False
    extend = {
        (False, False): "neither",
        (True, False): "min",
        (False, True): "max",
        (True, True): "both",
    }[(below, above)]
    return vmin, vmax, extend


def _unit_label(units: str) -> str:
    return _UNIT_LABELS.get(units, units)


def _long_name(variable: str, attrs: dict[str, Any]) -> str:
    name = str(attrs.get("long_name") or "")
    if not name or name == variable:
        name = STYLES.get(variable, _DEFAULT_STYLE).title or variable.replace("_", " ")
    return name[:1].upper() + name[1:]


# --------------------------------------------------------------------------------------------
# The figure


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
    region: Region
    title: str
    caption: str
    coastlines: Path | None
    n_stations: int = 0
    n_candidates: int = 0
    age_levels: tuple[float, ...] = ()
    zero_color: str | None = None
    nodata_color: str = NODATA_COLOR
    decimation: int = 1
    ax: Any = field(default=None, repr=False)
    colorbar: Any = field(default=None, repr=False)
    gridliner: Any = field(default=None, repr=False)


def _as_run(run: RunDir | str | Path) -> RunDir:
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


def _data_crs(da: Any) -> Any:
    crs = da.rio.crs
    if crs is None:
        msg = (
            f"grid {da.name!r} has no CRS, so it cannot be placed on a map. Run 'lidmelt "
            "run' again; its outputs always carry the target grid's CRS."
        )
        raise InputError(msg)
    if crs.is_geographic:
        return ccrs.PlateCarree()
    import pyproj

    try:
        return ccrs.Projection(pyproj.CRS.from_user_input(crs.to_wkt()))
    except Exception as exc:  # cartopy/pyproj raise several types
        msg = (
            f"the grid CRS of {da.name!r} ({crs.to_string()}) cannot be used by cartopy "
            f"({exc}). Re-run on a lon/lat target grid (EPSG:4326)."
        )
        raise InputError(msg) from exc


def _grid_region(da: Any) -> Region:
    """The grid's extent in lon/lat degrees."""
    west, south, east, north = (float(v) for v in da.rio.bounds())
    crs = da.rio.crs
    if crs is not None and not crs.is_geographic:
        import pyproj

        tr = pyproj.Transformer.from_crs(crs.to_wkt(), "EPSG:4326", always_xy=True)
        west, south, east, north = tr.transform_bounds(west, south, east, north, densify_pts=51)
        if east <= west:  # crosses the antimeridian
            east += 360.0
    south, north = max(south, -90.0), min(north, 90.0)
    return west, east, south, north


def _region_mask(da: Any, region: Region) -> np.ndarray:
    """Cells of a lon/lat grid whose centres lie in ``region`` (all cells for other CRSs)."""
    if da.rio.crs is None or not da.rio.crs.is_geographic:
        return np.ones(da.shape, dtype=bool)
    west, east, south, north = region
    lon = np.asarray(da["x"].values, dtype=float)
    lat = np.asarray(da["y"].values, dtype=float)
    lon_in = ((lon - west) % 360.0) <= (east - west)
    lat_in = (lat >= south) & (lat <= north)
    return lat_in[:, None] & lon_in[None, :]


def _font_size(width_in: float) -> float:
    """Base font size (pt) for a figure ``width_in`` wide: 7 pt at 3.5 in, 9 pt at 8 in."""
    return float(np.clip(5.5 + 0.45 * width_in, 7.0, 10.5))


def _describe_lid(summary: dict[str, Any]) -> str:
    cooling = summary.get("cooling")
    if isinstance(cooling, dict) and cooling.get("name"):
        iso = cooling.get("lid_isotherm_c")
        iso_text = f", {iso:g} °C isotherm" if isinstance(iso, int | float) else ""
        return f"lid from {cooling['name']} cooling{iso_text}"
    return "lid from the lid-thickness grid"


def _model_line(summary: dict[str, Any]) -> str:
    model = summary.get("model") or {}
    name = model.get("name") or "unknown model"
    tp = summary.get("ambient_potential_temperature_c")
    tp_text = f"{tp:g} °C" if isinstance(tp, int | float) else "not recorded"
    return f"Model {name}; ambient mantle potential temperature {tp_text}"


def _no_melt_mask(
    run: RunDir, variable: str, values: np.ndarray, style: VariableStyle
) -> np.ndarray | None:
    """Cells to draw as "no melting", or None when the variable has no such class."""
    if style.zero_is_no_melt:
        return np.isfinite(values) & (values <= 0.0)
    if style.nan_is_no_melt and "melt_thickness_km" in run.outputs:
        melt = np.asarray(run.open("melt_thickness_km").values, dtype=float)
        if melt.shape == values.shape:
            return np.isnan(values) & (melt == 0.0)
    return None


def _decimation(shape: tuple[int, int], map_px: tuple[float, float]) -> int:
    """Stride that keeps about two grid cells per output pixel (no visible loss)."""
    ny, nx = shape
    return max(1, math.ceil(max(nx / (2.0 * map_px[0]), ny / (2.0 * map_px[1]))))


def _encode_classes(
    values: np.ndarray, cmap: Any, vmin: float, vmax: float, no_melt: np.ndarray | None
) -> tuple[np.ndarray, Any, Any]:
    """Values, colour map and norm that draw nodata, no-melt and the scale without NaN.

    The drawn colour map is the variable's 256 colours with :data:`ZERO_COLOR` before them
    and :data:`NODATA_COLOR` after them; each class gets a value inside its own bin. No NaN
    or masked cell reaches cartopy, whose wrapped meshes (global maps) can paint masked
    cells with a data colour (seen with cartopy 0.26).
    """
    n = 256
    lut = cmap.resampled(n)(np.linspace(0.0, 1.0, n))
    colours = np.vstack([to_rgba_array([ZERO_COLOR]), lut, to_rgba_array([NODATA_COLOR])])
    listed = ListedColormap(colours).with_extremes(bad="none")
    d = (vmax - vmin) / n
    norm = Normalize(vmin=vmin - d, vmax=vmax + d)
    # below/above the limits: the end colours (half a bin inside, clear of the class edges)
    out = np.clip(values, vmin + 0.5 * d, vmax - 0.5 * d)
    out[~np.isfinite(values)] = vmax + 0.5 * d
    if no_melt is not None:
        out[no_melt] = vmin - 0.5 * d
    return out, listed, norm


_RADIAL = (
    "NorthPolarStereo",
    "SouthPolarStereo",
    "Stereographic",
    "Orthographic",
    "AzimuthalEquidistant",
    "LambertAzimuthalEqualArea",
    "NearsidePerspective",
    "Gnomonic",
    "Geostationary",
)


def _label_layout(proj: Any, global_view: bool, ax: Any) -> dict[str, Any]:
    """Where the graticule labels go for this kind of projection (tested by eye, cartopy 0.26).

    Rectangular views: longitudes at the bottom, latitudes on the left. Azimuthal (polar)
    views: longitudes on the sides and bottom (and top when the view holds the projection
    centre, e.g. the pole), latitudes inline. Global views of projections with a curved
    outline: latitudes along the left outline, longitudes along the bottom.
    """
    if type(proj).__name__ in _RADIAL:
        (x0, x1), (y0, y1) = ax.get_xlim(), ax.get_ylim()
        centred = min(x0, x1) < 0.0 < max(x0, x1) and min(y0, y1) < 0.0 < max(y0, y1)
        sides: dict[str, Any] = {"bottom": "x", "left": ["x", "y"], "right": "x"}
        if centred:
            sides["top"] = "x"
        return {"draw_labels": sides, "y_inline": True, "ylim": None, "top": centred, "right": True}
    if global_view and type(proj).__name__ not in (
        "PlateCarree",
        "Mercator",
        "Miller",
        "LambertCylindrical",
    ):
        return {
            "draw_labels": {"bottom": "x", "left": "y", "geo": "y"},
            "y_inline": False,
            "ylim": None,
            "top": False,
            "right": False,
        }
    return {
        "draw_labels": {"bottom": "x", "left": "y"},
        "y_inline": False,
        "ylim": None,
        "top": False,
        "right": False,
    }


def _footprint(da: Any, data_crs: Any, proj: Any) -> tuple[float, float, float, float] | None:
    """Bounding box (x0, x1, y0, y1) of a projected grid's outline in ``proj``; None if lon/lat."""
    if da.rio.crs is None or da.rio.crs.is_geographic:
        return None
    west, south, east, north = (float(v) for v in da.rio.bounds())
    t = np.linspace(0.0, 1.0, 101)
    xs = np.concatenate(
        [
            west + (east - west) * t,
            np.full_like(t, east),
            east - (east - west) * t,
            np.full_like(t, west),
        ]
    )
    ys = np.concatenate(
        [
            np.full_like(t, south),
            south + (north - south) * t,
            np.full_like(t, north),
            north - (north - south) * t,
        ]
    )
    pts = proj.transform_points(data_crs, xs, ys)
    ok = np.isfinite(pts[:, 0]) & np.isfinite(pts[:, 1])
    if not ok.any():
        return None
    return (
        float(pts[ok, 0].min()),
        float(pts[ok, 0].max()),
        float(pts[ok, 1].min()),
        float(pts[ok, 1].max()),
    )


def _set_view(
    ax: Any,
    proj: Any,
    proj_name: str,
    region: Region,
    footprint: tuple[float, float, float, float] | None,
) -> bool:
    """Set the map extent; return True for a global view."""
    if footprint is not None:
        ax.set_extent(footprint, crs=proj)
        return False
    if region[1] - region[0] >= 359.0 and region[3] - region[2] >= 179.0:
        ax.set_global()
        return True
    try:
        ax.set_extent(region, crs=ccrs.PlateCarree())
    except ValueError as exc:
        msg = (
            f"region {region} cannot be shown in projection {proj_name} ({exc}). "
            "Choose another projection or a smaller region."
        )
        raise InputError(msg) from exc
    return False


def _cell_edges(da: Any, step: int) -> tuple[np.ndarray, np.ndarray]:
    tr = da.rio.transform()
    ny, nx = da.shape
    ix = np.minimum(np.arange(0, nx + step, step), nx)
    iy = np.minimum(np.arange(0, ny + step, step), ny)
    ix, iy = np.unique(ix), np.unique(iy)
    return tr.c + tr.a * ix, tr.f + tr.e * iy


def _halo(width: float) -> list[Any]:
    return [mpe.withStroke(linewidth=width, foreground="white")]


def _load_age(run: RunDir, age_contours: bool | Any) -> Any:
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


def make_map_figure(
    run: RunDir | str | Path,
    variable: str,
    *,
    projection: str | ccrs.Projection | None = None,
    region: Sequence[float] | None = None,
    stations: str | Path | Stations | None = None,
    candidates: str | Path | Sequence[Any] | None = None,
    age_contours: bool = False,
    coastlines: str | Path | bool | None = None,
    dpi: float = 150,
    width_in: float = 8.0,
) -> tuple[Figure, MapInfo]:
    """Draw one variable of a run; return the figure (on an Agg canvas) and what was drawn.

    Parameters
    ----------
    run : RunDir, str or Path
        The run directory (see :mod:`lidmelt.grids.rundir`).
    variable : str
        An output variable, or an aligned input (e.g. ``plate_age_ma``).
    projection : str, cartopy Projection or None
        None or ``"auto"``: :func:`choose_projection`; a name: :func:`make_projection`.
    region : (west, east, south, north) or None
        Map extent in degrees; default the grid's extent.
    stations : path, Stations or None
        Points to overlay (:func:`load_stations`).
    candidates : path, list of geometries or None
        Polygons (lon/lat) to outline (:func:`load_candidates`).
    age_contours : bool
        Draw contours of the run's ``plate_age_ma`` input (Ma) when the run has one.
    coastlines : path, bool or None
        A coastline file; None: look locally (:func:`find_coastlines`) and warn if none;
        False: draw none, silently.
    dpi : float
        Resolution, dots per inch; the figure is ``width_in * dpi`` pixels wide.
    width_in : float
        Figure width in inches; the height follows from the map's aspect.

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
    _forbid_downloads()
    run = _as_run(run)
    check_variable(run, variable)
    if not (math.isfinite(width_in) and 1.0 <= width_in <= 40.0):
        msg = f"width_in={width_in!r} in: expected 1 to 40 inches (e.g. 3.5 or 7.2)."
        raise InputError(msg)
    if not (math.isfinite(dpi) and 10.0 <= dpi <= 1200.0):
        msg = f"dpi={dpi!r}: expected 10 to 1200 dots per inch (e.g. 150 or 300)."
        raise InputError(msg)
    if isinstance(stations, str | Path):
        stations = load_stations(stations)
    if isinstance(candidates, str | Path):
        candidates = load_candidates(candidates)
    coast_path = resolve_coastlines(coastlines)

    da = run.open(variable)
    data_crs = _data_crs(da)
    grid_region = _grid_region(da)
    region_given = region is not None
    region = check_region(region) if region is not None else grid_region
    if isinstance(projection, ccrs.Projection):
        proj, proj_name = projection, type(projection).__name__
    else:
        proj, proj_name = make_projection(projection, region)
    style = STYLES.get(variable, _DEFAULT_STYLE)
    units = str(da.attrs.get("units", ""))
    long_name = _long_name(variable, da.attrs)
    age = _load_age(run, age_contours)

    values = np.asarray(da.values, dtype=float)
    in_view = values[_region_mask(da, region)] if region_given else values
    vmin, vmax, extend = colour_limits(in_view, zero_is_no_melt=style.zero_is_no_melt)
    no_melt = _no_melt_mask(run, variable, values, style)
    summary = run.summary
    fs = _font_size(width_in)
    pt = 1.0 / 72.0

    fig = Figure(figsize=(width_in, width_in * 0.75), dpi=dpi, facecolor="white")
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0.1, 0.3, 0.8, 0.6), projection=proj)
    global_view = _set_view(
        ax,
        proj,
        proj_name,
        region,
        footprint=None if region_given else _footprint(da, data_crs, proj),
    )
    labels = _label_layout(proj, global_view, ax)
    x0, x1 = ax.get_xlim()
    y0, y1 = ax.get_ylim()
    aspect = abs(y1 - y0) / abs(x1 - x0)

    # Horizontal layout (inches): latitude labels on the left, map, a narrow right margin.
    left = 0.3 + 5.0 * 0.6 * fs * pt
    right = left if labels["right"] else 0.35
    map_w = width_in - left - right
    map_h = map_w * aspect
    if map_h > 1.15 * map_w:  # tall regions: a narrower map, centred
        map_h = 1.15 * map_w
        map_w = map_h / aspect
        left += (width_in - left - right - map_w) / 2.0

    # Legend entries, known before drawing so that the layout can reserve their space.
    zero_color = ZERO_COLOR if no_melt is not None else None
    handles: list[Any] = [Patch(facecolor=NODATA_COLOR, edgecolor="0.3", lw=0.5, label="no data")]
    if zero_color is not None:
        handles.append(Patch(facecolor=zero_color, edgecolor="0.3", lw=0.5, label="no melting"))
    if coast_path is not None:
        handles.append(Line2D([], [], color="black", lw=0.9, label="coastline"))
    if age is not None:
        handles.append(
            Line2D([], [], color="0.1", lw=0.7, ls=(0, (5.0, 2.0)), label="plate age (Ma)")
        )
    if candidates:
        handles.append(
            Line2D(
                [],
                [],
                color=_CANDIDATE_COLOR,
                lw=1.1,
                path_effects=_halo(2.2),
                label="candidate region",
            )
        )
    n_stations = len(stations.lon) if stations is not None else 0
    marker_size = max(3.0, 0.6 * fs)
    if n_stations:
        handles.append(
            Line2D(
                [],
                [],
                ls="none",
                marker="^",
                ms=marker_size,
                mfc="black",
                mec="white",
                mew=0.7,
                label="station",
            )
        )

    # Colour bar (left 55 % of the map width) with the legend to its right; measured legend.
    cb_w = 0.55 * map_w
    leg_x = left + cb_w + 0.3
    leg_avail = width_in - leg_x - 0.1
    leg_kw = {
        "loc": "upper left",
        "frameon": False,
        "fontsize": 0.9 * fs,
        "handlelength": 1.6,
        "handleheight": 0.9,
        "borderaxespad": 0.0,
        "borderpad": 0.0,
        "columnspacing": 1.2,
        "labelspacing": 0.35,
    }
    renderer = fig.canvas.get_renderer()
    legend = None
    for ncol in (2, 1) if len(handles) > 3 else (1,):
        if legend is not None:
            legend.remove()
        legend = fig.legend(handles=handles, ncol=ncol, **leg_kw)
        box = legend.get_window_extent(renderer)
        leg_w, leg_h = box.width / fig.dpi, box.height / fig.dpi
        if leg_w <= leg_avail:
            break
    legend_below = leg_w > leg_avail  # narrow figures: the legend goes under the colour bar
    if legend_below:
        cb_w = map_w
        leg_x = left

    # Text that decides the rest of the layout, wrapped to measured widths.
    def wrap(text: str, size: float, width: float, **kw: Any) -> list[str]:
        return _wrap_measured(text, renderer, FontProperties(size=size, **kw), width * fig.dpi)

    text_w = width_in - left - 0.1
    title = long_name
    subtitle = _model_line(summary)
    title_lines = wrap(title, 1.2 * fs, text_w, weight="bold")
    subtitle_lines = wrap(subtitle, fs, text_w)
    cbar_label = f"{long_name} ({_unit_label(units)})"
    cbar_lines = wrap(cbar_label, fs, cb_w)
    caption = _caption(
        summary,
        style=style,
        no_melt=no_melt is not None,
        extend=extend,
        proj_name=proj_name,
        age=age is not None,
        coast_path=coast_path,
    )
    cap_fs = 0.85 * fs
    cap_lines = wrap(caption, cap_fs, max(map_w + right - 0.15, text_w - 0.1))

    # Vertical layout (inches from the top).
    title_h = len(title_lines) * 1.2 * fs * pt * 1.3
    top_block = 0.12 + title_h + len(subtitle_lines) * 1.35 * fs * pt + 0.1
    if labels["top"]:
        top_block += 0.1 + 1.35 * fs * pt
    xlabel_block = 0.1 + 1.35 * fs * pt
    cbar_h = max(0.1, 1.1 * fs * pt)
    cbar_text_h = 0.05 + 1.35 * fs * pt + len(cbar_lines) * 1.3 * fs * pt
    cb_top = top_block + map_h + xlabel_block + 0.16
    if legend_below:
        leg_top = cb_top + cbar_h + cbar_text_h + 0.12
        below_end = leg_top + leg_h
    else:
        leg_top = cb_top - 0.04
        below_end = max(cb_top + cbar_h + cbar_text_h, leg_top + leg_h)
    cap_top = below_end + 0.14
    height = cap_top + len(cap_lines) * 1.3 * cap_fs * pt + 0.12
    # Agg truncates the size in pixels: aim a hair above whole pixels so that the image is
    # exactly round(width_in * dpi) pixels wide (3.3 in x 300 dpi would otherwise give 989).
    height = (math.ceil(height * dpi) + 0.01) / dpi
    fig.set_size_inches((round(width_in * dpi) + 0.01) / dpi, height)

    def fx(inches: float) -> float:
        return inches / width_in

    def fy(inches_from_top: float) -> float:
        return 1.0 - inches_from_top / height

    ax.set_position((fx(left), fy(top_block + map_h), fx(map_w), map_h / height))
    ax.set_facecolor(NODATA_COLOR)
    legend.set_bbox_to_anchor((fx(leg_x), fy(leg_top)), transform=fig.transFigure)

    # The data layer, thinned to about two cells per output pixel.
    step = _decimation(values.shape, (map_w * dpi, map_h * dpi))
    xe, ye = _cell_edges(da, step)
    cmap = colormaps[style.cmap].with_extremes(bad=NODATA_COLOR)
    mesh, cmap_draw, norm_draw = _encode_classes(
        values[::step, ::step],
        cmap,
        vmin,
        vmax,
        None if no_melt is None else no_melt[::step, ::step],
    )
    ax.pcolormesh(
        xe,
        ye,
        mesh,
        cmap=cmap_draw,
        norm=norm_draw,
        shading="flat",
        rasterized=True,
        transform=data_crs,
        zorder=1,
    )
    norm = Normalize(vmin=vmin, vmax=vmax)

    # Overlays.
    if coast_path is not None:
        _draw_coastlines(ax, coast_path)
    age_levels = _draw_age_contours(ax, age, fs) if age is not None else ()
    n_candidates = len(candidates) if candidates else 0
    if n_candidates:
        ax.add_geometries(
            candidates,
            crs=ccrs.PlateCarree(),
            facecolor="none",
            edgecolor="white",
            linewidth=2.2,
            zorder=4,
        )
        ax.add_geometries(
            candidates,
            crs=ccrs.PlateCarree(),
            facecolor="none",
            edgecolor=_CANDIDATE_COLOR,
            linewidth=1.1,
            zorder=5,
        )
    if n_stations:
        ax.plot(
            stations.lon,
            stations.lat,
            ls="none",
            marker="^",
            ms=marker_size,
            mfc="black",
            mec="white",
            mew=0.7,
            transform=ccrs.PlateCarree(),
            zorder=6,
        )
        if stations.names and n_stations <= 30:
            geo = ccrs.PlateCarree()._as_mpl_transform(ax)
            for lon, lat, name in zip(stations.lon, stations.lat, stations.names, strict=True):
                ax.annotate(
                    name,
                    (lon, lat),
                    xycoords=geo,
                    xytext=(4, 3),
                    textcoords="offset points",
                    fontsize=0.8 * fs,
                    path_effects=_halo(2.0),
                    zorder=7,
                    annotation_clip=True,
                )

    # Graticule: steps for about one line per inch of map, labels per _label_layout.
    lon_step = _nice_step(region[1] - region[0], target=int(np.clip(map_w / 1.1, 3, 6)))
    lat_step = _nice_step(region[3] - region[2], target=int(np.clip(map_h / 1.0, 3, 6)))
    xlocs = lon_step * np.arange(math.ceil(-360.0 / lon_step), math.floor(720.0 / lon_step) + 1)
    ylocs = lat_step * np.arange(math.ceil(-90.0 / lat_step), math.floor(90.0 / lat_step) + 1)
    if global_view:  # the edge meridian would be labelled twice
        lon0 = float(proj.proj4_params.get("lon_0", 0.0))
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
        xlabel_style={"size": fs},
        ylabel_style={"size": fs},
        zorder=3,
    )
    gl.rotate_labels = False
    ax.spines["geo"].set_linewidth(0.8)

    # Titles, colour bar, caption.
    fig.text(
        fx(left),
        fy(0.12),
        "\n".join(title_lines),
        ha="left",
        va="top",
        fontsize=1.2 * fs,
        fontweight="bold",
        linespacing=1.2,
    )
    fig.text(
        fx(left),
        fy(0.12 + title_h),
        "\n".join(subtitle_lines),
        ha="left",
        va="top",
        fontsize=fs,
        linespacing=1.25,
    )
    cax = fig.add_axes((fx(left), fy(cb_top + cbar_h), fx(cb_w), cbar_h / height))
    cbar = fig.colorbar(
        ScalarMappable(norm=norm, cmap=cmap),
        cax=cax,
        orientation="horizontal",
        extend=extend,
        extendfrac=0.04,
    )
    cbar.ax.tick_params(labelsize=fs, length=2.5, width=0.6, pad=2)
    cbar.locator = MaxNLocator(nbins=6 if cb_w > 3.0 else 4)
    cbar.update_ticks()
    cbar.set_label("\n".join(cbar_lines), fontsize=fs, labelpad=3)
    cbar.outline.set_linewidth(0.6)
    fig.text(
        fx(left),
        fy(cap_top),
        "\n".join(cap_lines),
        ha="left",
        va="top",
        fontsize=cap_fs,
        color="0.15",
        linespacing=1.3,
    )

    info = MapInfo(
        variable=variable,
        units=units,
        long_name=long_name,
        colorbar_label=cbar.ax.get_xlabel(),
        cmap=style.cmap,
        vmin=vmin,
        vmax=vmax,
        extend=extend,
        projection=proj_name,
        region=region,
        title=title,
        caption=caption,
        coastlines=coast_path,
        n_stations=n_stations,
        n_candidates=n_candidates,
        age_levels=age_levels,
        zero_color=zero_color,
        decimation=step,
        ax=ax,
        colorbar=cbar,
        gridliner=gl,
    )
    return fig, info


def _wrap_measured(text: str, renderer: Any, prop: Any, width_px: float) -> list[str]:
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


def _caption(
    summary: dict[str, Any],
    *,
    style: VariableStyle,
    no_melt: bool,
    extend: str,
    proj_name: str,
    age: bool,
    coast_path: Path | None,
) -> str:
    lid = _describe_lid(summary)
    if style.zero_is_no_melt:
        limits = (
            f"Colour scale from 0 to the {MELT_TOP_PERCENTILE:g}th percentile of the melting "
            "cells; white: no melting (exactly 0)"
        )
    else:
        limits = (
            f"Colour limits: {PERCENTILES[0]:g}nd–{PERCENTILES[1]:g}th percentiles of "
            "the valid cells"
        )
        if no_melt:
            limits += "; white: no melting (the variable is undefined there)"
    if extend != "neither":
        limits += "; arrows: values beyond the limits"
    parts = [
        f"{lid[:1].upper()}{lid[1:]}.",
        f"{limits}; grey: no data.",
        f"Projection: {proj_name}.",
    ]
    if age:
        parts.append("Contours: plate age (Ma).")
    if coast_path is None:
        parts.append("No coastlines drawn (no local coastline data).")
    parts.append(f"lidmelt {summary.get('lidmelt_version', __version__)}.")
    return " ".join(parts)


def _draw_coastlines(ax: Any, path: Path) -> None:
    """Draw a local coastline file (never a download)."""
    try:
        from cartopy.io import shapereader

        geoms = list(shapereader.Reader(path).geometries())
    except Exception:  # not a shapefile cartopy reads: try geopandas
        geoms = list(_read_vector(path, "coastlines").geometry)
    ax.add_geometries(
        geoms, crs=ccrs.PlateCarree(), facecolor="none", edgecolor="black", linewidth=0.9, zorder=2
    )


def _draw_age_contours(ax: Any, age: Any, fs: float) -> tuple[float, ...]:
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
        linewidths=0.7,
        linestyles=[(0, (5.0, 2.0))],
        transform=_data_crs(age),
        zorder=3,
    )
    labels = ax.clabel(cs, fmt="%g", fontsize=0.75 * fs, inline=True, inline_spacing=2)
    to_axes = ax.transData + ax.transAxes.inverted()
    for text in labels:
        u, v = to_axes.transform(text.get_position())
        if not (0.03 < u < 0.97 and 0.03 < v < 0.97):  # a label cut by the frame: drop it
            text.remove()
        else:
            text.set_path_effects(_halo(1.8))
    return tuple(float(v) for v in levels)


# --------------------------------------------------------------------------------------------
# Writing


@contextlib.contextmanager
def atomic_output(path: str | Path) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it to ``path`` when the block succeeds.

    The temporary name keeps the suffix (so writers that look at it pick the right format) and
    is removed if the block raises.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.stem}.tmp-{uuid.uuid4().hex[:8]}{path.suffix}")
    try:
        yield tmp
        tmp.replace(path)
    finally:
        if tmp.exists():
            tmp.unlink()


def save_figure(fig: Figure, path: str | Path, *, dpi: float | None = None) -> Path:
    """Save ``fig`` atomically; the format follows the suffix (png, pdf or svg)."""
    path = Path(path)
    fmt = path.suffix.lower().lstrip(".")
    if fmt not in FORMATS:
        msg = (
            f"figure file {str(path)!r} has suffix {path.suffix!r}; expected one of "
            f"{', '.join('.' + f for f in FORMATS)}. Change the file name or --format."
        )
        raise InputError(msg)
    metadata: dict[str, Any] = {"Creator": f"lidmelt {__version__}"}
    if fmt == "png":
        metadata = {"Software": f"lidmelt {__version__}"}
    elif fmt == "pdf":
        metadata["CreationDate"] = None  # reproducible files
    elif fmt == "svg":
        metadata = {"Creator": f"lidmelt {__version__}", "Date": None}
    with atomic_output(path) as tmp:
        fig.savefig(tmp, format=fmt, dpi=dpi or fig.dpi, metadata=metadata)
    return path


def draw_map(
    run: RunDir | str | Path,
    variable: str,
    *,
    path: str | Path,
    projection: str | ccrs.Projection | None = None,
    region: Sequence[float] | None = None,
    stations: str | Path | Stations | None = None,
    candidates: str | Path | Sequence[Any] | None = None,
    age_contours: bool = False,
    coastlines: str | Path | bool | None = None,
    dpi: float = 150,
    width_in: float = 8.0,
) -> Path:
    """Draw one variable of a run and write it to ``path`` (png, pdf or svg by suffix).

    The options are those of :func:`make_map_figure`; the written image is ``width_in * dpi``
    pixels wide. Returns ``path``.
    """
    path = Path(path)
    if path.suffix.lower().lstrip(".") not in FORMATS:
        msg = (
            f"figure file {str(path)!r}: expected a suffix among "
            f"{', '.join('.' + f for f in FORMATS)}."
        )
        raise InputError(msg)
    fig, _ = make_map_figure(
        run,
        variable,
        projection=projection,
        region=region,
        stations=stations,
        candidates=candidates,
        age_contours=age_contours,
        coastlines=coastlines,
        dpi=dpi,
        width_in=width_in,
    )
    return save_figure(fig, path, dpi=dpi)


def draw_run_maps(
    run: RunDir | str | Path,
    *,
    out_dir: str | Path | None = None,
    variables: Sequence[str] | None = None,
    fmt: str = "png",
    projection: str | ccrs.Projection | None = None,
    region: Sequence[float] | None = None,
    stations: str | Path | Stations | None = None,
    candidates: str | Path | Sequence[Any] | None = None,
    age_contours: bool = False,
    coastlines: str | Path | bool | None = None,
    dpi: float = 150,
    width_in: float = 8.0,
) -> list[Path]:
    """Draw every output variable of a run (or ``variables``) to ``out_dir/<variable>.<fmt>``.

    Parameters
    ----------
    run : RunDir, str or Path
        The run directory.
    out_dir : str, Path or None
        Destination folder; default ``RUN_DIR/maps``.
    variables : list of str or None
        Variables to draw; default every output of the run.
    fmt : {"png", "pdf", "svg"}
        Figure format.
    projection, region, stations, candidates, age_contours, coastlines, dpi, width_in
        As for :func:`make_map_figure`. Overlay files are read once, all options are checked
        before the first figure is drawn, and a missing coastline is reported once.

    Returns
    -------
    list of Path
        The written figure files, in the order of ``variables``.
    """
    run = _as_run(run)
    fmt = str(fmt).lower().lstrip(".")
    if fmt not in FORMATS:
        msg = f"figure format {fmt!r}: expected one of {', '.join(FORMATS)}."
        raise InputError(msg)
    names = list(variables) if variables else run.outputs
    if not names:
        msg = (
            f"run {str(run.path)!r} lists no output variables; there is nothing to map. "
            "Run 'lidmelt run' again."
        )
        raise InputError(msg)
    for name in names:
        check_variable(run, name)
    if region is not None:
        region = check_region(region)
    if projection is not None and not isinstance(projection, ccrs.Projection):
        make_projection(projection, region or (-10.0, 10.0, -10.0, 10.0))  # name check
    if isinstance(stations, str | Path):
        stations = load_stations(stations)
    if isinstance(candidates, str | Path):
        candidates = load_candidates(candidates)
    coast = resolve_coastlines(coastlines)
    age = _load_age(run, age_contours)
    out = Path(out_dir) if out_dir is not None else run.path / "maps"
    written = []
    for name in names:
        fig, _ = make_map_figure(
            run,
            name,
            projection=projection,
            region=region,
            stations=stations,
            candidates=candidates,
            age_contours=age if age is not None else False,
            coastlines=coast if coast is not None else False,
            dpi=dpi,
            width_in=width_in,
        )
        written.append(save_figure(fig, out / f"{name}.{fmt}", dpi=dpi))
    return written
