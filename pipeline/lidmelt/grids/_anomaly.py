"""Thermal-anomaly grids built from idealised plumes.

A :class:`Plume` is a radially symmetric excess temperature centred on a point; its profile is
a function of the geodesic distance ``d`` on the WGS 84 ellipsoid from the plume centre.
:func:`plume_anomaly` evaluates any number of plumes on a :class:`~lidmelt.grids._grid.Grid`
and adds them to a constant or a background grid.
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass, replace
from typing import Any

import numpy as np
import xarray as xr
from pyproj import Geod

from lidmelt._errors import GridError, InputError
from lidmelt.grids._grid import Grid
from lidmelt.grids._io import normalise_units

#: Profile names accepted by :class:`Plume`.
PLUME_SHAPES = ("gaussian", "cosine", "top-hat")

#: Gaussian contributions beyond this many radii are set to zero: exp(-36) = 2.3e-16 of the
#: peak, below float64 resolution relative to the peak.
GAUSSIAN_CUTOFF_RADII = 6.0

# Largest |peak excess| accepted: anomalies of 1000 K or more are outside any melting model's
# range and usually mean a potential temperature was given instead of an excess.
_MAX_PEAK_K = 1000.0

# WGS 84 semi-major axis a = 6378137 m and flattening 1/298.257223563 (NIMA TR8350.2, 2000,
# table 3.1 [from memory]); the smallest meridional radius of curvature, at the equator, is
# a (1 - e^2) with e^2 = f (2 - f). Geodesic distance >= M_min * |delta latitude| (radians),
# which bounds the rows a plume can reach.
_WGS84_A_M = 6378137.0
_WGS84_F = 1.0 / 298.257223563
_MERIDIAN_MIN_M = _WGS84_A_M * (1.0 - _WGS84_F * (2.0 - _WGS84_F))
_GEOD = Geod(ellps="WGS84")

# cells per block evaluated at once (bounds temporary memory to a few tens of MB)
_BLOCK_CELLS = 1 << 20
#: Up to this many plumes, each is a layer of its own in a lazy anomaly (its unit profile is
#: shared by runs whose plumes differ only in their peaks, e.g. ensemble members); more are
#: summed in one task per block: dask's graph optimisation grows with the square of the layers
#: (1000 plumes took minutes before the first block).
SHARED_PLUMES = 32


@dataclass(frozen=True)
class Plume:
    """A radially symmetric thermal anomaly.

    Parameters
    ----------
    longitude : float
        Centre longitude, degrees east (-360..360; any convention, e.g. 190 = -170).
    latitude : float
        Centre latitude, degrees north (-90..90).
    radius_km : float
        Radius r of the profile, km (> 0, at most 20000 km, about half a meridian).
    peak_excess_k : float
        Excess temperature A at the centre, K (negative for a cold anomaly; |A| < 1000 K).
    shape : {"gaussian", "cosine", "top-hat"}
        Profile of the excess at geodesic distance d from the centre:

        * ``"gaussian"``: ``A exp(-(d/r)^2)``; r is the e-folding half-width (the excess is
          A/e at d = r). Set to 0 beyond 6 r (below 2.3e-16 A).
        * ``"cosine"``: ``A cos^2(pi d / (2 r))`` for d < r, 0 beyond (A/2 at d = r/2).
        * ``"top-hat"``: ``A`` for d <= r, 0 beyond.

    Raises
    ------
    InputError
        If a value is not finite or out of range, or the shape is unknown.
    """

    longitude: float
    latitude: float
    radius_km: float
    peak_excess_k: float
    shape: str = "gaussian"

    def __post_init__(self) -> None:
        for field in ("longitude", "latitude", "radius_km", "peak_excess_k"):
            value = getattr(self, field)
            if isinstance(value, bool) or not isinstance(value, int | float | np.number):
                msg = f"plume {field}={value!r} must be a number."
                raise InputError(msg)
            if not math.isfinite(float(value)):
                msg = f"plume {field}={value!r} must be finite."
                raise InputError(msg)
            object.__setattr__(self, field, float(value))
        if abs(self.latitude) > 90.0:
            msg = (
                f"plume latitude={self.latitude!r} is outside -90..90 degrees north. "
                "Check that longitude and latitude are not swapped."
            )
            raise InputError(msg)
        if abs(self.longitude) > 360.0:
            msg = (
                f"plume longitude={self.longitude!r} is outside -360..360 degrees east; give "
                "it in -180..180 or 0..360."
            )
            raise InputError(msg)
        if not 0.0 < self.radius_km <= 20000.0:
            msg = (
                f"plume radius_km={self.radius_km!r} must be > 0 and <= 20000 km (about half "
                "a meridian). If you have metres, divide by 1000."
            )
            raise InputError(msg)
        if abs(self.peak_excess_k) >= _MAX_PEAK_K:
            msg = (
                f"plume peak_excess_k={self.peak_excess_k!r} K is too large; expected an "
                f"excess over the ambient mantle of less than {_MAX_PEAK_K:g} K in size "
                "(typically 50-300 K). Give the excess, not the potential temperature."
            )
            raise InputError(msg)
        if self.shape not in PLUME_SHAPES:
            msg = f"plume shape={self.shape!r} is unknown; expected one of {list(PLUME_SHAPES)}."
            raise InputError(msg)

    @property
    def reach_km(self) -> float:
        """Distance beyond which the excess is zero, km (6 r for the gaussian, r otherwise)."""
        return self.radius_km * (GAUSSIAN_CUTOFF_RADII if self.shape == "gaussian" else 1.0)


def plume_profile(distance_km: Any, plume: Plume) -> np.ndarray:
    """Excess temperature of one plume at geodesic distances from its centre.

    Parameters
    ----------
    distance_km : array_like
        Distances from the plume centre, km (>= 0).
    plume : Plume
        The plume.

    Returns
    -------
    numpy.ndarray
        Excess temperature, K (the profile of :class:`Plume`), same shape as ``distance_km``.
    """
    d = np.asarray(distance_km, dtype=np.float64)
    r, peak = plume.radius_km, plume.peak_excess_k
    if plume.shape == "gaussian":
        out = peak * np.exp(-((d / r) ** 2))
        return np.where(d <= plume.reach_km, out, 0.0)
    if plume.shape == "cosine":
        return np.where(d < r, peak * np.cos(np.pi * d / (2.0 * r)) ** 2, 0.0)
    return np.where(d <= r, peak, 0.0)


def plume_anomaly(
    target: Grid,
    plumes: list[Plume] | tuple[Plume, ...],
    *,
    background: float | xr.DataArray | None = None,
    chunks: int | tuple[int, int] | None = None,
) -> xr.DataArray:
    """Thermal anomaly on a grid: a background plus the sum of plume profiles.

    Parameters
    ----------
    target : Grid
        The grid (any CRS; cell centres are converted to longitude/latitude with pyproj).
    plumes : sequence of Plume
        The plumes (may be empty). Where plumes overlap their excesses add (sum, not maximum),
        so two touching plumes make a hotter region between them.
    background : float or xarray.DataArray, optional
        Added to the plumes: a constant (K) or a grid already on ``target`` (from
        :func:`~lidmelt.grids._align.align`), whose NaN cells stay NaN. Default 0.
    chunks : int or (int, int), optional
        If given, the result is a lazy dask array with these chunks, evaluated block by block.

    Returns
    -------
    xarray.DataArray
        ``thermal_anomaly_k``: float64 ``(y, x)`` on ``target`` (coordinates of
        ``target.template()``), attrs ``units = "K"``, ``long_name``, ``combination = "sum"``
        and ``plumes`` (JSON list of the plume parameters).

    Raises
    ------
    InputError
        If ``plumes`` holds something that is not a :class:`Plume`, or the background is not
        finite where it is a number.
    GridError
        If a background grid is not on the target grid, or its ``units`` are not kelvin.

    Notes
    -----
    Distances are geodesics on the WGS 84 ellipsoid from :meth:`pyproj.Geod.inv` (Karney's
    algorithm; valid across the antimeridian and near the poles), vectorised over the cells of
    each block. Rows farther in latitude than a plume's reach (using the smallest meridional
    radius of curvature, a(1 - e^2), as a lower bound on distance per radian of latitude) are
    skipped, so small plumes on large grids cost little.
    """
    plumes = _checked_plumes(target, plumes)
    out = _with_background(_plume_sum(target, plumes, chunks), background, target)
    out.name = "thermal_anomaly_k"
    out.attrs = {
        "units": "K",
        "long_name": "mantle thermal anomaly (excess potential temperature)",
        "combination": "sum",
        "plumes": json.dumps([asdict(p) for p in plumes]),
    }
    return out


def _checked_plumes(target: Any, plumes: Any) -> tuple[Plume, ...]:
    """``plumes`` as a tuple; GridError/InputError unless on a Grid and all Plumes."""
    if not isinstance(target, Grid):
        msg = f"target={target!r} must be a Grid (see Grid.from_extent)."
        raise GridError(msg)
    plumes = tuple(plumes)
    for item in plumes:
        if not isinstance(item, Plume):
            msg = (
                f"plumes must hold Plume objects, got {item!r}; build them with "
                "Plume(longitude=..., latitude=..., radius_km=..., peak_excess_k=...)."
            )
            raise InputError(msg)
    return plumes


def _plume_sum(
    target: Grid, plumes: tuple[Plume, ...], chunks: int | tuple[int, int] | None
) -> xr.DataArray:
    """The summed plume profiles on ``target``: numpy, or dask evaluated block by block."""
    template = target.template(chunks=chunks)
    if chunks is None:
        data: Any = _plume_block(target, plumes, slice(0, target.height), slice(0, target.width))
        return xr.DataArray(data, dims=("y", "x"), coords=template.coords)
    if len(plumes) > SHARED_PLUMES:  # one task per block for all: a graph of one layer
        data = template.data.map_blocks(
            _plume_dask_block, target, plumes, dtype=np.float64, meta=np.empty((0, 0))
        )
        return xr.DataArray(data, dims=("y", "x"), coords=template.coords)
    data = template.data.map_blocks(np.zeros_like, dtype=np.float64)
    for plume in plumes:
        data = data + plume.peak_excess_k * _unit_profile(template, target, plume)
    return xr.DataArray(data, dims=("y", "x"), coords=template.coords)


def _unit_profile(template: xr.DataArray, target: Grid, plume: Plume) -> Any:
    """The plume's profile for a unit peak excess, lazily, under a name that depends only on the
    grid, the chunks and the plume's centre, radius and shape: the profile is linear in the
    peak, so runs whose plumes differ only in their peaks (ensemble members) share its blocks
    (the geodesic distances are the dear part)."""
    from dask.base import tokenize

    unit = replace(plume, peak_excess_k=1.0)
    token = tokenize(repr(target), repr(unit), template.data.chunks)
    return template.data.map_blocks(
        _plume_dask_block,
        target,
        (unit,),
        dtype=np.float64,
        meta=np.empty((0, 0), dtype=np.float64),
        name=f"lidmelt-plume-{token}",
    )


def _with_background(
    out: xr.DataArray, background: float | xr.DataArray | None, target: Grid
) -> xr.DataArray:
    """``out`` plus a background grid on ``target`` (K) or a finite constant (K)."""
    if isinstance(background, xr.DataArray):
        return out + _background_grid(background, target)
    if background is None:
        return out
    if (
        isinstance(background, bool)
        or not isinstance(background, int | float | np.number)
        or not math.isfinite(float(background))
    ):
        msg = (
            f"background={background!r} must be a finite number (K) or a DataArray on "
            "the target grid."
        )
        raise InputError(msg)
    return out + float(background)


def _background_grid(background: xr.DataArray, target: Grid) -> Any:
    """The background's ``(y, x)`` data; GridError unless on ``target`` and in kelvin."""
    if not target.matches(background):
        msg = (
            f"background grid {background.name!r} is not on the target grid (shape "
            f"{tuple(background.shape)} vs {target.shape}, or a different CRS/transform). "
            "Put it on the grid first with lidmelt.grids._align.align(background, target)."
        )
        raise GridError(msg)
    units = normalise_units(background.attrs.get("units"))
    if units not in (None, "K"):
        msg = (
            f"background grid {background.name!r} has units "
            f"{background.attrs.get('units')!r}; expected 'K' (an excess temperature). "
            "Convert it, or correct its 'units' attribute if only the label is wrong."
        )
        raise GridError(msg)
    return background.transpose("y", "x").data


def _plume_dask_block(
    block: np.ndarray, target: Grid, plumes: tuple[Plume, ...], block_info: dict | None = None
) -> np.ndarray:
    (r0, r1), (c0, c1) = block_info[0]["array-location"]
    return _plume_block(target, plumes, slice(r0, r1), slice(c0, c1))


def _plume_block(target: Grid, plumes: tuple[Plume, ...], rows: slice, cols: slice) -> np.ndarray:
    """Sum of plume profiles over one window of the grid (numpy, float64)."""
    nrows, ncols = rows.stop - rows.start, cols.stop - cols.start
    out = np.zeros((nrows, ncols), dtype=np.float64)
    if not plumes or nrows == 0 or ncols == 0:
        return out
    step = max(1, _BLOCK_CELLS // ncols)
    for start in range(rows.start, rows.stop, step):
        sub = slice(start, min(rows.stop, start + step))
        lon, lat = target.lonlat_centres(rows=sub, cols=cols)
        dest = out[sub.start - rows.start : sub.stop - rows.start]
        phi, lam = np.radians(lat), np.radians(lon)
        cos_phi = np.cos(phi)
        for plume in plumes:
            near = _within_reach(phi, lam, cos_phi, plume)
            if not near.any():
                continue
            lon_n, lat_n = lon[near], lat[near]
            _, _, dist_m = _GEOD.inv(
                np.full(lon_n.shape, plume.longitude),
                np.full(lat_n.shape, plume.latitude),
                lon_n,
                lat_n,
            )
            dest[near] += plume_profile(np.asarray(dist_m) / 1000.0, plume)
    return out


def _within_reach(phi: np.ndarray, lam: np.ndarray, cos_phi: np.ndarray, plume: Plume) -> Any:
    """Where the geodesic distance from ``plume``'s centre may be within its reach.

    On the ellipsoid ds^2 = M^2 dphi^2 + N^2 cos^2(phi) dlambda^2 with the radii of curvature
    M >= a(1 - e^2) and N >= a >= a(1 - e^2), so every path, the geodesic included, is at
    least a(1 - e^2) times its central angle on the unit sphere of the same geodetic latitude
    and longitude (haversine formula, common practice) [derived]. Cells beyond the reach by
    that bound get no geodesic: their profile is 0 exactly, so the sum is unchanged.
    """
    reach_m = plume.reach_km * 1000.0
    phi0, lam0 = math.radians(plume.latitude), math.radians(plume.longitude)
    band = np.abs(phi - phi0) * _MERIDIAN_MIN_M <= reach_m
    if not band.any():
        return band
    h = np.sin((phi - phi0) * 0.5) ** 2 + math.cos(phi0) * cos_phi * np.sin((lam - lam0) * 0.5) ** 2
    angle = 2.0 * np.arcsin(np.sqrt(np.minimum(h, 1.0)))
    # a margin of 1e-9 of the reach for rounding in the bound: never cuts a reached cell
    return band & (angle * _MERIDIAN_MIN_M <= reach_m * (1.0 + 1e-9))


def plume_cells(target: Grid, plumes: Any) -> int:
    """An estimate of the work of the plumes on ``target``: per plume the cells within its
    reach (the disk of radius :attr:`Plume.reach_km` over the cell area at its centre on a
    sphere of the equatorial radius, at most every cell), summed. Each such cell costs one
    geodesic distance (about 1 microsecond, the dear part of an anomaly); known before any is
    computed."""
    total = target.width * target.height
    dx, dy = target.resolution
    if target.is_geographic:
        cell_km2 = math.radians(dx) * math.radians(dy) * (_WGS84_A_M / 1000.0) ** 2
    else:
        axes = target.pyproj_crs.axis_info
        metres = axes[0].unit_conversion_factor if axes else 1.0
        cell_km2 = dx * dy * (metres / 1000.0) ** 2
    out = 0
    for plume in plumes:
        shrink = math.cos(math.radians(plume.latitude)) if target.is_geographic else 1.0
        disk = math.pi * plume.reach_km**2 / max(cell_km2 * shrink, 1e-30)
        out += min(total, math.ceil(disk))
    return out
