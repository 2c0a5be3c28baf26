"""The grid of a run: one north-up regular grid (CRS, transform, size).

A :class:`Grid` is the one grid every input is resampled onto and every output is written on
(:func:`lidmelt.grids._align.align` puts input grids on it), and the grid products read a run on:
it turns point coordinates into fractional cell indices and cells back into coordinates, and
knows when a geographic grid is periodic in longitude (spans 360 degrees).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

import numpy as np
import rioxarray  # noqa: F401  (registers the .rio accessor)
import xarray as xr
from affine import Affine
from pyproj import CRS, Transformer
from pyproj.exceptions import CRSError
from rasterio.crs import CRS as RioCRS

from lidmelt._errors import GridError

#: Tolerance for "the same grid": transform coefficients may differ by this fraction of a cell.
SAME_GRID_TOL = 1e-6

#: Longitude/latitude on WGS 84, the CRS of every longitude and latitude the products report.
WGS84 = CRS.from_epsg(4326)

#: A fractional cell index this close to an integer is taken as the integer (1e-9 of a cell),
#: so that a point on a cell centre returns the cell value exactly.
_SNAP = 1e-9


@lru_cache(maxsize=64)
def cached_crs(text: str) -> CRS:
    """The :class:`pyproj.CRS` of ``text`` (EPSG code or WKT), parsed once and cached."""
    return CRS.from_user_input(text)


@lru_cache(maxsize=64)
def _to_lonlat(crs_text: str) -> Transformer:
    crs = cached_crs(crs_text)
    return Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)


def normalise_crs(value: Any) -> str:
    """'EPSG:n' when the CRS is exactly an EPSG one, else its WKT; GridError if unreadable."""
    text = value.to_wkt() if hasattr(value, "to_wkt") else value
    if not isinstance(text, str) or not text.strip():
        msg = (
            f"crs={value!r} is not a CRS; expected an 'EPSG:<code>' string or WKT text, "
            "e.g. crs='EPSG:4326' for longitude/latitude."
        )
        raise GridError(msg)
    try:
        crs = cached_crs(text)
    except CRSError as exc:
        msg = (
            f"crs={text[:80]!r} is not a CRS that PROJ understands ({exc}); expected an "
            "'EPSG:<code>' string or WKT, e.g. 'EPSG:4326'."
        )
        raise GridError(msg) from exc
    epsg = crs.to_epsg(min_confidence=100)
    return f"EPSG:{epsg}" if epsg is not None else crs.to_wkt()


@dataclass(frozen=True)
class Grid:
    """A north-up regular grid: CRS, affine transform and size.

    Parameters
    ----------
    crs : str
        ``"EPSG:<code>"`` or WKT. Stored normalised: ``"EPSG:<code>"`` whenever the CRS is
        exactly an EPSG one, its WKT otherwise.
    transform : tuple of 6 float
        Affine coefficients ``(a, b, c, d, e, f)`` (rasterio/affine order): cell width ``a`` > 0,
        ``b = d = 0``, cell height ``e`` < 0 (north up), ``(c, f)`` the north-west corner.
        Units: those of the CRS (degrees or metres).
    width, height : int
        Number of columns and rows.

    Raises
    ------
    GridError
        For an unreadable CRS, a rotated or south-up transform, non-positive sizes, or a
        geographic grid wider than 360 degrees or with cell centres beyond the poles.
    """

    crs: str
    transform: tuple[float, float, float, float, float, float]
    width: int
    height: int

    def __post_init__(self) -> None:
        object.__setattr__(self, "crs", normalise_crs(self.crs))
        try:
            coeffs = tuple(float(v) for v in tuple(self.transform)[:6])
        except (TypeError, ValueError) as exc:
            msg = (
                f"transform={self.transform!r} is not 6 numbers; expected (a, b, c, d, e, f) "
                "as in affine.Affine, e.g. (0.1, 0, -180, 0, -0.1, 90)."
            )
            raise GridError(msg) from exc
        if len(coeffs) != 6 or not all(math.isfinite(v) for v in coeffs):
            msg = f"transform={self.transform!r} must be 6 finite numbers (a, b, c, d, e, f)."
            raise GridError(msg)
        a, b, _, d, e, _ = coeffs
        if b != 0 or d != 0 or not a > 0 or not e < 0:
            msg = (
                f"transform={coeffs!r} is not north-up: expected a > 0 (cell width), "
                "b = d = 0 (no rotation) and e < 0 (rows run north to south). Flip or warp "
                "the grid first ('gdalwarp'), or build the target with Grid.from_extent."
            )
            raise GridError(msg)
        object.__setattr__(self, "transform", coeffs)
        for field in ("width", "height"):
            value = getattr(self, field)
            if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < 1:
                msg = f"{field}={value!r} must be a whole number of cells >= 1."
                raise GridError(msg)
            object.__setattr__(self, field, int(value))
        if self.is_geographic:
            west, south, east, north = self.bounds
            tol = 1e-9 * max(1.0, abs(a))
            if east - west > 360.0 + tol:
                msg = (
                    f"geographic target grid spans {east - west!r} degrees of longitude "
                    f"({west!r} to {east!r}); expected at most 360. Reduce the width or "
                    "the resolution."
                )
                raise GridError(msg)
            top, bottom = north + e / 2, south - e / 2
            if top > 90.0 + tol or bottom < -90.0 - tol:
                msg = (
                    f"geographic target grid has cell centres from {bottom!r} to {top!r} "
                    "degrees of latitude; expected them within -90..90. Use "
                    "Grid.from_extent with south >= -90 and north <= 90."
                )
                raise GridError(msg)

    # ---------------------------------------------------------------- constructors

    @classmethod
    def from_extent(
        cls,
        west: float,
        east: float,
        south: float,
        north: float,
        resolution: float | tuple[float, float],
        *,
        crs: str = "EPSG:4326",
    ) -> Grid:
        """Grid covering ``[west, east] x [south, north]`` with square (or (dx, dy)) cells.

        Parameters
        ----------
        west, east, south, north : float
            Cell-edge extent in CRS units (degrees for geographic CRSs; longitudes may be
            -180..180 or 0..360, and ``east`` may exceed 180 for a grid across the
            antimeridian).
        resolution : float or (float, float)
            Cell size in CRS units; the extent must hold a whole number of cells.
        crs : str
            ``"EPSG:<code>"`` or WKT. Default longitude/latitude on WGS 84.

        Raises
        ------
        GridError
            If the extent is empty or reversed, or not a whole number of cells.
        """
        if isinstance(resolution, tuple | list):
            dx, dy = (float(v) for v in resolution)
        else:
            dx = dy = float(resolution)
        if not (dx > 0 and dy > 0 and math.isfinite(dx) and math.isfinite(dy)):
            msg = f"resolution={resolution!r} must be positive and finite (CRS units per cell)."
            raise GridError(msg)
        values = (west, east, south, north)
        if not all(math.isfinite(float(v)) for v in values) or not (east > west and north > south):
            msg = (
                f"extent west={west!r}, east={east!r}, south={south!r}, north={north!r} is "
                "empty or reversed; expected west < east and south < north (CRS units)."
            )
            raise GridError(msg)
        sizes = []
        for span, step, axis in (
            (east - west, dx, "east - west"),
            (north - south, dy, "north - south"),
        ):
            count = span / step
            if abs(count - round(count)) > 1e-6 * max(1.0, count):
                msg = (
                    f"{axis} = {span!r} is not a whole number of cells of {step!r} "
                    f"({count:.6g} cells). Adjust the extent or the resolution."
                )
                raise GridError(msg)
            sizes.append(round(count))
        return cls(crs, (dx, 0.0, float(west), 0.0, -dy, float(north)), sizes[0], sizes[1])

    @classmethod
    def from_grid(cls, da: xr.DataArray) -> Grid:
        """The grid a DataArray (e.g. from :func:`~lidmelt.grids._io.open_grid`) lies on.

        A global gridline-registered geographic grid (its nodes include both 0 and 360 degrees,
        see :func:`registration`) lies on cells centred on its nodes without the last,
        periodic column, which repeats the first.

        Raises
        ------
        GridError
            If ``da`` has no CRS, lacks ``y``/``x`` dimensions or is not north-up; if it is
            geographic and wider than 360 degrees (the message names its file).
        """
        check_dataarray(da, what="grid")
        transform = tuple(transform_of(da))[:6]
        width = da.sizes["x"]
        dx = transform[0]
        crs = normalise_crs(da.rio.crs)
        if cached_crs(crs).is_geographic and width * dx > 360.0 + 1e-9 * max(1.0, dx):
            if registration(da) == "gridline" and abs((width - 1) * dx - 360.0) < 0.5 * dx:
                width -= 1  # the column at west + 360 repeats the first
            else:
                source = da.attrs.get("source", "the grid")
                msg = (
                    f"{source!s} spans {width * dx!r} degrees of longitude ({width} columns of "
                    f"{dx!r} degrees), more than 360, so it cannot be the target grid "
                    "([grid] like). Cut its longitudes to one turn (e.g. 'gmt grdcut' or "
                    "xarray .isel), or give the target with [grid] extent and resolution."
                )
                raise GridError(msg)
        return cls(crs, transform, width, da.sizes["y"])

    @classmethod
    def from_dict(cls, doc: dict[str, Any]) -> Grid:
        """Inverse of :meth:`to_dict` (accepts ``crs_wkt`` or ``crs``)."""
        try:
            crs = doc.get("crs_wkt") or doc["crs"]
            return cls(crs, tuple(doc["transform"]), doc["width"], doc["height"])
        except (KeyError, TypeError) as exc:
            msg = (
                f"grid description {doc!r} lacks a key ({exc}); expected 'crs_wkt', "
                "'transform' (6 numbers), 'width' and 'height'."
            )
            raise GridError(msg) from exc

    # ---------------------------------------------------------------- properties

    @property
    def affine(self) -> Affine:
        """The transform as an :class:`affine.Affine`."""
        return Affine(*self.transform)

    @property
    def shape(self) -> tuple[int, int]:
        """``(height, width)``, the shape of a ``(y, x)`` array on this grid."""
        return (self.height, self.width)

    @property
    def resolution(self) -> tuple[float, float]:
        """Cell size ``(dx, dy)``, both positive, in CRS units."""
        return (self.transform[0], -self.transform[4])

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """Cell-edge extent ``(west, south, east, north)`` in CRS units."""
        a, _, c, _, e, f = self.transform
        return (c, f + e * self.height, c + a * self.width, f)

    @property
    def pyproj_crs(self) -> CRS:
        """The CRS as a :class:`pyproj.CRS`."""
        return cached_crs(self.crs)

    @property
    def is_geographic(self) -> bool:
        """True for a longitude/latitude CRS (coordinates in degrees)."""
        return self.pyproj_crs.is_geographic

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready description (the ``grid`` entry of a run's ``summary.json``)."""
        return {
            "crs_wkt": self.pyproj_crs.to_wkt(),
            "transform": list(self.transform),
            "width": self.width,
            "height": self.height,
            "bounds": list(self.bounds),
        }

    # ---------------------------------------------------------------- coordinates

    def x_centres(self) -> np.ndarray:
        """Cell-centre x coordinates (CRS units), west to east, float64."""
        a, _, c, *_ = self.transform
        return c + a * (np.arange(self.width) + 0.5)

    def y_centres(self) -> np.ndarray:
        """Cell-centre y coordinates (CRS units), north to south, float64."""
        *_, e, f = self.transform
        return f + e * (np.arange(self.height) + 0.5)

    def template(self, chunks: int | tuple[int, int] | dict | None = None) -> xr.DataArray:
        """A float32 ``(y, x)`` DataArray of NaN on this grid, CRS and transform written.

        Parameters
        ----------
        chunks : int, tuple or dict, optional
            If given, the array is a lazy dask array with these chunks.
        """
        if chunks is None:
            data: Any = np.full(self.shape, np.nan, dtype=np.float32)
        else:
            import dask.array as dsa

            if isinstance(chunks, dict):
                chunks = (chunks.get("y", self.height), chunks.get("x", self.width))
            data = dsa.full(self.shape, np.nan, dtype=np.float32, chunks=chunks)
        da = xr.DataArray(
            data, dims=("y", "x"), coords={"y": self.y_centres(), "x": self.x_centres()}
        )
        da = da.rio.write_crs(RioCRS.from_user_input(self.crs))
        return da.rio.write_transform(self.affine)

    def lonlat_centres(
        self, *, rows: slice | None = None, cols: slice | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """Longitude and latitude of the cell centres, 2-D ``(y, x)`` arrays in degrees.

        Parameters
        ----------
        rows, cols : slice, optional
            A window of the grid (default: all of it).

        Returns
        -------
        lon, lat : numpy.ndarray
            Degrees on the CRS's own geodetic datum (WGS 84 for EPSG:4326 and EPSG:3857).
            For geographic grids these are read-only broadcast views of the coordinates
            (longitudes as stored, 0..360 stays 0..360); projected grids are transformed with
            pyproj.
        """
        xs = self.x_centres()[cols or slice(None)]
        ys = self.y_centres()[rows or slice(None)]
        shape = (ys.size, xs.size)
        if self.is_geographic:
            return np.broadcast_to(xs[None, :], shape), np.broadcast_to(ys[:, None], shape)
        xx, yy = np.meshgrid(xs, ys)
        lon, lat = _to_lonlat(self.crs).transform(xx, yy)
        return np.asarray(lon), np.asarray(lat)

    # ---------------------------------------------------------------- points on the grid

    @property
    def is_periodic(self) -> bool:
        """True for a geographic grid whose columns span exactly 360 degrees of longitude."""
        span = abs(self.transform[0]) * self.width
        return self.is_geographic and abs(span - 360.0) < 1e-6

    @property
    def x_centre(self) -> float:
        """Middle of the grid's x extent (longitude of its centre for geographic grids)."""
        west, _, east, _ = self.bounds
        return 0.5 * (west + east)

    def wrap_x(self, x: np.ndarray) -> np.ndarray:
        """Bring longitudes within 180 degrees of the grid's centre (geographic grids only)."""
        x = np.asarray(x, dtype=float)
        if not self.is_geographic:
            return x
        xc = self.x_centre
        return xc + np.mod(x - xc + 180.0, 360.0) - 180.0

    def to_grid_xy(self, x: Any, y: Any, src_crs: Any) -> tuple[np.ndarray, np.ndarray]:
        """Transform point coordinates from ``src_crs`` into the grid CRS.

        Geographic longitudes in 0..360 or -180..180 are both accepted; on a geographic grid the
        result is wrapped into the grid's own longitude range, so grids that span the antimeridian
        (for example 160..200 degrees) work. Points that cannot be transformed get NaN.
        """
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        src_crs = CRS.from_user_input(src_crs)
        if src_crs.is_geographic:
            x = np.mod(x + 180.0, 360.0) - 180.0
        if not src_crs.equals(self.pyproj_crs, ignore_axis_order=True):
            transformer = Transformer.from_crs(src_crs, self.pyproj_crs, always_xy=True)
            x, y = transformer.transform(x, y, errcheck=False)
            x = np.asarray(x, dtype=float)
            y = np.asarray(y, dtype=float)
            bad = ~(np.isfinite(x) & np.isfinite(y))
            x[bad] = np.nan
            y[bad] = np.nan
        return self.wrap_x(x), y

    def fractional_index(self, gx: Any, gy: Any) -> tuple[np.ndarray, np.ndarray]:
        """Continuous (row, col) index of grid-CRS points; cell centre (i, j) is at (i, j).

        An index within 1e-9 of a cell of a whole number is taken as that number, so a point on
        a cell centre reads that cell exactly.
        """
        a, _, c, _, e, f = self.transform
        col = (np.asarray(gx, dtype=float) - c) / a - 0.5
        row = (np.asarray(gy, dtype=float) - f) / e - 0.5
        return _snap(row), _snap(col)

    def cell_centres(self, rows: Any, cols: Any) -> tuple[np.ndarray, np.ndarray]:
        """Grid-CRS coordinates of the centres of cells ``(rows, cols)``."""
        a, _, c, _, e, f = self.transform
        return c + a * (np.asarray(cols) + 0.5), f + e * (np.asarray(rows) + 0.5)

    def cell_centres_lonlat(self, rows: Any, cols: Any) -> tuple[np.ndarray, np.ndarray]:
        """WGS84 longitude (-180..180) and latitude (degrees) of the centres of cells.

        Unlike :meth:`lonlat_centres` (the whole grid or a window, on the CRS's own datum,
        longitudes as stored) this takes any list of cells and always answers in WGS84.
        """
        x, y = self.cell_centres(rows, cols)
        return lonlat_from(self.pyproj_crs, x, y)

    def matches(self, da: xr.DataArray) -> bool:
        """True if ``da`` lies exactly on this grid (same CRS, transform and shape)."""
        if not isinstance(da, xr.DataArray) or set(da.dims) != {"y", "x"}:
            return False
        if (da.sizes["y"], da.sizes["x"]) != self.shape or da.rio.crs is None:
            return False
        if not cached_crs(normalise_crs(da.rio.crs)).equals(
            self.pyproj_crs, ignore_axis_order=True
        ):
            return False
        return same_transform(transform_of(da), self.affine)


# --------------------------------------------------------------------------------------------
# Helpers
# --------------------------------------------------------------------------------------------


def lonlat_from(crs: Any, x: Any, y: Any) -> tuple[np.ndarray, np.ndarray]:
    """WGS84 longitude (-180..180) and latitude (degrees) of points given in ``crs``."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    crs = CRS.from_user_input(crs)
    if not crs.equals(WGS84, ignore_axis_order=True):
        transformer = Transformer.from_crs(crs, WGS84, always_xy=True)
        x, y = (np.asarray(v, dtype=float) for v in transformer.transform(x, y, errcheck=False))
    return np.mod(x + 180.0, 360.0) - 180.0, y


def _snap(index: np.ndarray) -> np.ndarray:
    nearest = np.round(index)
    return np.where(np.abs(index - nearest) < _SNAP, nearest, index)


def check_dataarray(da: Any, *, what: str) -> None:
    """Raise GridError unless ``da`` is a north-up ``(y, x)`` DataArray with a CRS."""
    if not isinstance(da, xr.DataArray):
        msg = f"{what} must be an xarray.DataArray, got {type(da).__name__}."
        raise GridError(msg)
    dims = [d for d in da.dims if not (d == "band" and da.sizes[d] == 1)]
    if sorted(dims) != ["x", "y"]:
        msg = (
            f"{what} has dims {tuple(da.dims)}; expected ('y', 'x'). Read files with "
            "lidmelt.grids._io.open_grid, or rename: da.rename(lat='y', lon='x')."
        )
        raise GridError(msg)
    if da.rio.crs is None:
        msg = (
            f"{what} has no CRS. Write one with da.rio.write_crs('EPSG:4326') (longitude/"
            "latitude) or read the file with lidmelt.grids._io.open_grid."
        )
        raise GridError(msg)
    transform = transform_of(da)
    if transform.b != 0 or transform.d != 0 or not transform.a > 0 or not transform.e < 0:
        msg = (
            f"{what} is not north-up with x ascending (transform {tuple(transform)[:6]}). "
            "Sort it: da.sortby('y', ascending=False).sortby('x'), or read it with open_grid."
        )
        raise GridError(msg)


def registration(da: xr.DataArray) -> str:
    """``"gridline"`` (values at nodes) or ``"pixel"`` (values for cells) for a grid.

    The GMT attribute ``node_offset`` (0 gridline, 1 pixel; GMT technical reference, "netCDF
    files"), when the file has it, decides; otherwise a geographic grid whose nodes include
    both ends of a full turn (0 and 360, or -180 and 180) or a pole is gridline-registered,
    and any other grid is taken as pixel-registered (cell centres), as lidmelt always did.
    Either way lidmelt places its cells centred on the coordinates.
    """
    offset = da.attrs.get("node_offset")
    if offset is not None:
        return "pixel" if int(offset) == 1 else "gridline"
    if not _is_geographic(da):
        return "pixel"
    x = np.asarray(da["x"].values, dtype=float)
    y = np.asarray(da["y"].values, dtype=float)
    if x.size > 1:
        step = abs(x[1] - x[0])
        if abs(abs(x[-1] - x[0]) - 360.0) < 1e-6 * max(1.0, step):
            return "gridline"
    if y.size and np.any(np.isclose(np.abs(y[[0, -1]]), 90.0, rtol=0, atol=1e-9)):
        return "gridline"
    return "pixel"


def _is_geographic(da: xr.DataArray) -> bool:
    """True when ``da`` has a geographic (longitude/latitude) CRS."""
    crs = da.rio.crs
    return crs is not None and cached_crs(normalise_crs(crs)).is_geographic


def registration_note(da: xr.DataArray, grid: Grid) -> str:
    """One sentence for a run summary: the node/cell convention of a target-grid file."""
    kind = registration(da)
    if kind == "pixel":
        return "pixel-registered: values are cell means at the cell centres of the grid"
    dropped = da.sizes["x"] - grid.width
    extra = (
        f"; the duplicate periodic column at +360 degrees was dropped ({dropped})"
        if dropped
        else ""
    )
    return (
        "gridline-registered: values at grid nodes; lidmelt's cells are centred on the nodes"
        f" (cells on a pole reach past it and are clipped in the cell areas){extra}"
    )


def transform_of(da: xr.DataArray) -> Affine:
    """The grid's transform: from its coordinates, or the stored one if they agree.

    The stored (``spatial_ref`` GeoTransform) coefficients are exact where the coordinates
    carry float rounding; they are used only when they match the coordinates to 1e-6 of a
    cell, so a stale stored transform (after slicing or sorting) is never used.
    """
    cached = da.rio.transform()
    if not (da.sizes.get("x", 0) > 1 and da.sizes.get("y", 0) > 1):
        return cached
    computed = da.rio.transform(recalc=True)
    return cached if same_transform(cached, computed) else computed


def same_transform(t1: Affine, t2: Affine) -> bool:
    """True when two transforms agree to 1e-6 of a cell in every coefficient."""
    cell = max(abs(t2.a), abs(t2.e))
    return all(
        abs(p - q) <= SAME_GRID_TOL * cell
        for p, q in zip(tuple(t1)[:6], tuple(t2)[:6], strict=True)
    )


def finalise_grid(da: xr.DataArray, crs: CRS) -> xr.DataArray:
    """North up, x ascending, float dtype, a fresh spatial_ref with CRS and transform."""
    if da.sizes["y"] > 1 and float(da["y"][0]) < float(da["y"][-1]):
        da = da.isel(y=slice(None, None, -1))
    if da.sizes["x"] > 1 and float(da["x"][0]) > float(da["x"][-1]):
        da = da.isel(x=slice(None, None, -1))
    if da.dtype.kind != "f":
        da = da.astype(np.float32 if np.dtype(da.dtype).itemsize <= 2 else np.float64)
    transform = transform_of(da)
    da = da.drop_vars("spatial_ref", errors="ignore")
    da.attrs = {}
    da.encoding = {}
    da = da.rio.write_crs(RioCRS.from_wkt(crs.to_wkt()))
    return da.rio.write_transform(transform)
