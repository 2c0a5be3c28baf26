"""Where things go on a map figure: projections, extents, graticule labels, sizes, text.

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
5. other regional views (wide regions that straddle the equator beyond +-30 deg, up to 180 deg
   of longitude and 120 deg of latitude): ``LambertAzimuthalEqualArea`` centred on the region
   (equal-area, its distortion grows only with distance from the centre; Snyder 1987, from
   memory), so that a basin is not drawn in a world projection;
6. anything else: ``Robinson``.

Every projection is centred on lon0 (and lat0 where it takes one). Any other cartopy projection
can be asked for by class name (case-insensitive), or as ``EPSG:<code>`` for a projected CRS.
"""

from __future__ import annotations

import inspect
import math
from collections.abc import Sequence
from typing import Any

import cartopy.crs as ccrs
import numpy as np
from matplotlib.ticker import FixedLocator

from lidmelt._errors import InputError

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


def nice_step(span: float, *, target: int = 5) -> float:
    """A graticule step (deg) from 1-2-2.5-5 multiples giving about ``target`` lines (common)."""
    steps = [0.1, 0.2, 0.25, 0.5, 1, 2, 2.5, 5, 10, 15, 20, 30, 45, 60, 90]
    for step in steps:
        if span / step <= target + 1e-9:  # grid bounds carry float noise (30.000000000000004)
            return float(step)
    return 90.0


def one_sixth_parallels(south: float, north: float, lat0: float) -> tuple[float, float]:
    """Conic standard parallels one sixth of the span inside S and N, on lat0's side."""
    span = north - south
    p1, p2 = south + span / 6.0, north - span / 6.0
    sign = 1.0 if lat0 >= 0 else -1.0
    # Both parallels must lie in lat0's hemisphere, or the cone degenerates.
    p1, p2 = (sign * max(1.0, sign * p) for p in (p1, p2))
    return (p1, p2) if p1 != p2 else (p1, p2 + sign * 1.0)


def lambert_cutoff(south: float, north: float, lat0: float) -> float:
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
        parallels = one_sixth_parallels(south, north, lat0)
        if lon_span <= 60.0:
            proj = ccrs.LambertConformal(
                central_longitude=lon0,
                central_latitude=lat0,
                standard_parallels=parallels,
                cutoff=lambert_cutoff(south, north, lat0),
            )
            return proj, "Lambert conformal conic (automatic: mid latitudes)"
        proj = ccrs.AlbersEqualArea(
            central_longitude=lon0, central_latitude=lat0, standard_parallels=parallels
        )
        return proj, "Albers equal-area conic (automatic: wide mid-latitude region)"
    if lon_span <= 180.0 and lat_span <= 120.0:
        proj = ccrs.LambertAzimuthalEqualArea(central_longitude=lon0, central_latitude=lat0)
        return proj, "Lambert azimuthal equal-area (automatic: regional, across the equator)"
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
        kwargs["standard_parallels"] = one_sixth_parallels(south, north, lat0)
    if "cutoff" in params:
        kwargs["cutoff"] = lambert_cutoff(south, north, lat0)
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
# Grids on the map


def data_crs(da: Any) -> Any:
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
        pcrs = pyproj.CRS.from_user_input(crs.to_wkt())
        code = pcrs.to_epsg()
        # the EPSG entry carries the area of use, which cartopy needs for the projection's
        # bounds (a GeoTIFF's WKT may lack it: EPSG:6933 drew nothing but raised)
        return ccrs.Projection(pyproj.CRS.from_epsg(code) if code else pcrs)
    except Exception as exc:  # cartopy/pyproj raise several types
        msg = (
            f"the grid CRS of {da.name!r} ({crs.to_string()}) cannot be used by cartopy "
            f"({exc}). Re-run on a lon/lat target grid (EPSG:4326)."
        )
        raise InputError(msg) from exc


def grid_region(da: Any) -> Region:
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


def region_mask(da: Any, region: Region) -> np.ndarray:
    """Cells of a lon/lat grid whose centres lie in ``region`` (all cells for other CRSs)."""
    if da.rio.crs is None or not da.rio.crs.is_geographic:
        return np.ones(da.shape, dtype=bool)
    west, east, south, north = region
    lon = np.asarray(da["x"].values, dtype=float)
    lat = np.asarray(da["y"].values, dtype=float)
    lon_in = ((lon - west) % 360.0) <= (east - west)
    lat_in = (lat >= south) & (lat <= north)
    return lat_in[:, None] & lon_in[None, :]


def font_size(width_in: float) -> float:
    """Base font size (pt) for a figure ``width_in`` wide: 7 pt at 3.5 in, 9 pt at 8 in."""
    return float(np.clip(5.5 + 0.45 * width_in, 7.0, 10.5))


def decimation(shape: tuple[int, int], map_px: tuple[float, float]) -> int:
    """Stride that keeps about two grid cells per output pixel (no visible loss)."""
    ny, nx = shape
    return max(1, math.ceil(max(nx / (2.0 * map_px[0]), ny / (2.0 * map_px[1]))))


_RADIAL = (
    "NorthPolarStereo",
    "SouthPolarStereo",
    "Stereographic",
    "Orthographic",
    "AzimuthalEquidistant",
    "NearsidePerspective",
    "Gnomonic",
    "Geostationary",
)


def label_layout(proj: Any, global_view: bool, ax: Any) -> dict[str, Any]:
    """Where the graticule labels go for this kind of projection (tested by eye, cartopy 0.26).

    Rectangular views: longitudes at the bottom, latitudes on the left and the right.
    Azimuthal (polar) views: longitudes on the sides and bottom (and top when the view holds
    the projection centre, e.g. the pole), latitudes inline. Global views of projections with
    a curved outline: latitudes along the left outline, longitudes along the bottom.
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
        "draw_labels": {"bottom": "x", "left": "y", "right": "y"},
        "y_inline": False,
        "ylim": None,
        "top": False,
        "right": True,
    }


def footprint(da: Any, src_crs: Any, proj: Any) -> tuple[float, float, float, float] | None:
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
    pts = proj.transform_points(src_crs, xs, ys)
    ok = np.isfinite(pts[:, 0]) & np.isfinite(pts[:, 1])
    if not ok.any():
        return None
    return (
        float(pts[ok, 0].min()),
        float(pts[ok, 0].max()),
        float(pts[ok, 1].min()),
        float(pts[ok, 1].max()),
    )


def set_view(
    ax: Any,
    proj: Any,
    proj_name: str,
    region: Region,
    box: tuple[float, float, float, float] | None,
) -> bool:
    """Set the map extent (``box`` in projected units if given, else ``region``); True if global."""
    if box is not None:
        ax.set_extent(box, crs=proj)
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


def cell_edges(da: Any, step: int) -> tuple[np.ndarray, np.ndarray]:
    """Cell edges (x, y in the grid CRS) of every ``step``-th cell, for ``pcolormesh``."""
    tr = da.rio.transform()
    ny, nx = da.shape
    ix = np.minimum(np.arange(0, nx + step, step), nx)
    iy = np.minimum(np.arange(0, ny + step, step), ny)
    ix, iy = np.unique(ix), np.unique(iy)
    return tr.c + tr.a * ix, tr.f + tr.e * iy


def outside_grid(ax: Any, da: Any, src_crs: Any, *, n: int = 24) -> bool:
    """Whether the map frame shows area beyond the grid (sampled on an n x n lattice)."""
    (x0, x1), (y0, y1) = ax.get_xlim(), ax.get_ylim()
    gx, gy = np.meshgrid(np.linspace(x0, x1, n), np.linspace(y0, y1, n))
    pts = src_crs.transform_points(ax.projection, gx.ravel(), gy.ravel())
    west, south, east, north = (float(v) for v in da.rio.bounds())
    tr = da.rio.transform()
    tol_x, tol_y = abs(tr.a), abs(tr.e)
    x, y = pts[:, 0], pts[:, 1]
    ok = np.isfinite(x) & np.isfinite(y)
    if isinstance(src_crs, ccrs.PlateCarree) and east - west >= 359.0:
        inside_x = np.ones(x.shape, bool)
    elif isinstance(src_crs, ccrs.PlateCarree):
        inside_x = ((x - west + tol_x) % 360.0) <= (east - west + 2 * tol_x)
    else:
        inside_x = (x >= west - tol_x) & (x <= east + tol_x)
    inside = ok & inside_x & (y >= south - tol_y) & (y <= north + tol_y)
    return bool((~inside).any())


def draw_graticule(
    ax: Any,
    proj: Any,
    region: Region,
    *,
    size_in: tuple[float, float],
    fs: float,
    labels: dict[str, Any],
    global_view: bool,
) -> Any:
    """Graticule lines about every inch (at least four per axis), labelled per :func:`label_layout`.

    ``size_in`` is the map's (width, height) in inches.
    """
    map_w, map_h = size_in
    lon_step = nice_step(region[1] - region[0], target=int(np.clip(map_w / 1.1, 4, 7)))
    lat_step = nice_step(region[3] - region[2], target=int(np.clip(map_h / 0.8, 4, 8)))
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
    return gl
