"""Tests of lidmelt.grids._align: the target grid and resampling onto it.

The alignment checks sample one analytic field, f = 10 sin(lon) cos(lat) + 0.1 lat (K, defined
here), on a source grid, align it, and compare with f evaluated at the target cell centres.
The tolerance is the standard error bound of bilinear interpolation,
|error| <= (hx^2 max|f_xx| + hy^2 max|f_yy|) / 8 (common practice; e.g. any numerical-analysis
text on tensor-product linear interpolation), derived for each case in the test.
A one-cell misalignment would give an error of order |f_x| h, tens of times larger.
"""

from __future__ import annotations

import math

import dask.array as dsa
import numpy as np
import numpy.testing as npt
import pytest
import xarray as xr
from pyproj import CRS

from lidmelt._errors import GridError
from lidmelt.grids._align import align
from lidmelt.grids._grid import Grid

DEG = math.pi / 180.0
# WGS 84 / EPSG:3857 sphere radius a = 6378137 m (EPSG Guidance Note 7-2, Popular
# Visualisation Pseudo-Mercator [from memory])
R_3857 = 6378137.0


def field(lon, lat):
    return 10.0 * np.sin(np.radians(lon)) * np.cos(np.radians(lat)) + 0.1 * lat


# second derivatives of field in degrees: |f_lonlon|, |f_latlat| <= 10 DEG^2
F2_DEG = 10.0 * DEG**2


def geographic_source(west, east, south, north, step, *, dtype="float32", name="anomaly"):
    """Source DataArray of ``field`` on a lon/lat grid (cell centres), CRS EPSG:4326."""
    lon = np.arange(west + step / 2, east, step)
    lat = np.arange(north - step / 2, south, -step)
    da = xr.DataArray(
        field(lon[None, :], lat[:, None]).astype(dtype),
        dims=("y", "x"),
        coords={"y": lat, "x": lon},
        name=name,
        attrs={"units": "K"},
    )
    return da.rio.write_crs("EPSG:4326")


def mercator_inverse(x, y):
    """Spherical Pseudo-Mercator inverse (EPSG Guidance Note 7-2 [from memory])."""
    lon = np.degrees(x / R_3857)
    lat = np.degrees(2.0 * np.arctan(np.exp(y / R_3857)) - np.pi / 2)
    return lon, lat


# ------------------------------------------------------------------------------ Grid


def test_target_from_extent():
    t = Grid.from_extent(-30.0, 30.0, -10.0, 20.0, 0.5)
    assert t.shape == (60, 120)
    assert t.bounds == (-30.0, -10.0, 30.0, 20.0)
    assert t.transform == (0.5, 0.0, -30.0, 0.0, -0.5, 20.0)
    assert t.crs == "EPSG:4326"
    assert t.is_geographic
    tpl = t.template()
    assert tpl.dims == ("y", "x")
    npt.assert_allclose(tpl["x"][[0, -1]], [-29.75, 29.75])  # cell centres
    npt.assert_allclose(tpl["y"][[0, -1]], [19.75, -9.75])
    assert tuple(tpl.rio.transform())[:6] == t.transform
    assert CRS(tpl.rio.crs.to_wkt()).equals(CRS("EPSG:4326"))
    lazy = t.template(chunks=(16, 32))
    assert lazy.data.chunksize == (16, 32)


def test_target_dict_round_trip_and_from_grid():
    t = Grid.from_extent(-2e6, 2e6, -1e6, 1e6, 1e5, crs="EPSG:3857")
    doc = t.to_dict()
    assert set(doc) == {"crs_wkt", "transform", "width", "height", "bounds"}
    assert Grid.from_dict(doc) == t
    assert Grid.from_grid(t.template()) == t
    assert not t.is_geographic
    # the WKT of EPSG:4326 is normalised to the code, so equal grids compare equal
    g = Grid(CRS("EPSG:4326").to_wkt(), (1, 0, 0, 0, -1, 10), 10, 10)
    assert g.crs == "EPSG:4326"


def test_target_validation():
    with pytest.raises(GridError, match=r"not a whole number of cells"):
        Grid.from_extent(0, 10, 0, 10, 3.0)
    with pytest.raises(GridError, match=r"empty or reversed"):
        Grid.from_extent(10, 0, 0, 10, 1.0)
    with pytest.raises(GridError, match=r"not north-up"):
        Grid("EPSG:4326", (1, 0, 0, 0, 1, 0), 10, 10)
    with pytest.raises(GridError, match=r"at most 360"):
        Grid.from_extent(-180, 190, 0, 10, 1.0)
    with pytest.raises(GridError, match=r"within -90..90"):
        Grid.from_extent(0, 10, 80, 100, 1.0)
    with pytest.raises(GridError, match=r"not a CRS"):
        Grid("EPSG:999999", (1, 0, 0, 0, -1, 0), 10, 10)
    with pytest.raises(GridError, match=r"width=0"):
        Grid("EPSG:4326", (1, 0, 0, 0, -1, 0), 0, 10)


def test_lonlat_centres_projected_vs_mercator_formula():
    t = Grid.from_extent(-3e6, 3e6, -2e6, 4e6, 5e5, crs="EPSG:3857")
    lon, lat = t.lonlat_centres()
    x, y = np.meshgrid(t.template()["x"].values, t.template()["y"].values)
    elon, elat = mercator_inverse(x, y)  # check value: the closed-form inverse
    npt.assert_allclose(lon, elon, atol=1e-9)
    npt.assert_allclose(lat, elat, atol=1e-9)
    lon_w, lat_w = t.lonlat_centres(rows=slice(2, 4), cols=slice(1, 3))
    npt.assert_array_equal(lon_w, lon[2:4, 1:3])
    npt.assert_array_equal(lat_w, lat[2:4, 1:3])


# ------------------------------------------------------------------------------ align


def check_against_field(out, target, tol, mask=None):
    lon, lat = target.lonlat_centres()
    err = np.abs(out.values - field(lon, lat))
    if mask is not None:
        err = err[mask]
    assert np.isfinite(err).all()
    assert err.max() <= tol, err.max()


def test_align_finer_target_same_crs():
    src = geographic_source(-40, 40, -40, 40, 1.0)
    target = Grid.from_extent(-20, 20, -20, 20, 0.25)
    out = align(src, target, name="thermal_anomaly_k")
    # bound: (1^2 + 1^2) * 10 DEG^2 / 8 = 7.6e-4 K, plus float32 storage of |f| <= 14 (1e-6)
    check_against_field(out, target, 2 * F2_DEG / 8 + 2e-6)
    assert out.name == "thermal_anomaly_k"
    assert out.dtype == np.float32
    assert out.attrs["units"] == "K"
    assert out.attrs["resampling"] == "bilinear"
    xr.testing.assert_identical(out.coords.to_dataset(), target.template().coords.to_dataset())


def test_align_zero_to_360_source_onto_global_target():
    """A global 0..360 source onto a -180..180 target: edge columns need periodic padding."""
    lon = np.arange(0.5, 360.0, 1.0)
    lat = np.arange(89.5, -90.0, -1.0)
    src = xr.DataArray(
        field(lon[None, :], lat[:, None]), dims=("y", "x"), coords={"y": lat, "x": lon}, name="a"
    ).rio.write_crs("EPSG:4326")
    target = Grid.from_extent(-180, 180, -80, 80, 0.5)
    out = align(src, target)
    assert out.dtype == np.float64
    check_against_field(out, target, 2 * F2_DEG / 8)


def test_align_target_across_antimeridian():
    src = geographic_source(-180, 180, -60, 60, 1.0, dtype="float64")
    target = Grid.from_extent(170, 190, -10, 10, 0.25)  # east > 180
    out = align(src, target)
    check_against_field(out, target, 2 * F2_DEG / 8)


def test_align_regional_source_in_0_360_frame_onto_global_target():
    """A source spanning 150..210 E fills 150..180 and -180..-150 of a -180..180 target."""
    src = geographic_source(150, 210, -30, 30, 1.0, dtype="float64")
    target = Grid.from_extent(-180, 180, -30, 30, 0.5)
    out = align(src, target)
    lon, lat = target.lonlat_centres()
    lon360 = np.mod(lon, 360.0)
    # inside the hull of source cell centres (150.5..209.5 E, -29.5..29.5 N)
    inside = (lon360 >= 150.5) & (lon360 <= 209.5) & (np.abs(lat) <= 29.5)
    check_against_field(out, target, 2 * F2_DEG / 8, mask=inside)
    outside = (lon360 < 149.75) | (lon360 > 210.25)
    assert np.isnan(out.values[outside]).all()
    assert np.isfinite(out.values[(lon360 > 150) & (lon360 < 210)]).all()


def test_align_from_mercator_source():
    """Source in EPSG:3857 (50 km cells) onto a finer lon/lat target.

    Bound: cells are h = 50 km in x and y, h/R = 7.84e-3. In Mercator coordinates
    f_xx = f_lonlon (dlon/dx)^2 with |f_lonlon| <= 10 per rad^2, and
    f_yy = f_latlat (dlat/dy)^2 + f_lat d2lat/dy2 with dlat/dy = cos(lat)/R,
    |d2lat/dy2| <= 1/R^2, |f_latlat| <= 10, |f_lat| <= 10 + 0.1*180/pi = 15.73 (per rad),
    so |error| <= (h/R)^2 (10 + 10 + 15.73) / 8 = 2.75e-4 K.
    """
    h = 5e4
    x = np.arange(-4e6 + h / 2, 4e6, h)
    y = np.arange(4e6 - h / 2, -4e6, -h)
    lon, lat = mercator_inverse(x[None, :], y[:, None])
    src = xr.DataArray(
        field(lon, lat), dims=("y", "x"), coords={"y": y, "x": x}, name="m"
    ).rio.write_crs("EPSG:3857")
    target = Grid.from_extent(-30, 30, -30, 30, 0.1)
    out = align(src, target)
    check_against_field(out, target, (h / R_3857) ** 2 * (10 + 10 + 15.73) / 8)


def test_align_onto_mercator_target():
    src = geographic_source(-60, 60, -60, 60, 0.5, dtype="float64")
    target = Grid.from_extent(-4e6, 4e6, -4e6, 4e6, 2e4, crs="EPSG:3857")
    out = align(src, target)
    # bound: 0.5 degree cells, (0.5^2 + 0.5^2) * 10 DEG^2 / 8
    check_against_field(out, target, 2 * 0.25 * F2_DEG / 8)
    assert tuple(out.rio.transform())[:6] == target.transform


def test_align_nodata_respected():
    src = geographic_source(0, 20, 0, 20, 1.0)
    src.values[5:10, 5:10] = np.nan  # lat 14.5..10.5, lon 5.5..9.5 (centres)
    target = Grid.from_extent(0, 20, 0, 20, 0.5)
    out = align(src, target)
    lon, lat = target.lonlat_centres()
    hole = (lon > 5) & (lon < 10) & (lat > 10) & (lat < 15)  # inside the NaN source cells
    assert np.isnan(out.values[hole]).all()
    finite = out.values[np.isfinite(out.values)]
    assert np.abs(finite).max() < 20  # no dtype-maximum fill (rioxarray#570)
    far = (lon < 4) | (lon > 11) | (lat < 9) | (lat > 16)
    assert np.isfinite(out.values[far]).all()


def test_align_nearest_categories():
    """Nearest on a target that halves each source cell: each target cell gets its parent."""
    cats = np.arange(20.0).reshape(4, 5)
    src = xr.DataArray(
        cats,
        dims=("y", "x"),
        coords={"y": 3.5 - np.arange(4), "x": 0.5 + np.arange(5)},
    ).rio.write_crs("EPSG:4326")
    target = Grid.from_extent(0, 5, 0, 4, 0.5)
    out = align(src, target, resampling="nearest")
    # check value: the parent cell of each half-size cell (index // 2)
    npt.assert_array_equal(out.values, np.repeat(np.repeat(cats, 2, axis=0), 2, axis=1))


def test_align_same_grid_stays_lazy():
    target = Grid.from_extent(-180, 180, -90, 90, 1.0)

    def boom(block):
        raise AssertionError("align computed an input that was already on the target grid")

    data = dsa.zeros(target.shape, chunks=(90, 180), dtype="float32").map_blocks(
        boom, dtype="float32"
    )
    tpl = target.template()
    # coordinates off by float noise far below the tolerance (1e-6 of a cell)
    src = xr.DataArray(
        data,
        dims=("y", "x"),
        coords={"y": tpl["y"].values + 1e-12, "x": tpl["x"].values},
        name="big",
        attrs={"units": "K"},
    ).rio.write_crs("EPSG:4326")
    out = align(src, target, name="renamed")
    assert out.data.name == data.name  # the same dask graph: nothing added, nothing computed
    assert out.name == "renamed"
    xr.testing.assert_identical(out.coords.to_dataset(), tpl.coords.to_dataset())


def test_align_errors():
    target = Grid.from_extent(0, 10, 0, 10, 1.0)
    no_crs = xr.DataArray(
        np.zeros((3, 3)),
        dims=("y", "x"),
        coords={"y": [2.5, 1.5, 0.5], "x": [0.5, 1.5, 2.5]},
        name="a",
    )
    with pytest.raises(GridError, match=r"has no CRS.*write_crs"):
        align(no_crs, target)
    wrong_dims = xr.DataArray(np.zeros((3, 3)), dims=("lat", "lon"))
    with pytest.raises(GridError, match=r"expected \('y', 'x'\)"):
        align(wrong_dims, target)
    src = geographic_source(100, 120, 40, 60, 1.0, name="far")
    with pytest.raises(
        GridError,
        match=(
            r"'far' \(extent west, south, east, north = 100, 40, "
            r"120, 60 in EPSG:4326\) does not overlap the target "
            r"grid \(extent 0, 0, 10, 10 in EPSG:4326\)"
        ),
    ):
        align(src, target)
    merc = Grid.from_extent(-1e6, 1e6, -1e6, 1e6, 1e5, crs="EPSG:3857")
    with pytest.raises(GridError, match=r"does not overlap.*EPSG:3857"):
        align(src, merc)
    with pytest.raises(GridError, match=r"resampling='spline'.*bilinear"):
        align(geographic_source(0, 10, 0, 10, 1.0), target, resampling="spline")


def test_align_global_0_360_source_onto_polar_stereographic_target():
    """A south-polar stereographic target spans every longitude, the antimeridian included."""
    lon = np.arange(0.5, 360.0, 1.0)
    lat = np.arange(89.5, -90.0, -1.0)
    src = xr.DataArray(
        field(lon[None, :], lat[:, None]), dims=("y", "x"), coords={"y": lat, "x": lon}, name="a"
    ).rio.write_crs("EPSG:4326")
    target = Grid.from_extent(-2e6, 2e6, -2e6, 2e6, 1e4, crs="EPSG:3031")
    out = align(src, target)
    _, tlat = target.lonlat_centres()
    # The bound holds where the 10 km target cells are smaller than the 1-degree source cells
    # (GDAL widens the kernel when downsampling): one degree of longitude is 111.3 cos(lat)
    # km, more than 10 km north of 84.8 S.
    check_against_field(out, target, 2 * F2_DEG / 8, mask=tlat > -84.0)


@pytest.mark.parametrize("resampling", ["bilinear", "average", "cubic"])
def test_align_coarsening_linear_field(resampling):
    """Coarsening 0.1 degree cells to 1 degree (GDAL's widened kernels).

    Check value: a symmetric weighted average of a linear function equals the function at the
    centre (identity), so g = 0.3 lon - 0.2 lat + 5 is reproduced at the target centres.
    """
    step = 0.1
    lon = np.arange(-20 + step / 2, 20, step)
    lat = np.arange(20 - step / 2, -20, -step)
    g = 0.3 * lon[None, :] - 0.2 * lat[:, None] + 5.0
    src = xr.DataArray(g, dims=("y", "x"), coords={"y": lat, "x": lon}).rio.write_crs("EPSG:4326")
    target = Grid.from_extent(-10, 10, -10, 10, 1.0)
    out = align(src, target, resampling=resampling)
    tlon, tlat = target.lonlat_centres()
    npt.assert_allclose(out.values, 0.3 * tlon - 0.2 * tlat + 5.0, atol=1e-6)


def gridline_global(step=3.0, *, node_offset=None):
    """A global gridline-registered lon/lat grid of ``field``: nodes at 0..360 and -90..90."""
    lon = np.arange(0.0, 360.0 + step / 2, step)
    lat = np.arange(90.0, -90.0 - step / 2, -step)
    da = xr.DataArray(
        field(lon[None, :], lat[:, None]), dims=("y", "x"), coords={"y": lat, "x": lon}
    )
    if node_offset is not None:
        da.attrs["node_offset"] = node_offset
    da.attrs["source"] = "age.nc"
    return da.rio.write_crs("EPSG:4326")


def test_gridline_global_input_as_target_grid():
    from lidmelt.grids._grid import registration, registration_note

    da = gridline_global()
    assert registration(da) == "gridline"
    grid = Grid.from_grid(da)
    # check values: 121 nodes of 3 degrees from 0 to 360 are 120 distinct columns; cells are
    # centred on the nodes, so the grid runs from -1.5 to 358.5 and is periodic
    assert (grid.width, grid.height) == (120, 61)
    npt.assert_allclose(grid.bounds, (-1.5, -91.5, 358.5, 91.5))
    assert grid.is_periodic
    assert "gridline-registered" in registration_note(da, grid)
    assert "dropped (1)" in registration_note(da, grid)
    # the input aligned onto its own grid returns the node values (field at the nodes)
    out = align(da, grid, name="anomaly")
    npt.assert_allclose(out.values, da.values[:, :-1], atol=1e-6)


def test_gridline_attribute_and_wide_grid_errors():
    from lidmelt.grids._grid import registration

    assert registration(gridline_global(node_offset=1)) == "pixel"
    lon = np.arange(0.5, 363.0, 1.0)  # 363 one-degree cell centres: more than one turn
    da = xr.DataArray(np.zeros((2, lon.size)), dims=("y", "x"), coords={"y": [0.5, -0.5], "x": lon})
    da.attrs["source"] = "wide.nc"
    with pytest.raises(GridError, match=r"wide.nc spans 363.0 degrees.*\[grid\] like.*Cut"):
        Grid.from_grid(da.rio.write_crs("EPSG:4326"))


def polar_source(step_m=25e3, half_width_m=3.5e6):
    """``field`` on an EPSG:3031 grid (cell centres), NaN north of 55 S (a nodata margin)."""
    x = np.arange(-half_width_m + step_m / 2, half_width_m, step_m)
    y = x[::-1]
    xx, yy = np.meshgrid(x, y)
    lon, lat = (np.asarray(v) for v in _to_lonlat_3031().transform(xx, yy))
    values = np.where(lat < -55.0, field(lon, lat), np.nan)
    da = xr.DataArray(values, dims=("y", "x"), coords={"y": y, "x": x}, name="age")
    return da.rio.write_crs("EPSG:3031")


def _to_lonlat_3031():
    from pyproj import Transformer

    return Transformer.from_crs("EPSG:3031", "EPSG:4326", always_xy=True)


def test_coarsening_polar_stereographic_stays_inside_each_cell(caplog):
    """A 25 km polar-stereographic input onto a 2-degree lon/lat target (issue 13).

    Check: every target value lies within the range of the true field over its own target
    cell (the field sampled on 41 x 41 points of the cell, edges included; between samples the
    field can exceed the sampled range by at most (h^2 / 8) max|f''| <= (0.05^2 / 8) F2_DEG per
    axis, the linear-interpolation bound, far below the 1e-6 allowed here).
    """
    import logging

    src = polar_source()
    target = Grid.from_extent(-180, 180, -80, -56, 2.0)
    with caplog.at_level(logging.INFO, logger="lidmelt.grids._align"):
        out = align(src, target, name="age")
    assert "cell means" in caplog.text
    assert out.attrs["resampling"] == "average (cell means)"
    west, _, _, north = target.bounds
    s = np.linspace(0.0, 2.0, 41)
    lo = np.full(target.shape, np.inf)
    hi = np.full(target.shape, -np.inf)
    for du in s:
        for dv in s:
            lon = west + 2.0 * np.arange(target.width)[None, :] + du
            lat = north - 2.0 * np.arange(target.height)[:, None] - dv
            v = field(lon, lat)
            lo, hi = np.minimum(lo, v), np.maximum(hi, v)
    got = out.values
    valid = np.isfinite(got)
    assert valid.sum() > 0.95 * got.size  # the 55 S margin lies outside the target
    bad = valid & ((got < lo - 1e-6) | (got > hi + 1e-6))
    assert not bad.any(), f"{bad.sum()} cells outside their range"
