"""The CF NetCDF reader of :func:`lidmelt.grids._io.open_grid`.

One 2-D variable of a CF NetCDF file (GMT/COARDS grids too) becomes a ``(y, x)`` grid on exactly
regular coordinates, with its CRS from the ``grid_mapping`` variable, from CF latitude/longitude
coordinates (EPSG:4326), or from the caller (``crs=``, for files that state none).
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr
from pyproj import CRS
from pyproj.exceptions import CRSError

from lidmelt._errors import GridError, InputError
from lidmelt.grids._grid import finalise_grid

_LAT_NAMES = {"lat", "latitude", "lats", "nav_lat"}
_LON_NAMES = {"lon", "long", "longitude", "lons", "nav_lon"}
_LAT_UNITS = {"degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"}
_LON_UNITS = {"degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"}

CRS_FIX = (
    "Write a CRS into the file (GeoTIFF: 'gdal_edit.py -a_srs EPSG:4326 FILE'; in Python: "
    "da.rio.write_crs('EPSG:4326')) or, for NetCDF, add CF coordinates named lat/lon with "
    "units 'degrees_north'/'degrees_east' (or a grid_mapping variable for projected x/y)."
)


def _classify(dim: str, coord: xr.DataArray | None) -> str | None:
    """Return 'lat', 'lon', 'y', 'x' or None for one dimension of a NetCDF variable."""
    low = dim.lower()
    attrs = coord.attrs if coord is not None else {}
    units = str(attrs.get("units", "")).strip().lower().replace(" ", "_")
    standard = str(attrs.get("standard_name", "")).strip().lower()
    axis = str(attrs.get("axis", "")).strip().upper()
    if standard == "latitude" or units in _LAT_UNITS or low in _LAT_NAMES:
        return "lat"
    if standard == "longitude" or units in _LON_UNITS or low in _LON_NAMES:
        return "lon"
    # plain "degrees" on a y/x axis: latitude/longitude (unless a rotated-pole grid)
    degrees = units in {"degree", "degrees"} and not standard.startswith("grid_")
    if standard in {"projection_y_coordinate", "grid_latitude"} or axis == "Y" or low == "y":
        return "lat" if degrees else "y"
    if standard in {"projection_x_coordinate", "grid_longitude"} or axis == "X" or low == "x":
        return "lon" if degrees else "x"
    return None


def _spatial_dims(
    var: xr.DataArray, ds: xr.Dataset, names: tuple[str, str] | None = None
) -> dict[str, str] | None:
    """Map role ('lat'/'lon' or 'y'/'x') to dim name for a variable, or None if not spatial.

    ``names`` = (y_name, x_name) given by the caller take the place of the name rules.
    """
    if names is not None and all(n in var.dims for n in names):
        y_name, x_name = names
        lat = _classify(y_name, ds[y_name] if y_name in ds.variables else None) == "lat"
        lon = _classify(x_name, ds[x_name] if x_name in ds.variables else None) == "lon"
        return {"lat": y_name, "lon": x_name} if lat and lon else {"y": y_name, "x": x_name}
    dims = [d for d in var.dims if var.sizes[d] > 1]
    if len(dims) != 2:
        return None
    roles = {}
    for dim in dims:
        role = _classify(dim, ds[dim] if dim in ds.variables else None)
        if role is None:
            return None
        roles[role] = dim
    if set(roles) in ({"lat", "lon"}, {"y", "x"}):
        return roles
    return None


def open_netcdf(
    path: Path,
    *,
    variable: str | None,
    name: str,
    chunks: Any,
    crs: str | None = None,
    x_name: str | None = None,
    y_name: str | None = None,
) -> tuple[xr.DataArray, str | None, str]:
    """One 2-D variable of a CF NetCDF file, lazily with ``chunks``; (grid, units, long_name).

    ``crs`` is the CRS of a file that states none (a file that states another is an error);
    ``x_name``/``y_name`` name the coordinate dimensions where they are not CF-recognisable.
    The GMT global attribute ``node_offset`` (0 gridline, 1 pixel registration; GMT technical
    reference, "netCDF files") is kept in ``attrs`` when the file has it.
    """
    names = (y_name, x_name) if x_name or y_name else None
    ds = _open_dataset(path, name=name, chunks=chunks)
    try:
        variable = _pick_variable(ds, variable, path=path, name=name, names=names)
        var, found_crs = _located_variable(ds, variable, path=path, names=names, crs=crs)
        node_offset = ds.attrs.get("node_offset")
    except BaseException:
        ds.close()
        raise
    units = var.attrs.get("units")
    long_name = var.attrs.get("long_name") or var.attrs.get("standard_name") or variable
    var.attrs = {}
    var.encoding = {}
    if chunks is None:
        var = _load(var, ds, variable=variable, path=path)
    var = finalise_grid(var, found_crs)
    if chunks is not None:
        var = var.chunk(chunks if isinstance(chunks, Mapping) else {"y": chunks, "x": chunks})
    if node_offset is not None:
        var.attrs["node_offset"] = int(np.asarray(node_offset).ravel()[0])
    return var, units, long_name


def _open_dataset(path: Path, *, name: str, chunks: Any) -> xr.Dataset:
    try:
        return xr.open_dataset(
            path,
            engine="netcdf4",
            mask_and_scale=True,
            decode_coords="all",
            decode_times=False,
            chunks={} if chunks is not None else None,
        )
    except (OSError, RuntimeError, ValueError, KeyError, TypeError) as exc:
        msg = (
            f"cannot read grid file {str(path)!r} for {name!r} as NetCDF ({exc}). The file is "
            "corrupt or truncated; re-export it, or convert it with "
            "'gdal_translate -of GTiff IN OUT.tif'."
        )
        raise InputError(msg) from exc


def _pick_variable(
    ds: xr.Dataset,
    variable: str | None,
    *,
    path: Path,
    name: str,
    names: tuple[str | None, str | None] | None = None,
) -> str:
    """``variable``, or the file's one 2-D gridded variable; GridError if absent or ambiguous."""
    listing = ", ".join(f"{k}{tuple(v.dims)}" for k, v in ds.data_vars.items()) or "none"
    if variable is None:
        candidates = [k for k, v in ds.data_vars.items() if _spatial_dims(v, ds, names) is not None]
        if len(candidates) != 1:
            named = (
                f"; with y_name = {names[0]!r} and x_name = {names[1]!r}: give two of its "
                "dimension names"
                if names
                else ""
            )
            found = "no" if not candidates else f"{len(candidates)} ({', '.join(candidates)})"
            msg = (
                f"NetCDF file {str(path)!r} for {name!r} has {found} 2-D gridded variables; "
                f"expected exactly one. Its variables: {listing}. Choose one with "
                "variable=NAME (workflow: 'variable = \"NAME\"')" + named + "."
            )
            raise GridError(msg)
        return str(candidates[0])
    if variable not in ds.data_vars:
        msg = (
            f"NetCDF file {str(path)!r} has no data variable {variable!r}. Its variables: "
            f"{listing}. Give one of these names."
        )
        raise GridError(msg)
    return variable


def _located_variable(
    ds: xr.Dataset,
    variable: str,
    *,
    path: Path,
    names: tuple[str | None, str | None] | None = None,
    crs: str | None = None,
) -> tuple[xr.DataArray, CRS]:
    """The variable as a (lazy) ``(y, x)`` grid on exactly regular coordinates, and its CRS."""
    var = ds[variable]
    if names is not None and not all(n in var.dims for n in names):
        msg = (
            f"variable {variable!r} in {str(path)!r} has dims {list(var.dims)}, but "
            f"y_name = {names[0]!r} and x_name = {names[1]!r} were given (both are needed). "
            "Give two of its dimension names."
        )
        raise GridError(msg)
    roles = _spatial_dims(var, ds, names)
    if roles is None:
        msg = (
            f"variable {variable!r} in {str(path)!r} has dims {dict(var.sizes)}; expected "
            "exactly two spatial dimensions (lat/lon, latitude/longitude or y/x, each longer "
            "than 1, with CF units such as 'degrees_north'/'degrees_east'). Select one 2-D "
            "slice (e.g. 'ncks -d time,0') or give the right variable."
        )
        raise GridError(msg)
    squeeze = [d for d in var.dims if var.sizes[d] == 1]
    var = var.squeeze(squeeze, drop=True) if squeeze else var
    geographic = "lat" in roles
    ydim, xdim = (roles["lat"], roles["lon"]) if geographic else (roles["y"], roles["x"])
    stated = _netcdf_crs(ds, var, path=path, geographic=geographic and crs is None)
    crs = given_crs(crs, stated, source=f"variable {variable!r} in {str(path)!r}")
    if crs is None:
        msg = (
            f"variable {variable!r} in {str(path)!r} has projected-looking coordinates "
            f"({ydim!r}, {xdim!r}) but no CRS: no grid_mapping variable and no lat/lon "
            'units. Give its CRS with the input key crs (e.g. crs = "EPSG:3031"), or '
        )
        raise GridError(msg + CRS_FIX[0].lower() + CRS_FIX[1:])
    for dim in (ydim, xdim):
        if dim not in ds.variables:
            msg = (
                f"dimension {dim!r} of {variable!r} in {str(path)!r} has no coordinate "
                "values, so the grid cannot be located. Add a coordinate variable with the "
                "cell-centre positions. " + CRS_FIX
            )
            raise GridError(msg)
    var = var.drop_vars([c for c in var.coords if c not in (ydim, xdim)])
    var = var.rename({ydim: "y", xdim: "x"}).transpose("y", "x")
    regular = {
        dim: regular_coords(
            np.asarray(var[dim].values, dtype=np.float64), dim=dim, variable=variable, path=path
        )
        for dim in ("y", "x")
    }
    return var.assign_coords(regular), crs


def _load(var: xr.DataArray, ds: xr.Dataset, *, variable: str, path: Path) -> xr.DataArray:
    """The values read into memory; the file is closed either way."""
    try:
        return var.load()
    except (OSError, RuntimeError, ValueError) as exc:
        msg = (
            f"cannot read the values of {variable!r} from {str(path)!r} ({exc}). The "
            "file is corrupt or truncated; re-export it."
        )
        raise InputError(msg) from exc
    finally:
        ds.close()


def _netcdf_crs(ds: xr.Dataset, var: xr.DataArray, *, path: Path, geographic: bool) -> CRS | None:
    gm = var.encoding.get("grid_mapping") or var.attrs.get("grid_mapping")
    if gm and " " not in str(gm) and gm in ds.variables:
        attrs = ds[gm].attrs
        try:
            wkt = attrs.get("crs_wkt") or attrs.get("spatial_ref")
            crs = CRS.from_wkt(wkt) if wkt else CRS.from_cf(dict(attrs))
        except CRSError as exc:
            msg = (
                f"the grid_mapping variable {gm!r} in {str(path)!r} does not describe a CRS "
                f"({exc}). Fix its attributes (CF grid_mapping_name and parameters, or "
                "crs_wkt)."
            )
            raise GridError(msg) from exc
        if crs.is_geographic and crs.to_epsg() is None:
            # CF latitude_longitude with the WGS84 ellipsoid and no datum: taken as WGS 84
            # (common practice).
            ell = crs.ellipsoid
            if (
                ell is not None
                and abs(ell.semi_major_metre - 6378137.0) < 1e-3
                and abs(ell.inverse_flattening - 298.257223563) < 1e-6
            ):
                return CRS.from_epsg(4326)
        return crs
    if geographic:
        return CRS.from_epsg(4326)
    return None


def regular_coords(values: np.ndarray, *, dim: str, variable: str, path: Path) -> np.ndarray:
    """Check a coordinate is evenly spaced; return it recomputed exactly from its end points."""
    n = values.size
    if not np.all(np.isfinite(values)):
        msg = (
            f"coordinate {dim!r} of {variable!r} in {str(path)!r} has NaN or infinite "
            "values. Fix the coordinate variable."
        )
        raise GridError(msg)
    step = (values[-1] - values[0]) / (n - 1)
    regular = values[0] + step * np.arange(n)
    # 1 % of a cell absorbs float32 rounding of stored coordinates (common practice)
    if step == 0 or np.max(np.abs(values - regular)) > 0.01 * abs(step):
        worst = float(np.max(np.abs(np.diff(values) - step)))
        msg = (
            f"coordinate {dim!r} of {variable!r} in {str(path)!r} is not evenly spaced "
            f"(mean step {step!r}, steps differ by up to {worst!r}); lidmelt needs a regular "
            "grid. Resample it onto a regular grid first (e.g. 'gdalwarp' or xarray interp)."
        )
        raise GridError(msg)
    return regular


def given_crs(given: str | None, stated: CRS | None, *, source: str) -> CRS | None:
    """The CRS of a grid: ``stated`` by the file, else ``given`` by the caller.

    Raises
    ------
    GridError
        If ``given`` is not a CRS, or the file states a different one.
    """
    if given is None:
        return stated
    try:
        crs = CRS.from_user_input(given)
    except CRSError as exc:
        msg = (
            f"crs = {given!r} for {source} is not a CRS that PROJ understands ({exc}); "
            "expected 'EPSG:<code>' or WKT, e.g. crs = \"EPSG:4326\"."
        )
        raise GridError(msg) from exc
    if stated is not None and not stated.equals(crs, ignore_axis_order=True):
        msg = (
            f"{source} states the CRS {stated.to_string()!r} but crs = {given!r} was given; "
            "the crs key only fills in a CRS the file does not state. Remove the crs key, or "
            "fix the file's CRS."
        )
        raise GridError(msg)
    return crs
