"""Tests of lidmelt.grids._area: cell areas on the ellipsoid.

Check values: the WGS 84 total surface area, Archimedes' hat-box theorem on a sphere, and
pyproj.Geod.polygon_area_perimeter (geodesic polygons, an independent library) on cell
polygons densified along their edges so that they follow parallels and meridians.
"""

from __future__ import annotations

import math

import numpy as np
import numpy.testing as npt
import pytest

from lidmelt._errors import GridError
from lidmelt.grids._area import WGS84_SURFACE_AREA_KM2, cell_area_km2
from lidmelt.grids._grid import Grid

# EPSG:3857 sphere radius a = 6378137 m (EPSG Guidance Note 7-2 [from memory])
R_3857 = 6378137.0


@pytest.fixture(scope="module")
def geod():
    from pyproj import Geod

    return Geod(ellps="WGS84")


def densified_cell_area_km2(geod, west, east, south, north, n=64):
    """Area of a lon/lat rectangle from a geodesic polygon with n points per edge (pyproj)."""
    lons = np.concatenate(
        [np.linspace(west, east, n), np.full(n, east), np.linspace(east, west, n), np.full(n, west)]
    )
    lats = np.concatenate(
        [
            np.full(n, south),
            np.linspace(south, north, n),
            np.full(n, north),
            np.linspace(north, south, n),
        ]
    )
    area, _ = geod.polygon_area_perimeter(lons, lats)
    return abs(area) / 1e6


def test_global_total_is_wgs84_area():
    area = cell_area_km2(Grid.from_extent(-180, 180, -90, 90, 1.0))
    # the published total (its source: lidmelt.grids._area.WGS84_SURFACE_AREA_KM2)
    # closed-form cell areas: equal to the 12 figures of the table, to rounding
    assert float(area.sum()) == pytest.approx(WGS84_SURFACE_AREA_KM2, rel=1e-11)
    assert area.attrs["units"] == "km2"
    assert area.dims == ("y", "x")
    assert area.shape == (180, 360)


def test_rows_against_geod_polygons(geod):
    t = Grid.from_extent(-180, 180, -90, 90, 1.0)
    area = cell_area_km2(t).values
    # all columns equal; north-south symmetry (the ellipsoid is symmetric about the equator)
    npt.assert_array_equal(area, np.repeat(area[:, :1], 360, axis=1))
    # rtol: float64 rounding in q(phi2) - q(phi1) (q ~ 2, polar-row differences ~ 1e-4)
    npt.assert_allclose(area[:, 0], area[::-1, 0], rtol=1e-10)
    for row, north in [(0, 90.0), (30, 60.0), (89, 1.0), (60, 30.0), (179, -89.0)]:
        expected = densified_cell_area_km2(geod, 0.0, 1.0, north - 1.0, north)
        # 64 points per edge: the geodesic chords follow the parallels to ~1e-8 relative
        assert area[row, 0] == pytest.approx(expected, rel=1e-7), row


def test_sphere_hat_box():
    """On a sphere (e = 0) a band has area 2 pi R^2 (sin phi2 - sin phi1) (Archimedes)."""
    r_m = 6371000.0
    t = Grid.from_extent(0, 10, -30, 60, 5.0, crs=f"+proj=longlat +R={r_m} +no_defs")
    area = cell_area_km2(t).values
    lat_n = 60.0 - 5.0 * np.arange(18)
    expected = (
        (r_m / 1e3) ** 2
        * math.radians(5.0)
        * (np.sin(np.radians(lat_n)) - np.sin(np.radians(lat_n - 5.0)))
    )
    npt.assert_allclose(area[:, 1], expected, rtol=1e-12)


def test_fine_grid_rows(geod):
    t = Grid.from_extent(-10, 10, -80, -70, 0.1)
    area = cell_area_km2(t).values
    expected = densified_cell_area_km2(geod, 0.0, 0.1, -80.0, -79.9)
    assert area[-1, 0] == pytest.approx(expected, rel=1e-7)


def mercator_inverse_lat(y):
    return np.degrees(2.0 * np.arctan(np.exp(y / R_3857)) - np.pi / 2)


def test_mercator_grid(geod):
    """EPSG:3857 cells are bounded by meridians and parallels (the projection is cylindrical).

    Check values: (1) the densified lon/lat rectangle through the cell's corners (pyproj), the
    true cell, which the four-corner geodesic quadrilateral matches to O((h/R)^2): here 100 km
    cells, (h/R)^2 = 2.5e-4 as an upper bound (the rows checked differ by 1.5e-5 to 3.5e-5),
    so rel 1e-4; (2) the four-corner geodesic polygon computed by pyproj directly, the
    documented definition, to 1e-9.
    """
    h = 1e5
    t = Grid.from_extent(-5e5, 5e5, -1e6, 1.2e7, h, crs="EPSG:3857")
    area = cell_area_km2(t).values
    xs = -5e5 + h * np.arange(t.width + 1)
    ys = 1.2e7 - h * np.arange(t.height + 1)
    lons = np.degrees(xs / R_3857)
    lats = mercator_inverse_lat(ys)
    for row in (0, 40, 100, t.height - 1):
        for col in (0, 4):
            w, e = lons[col], lons[col + 1]
            n, s = lats[row], lats[row + 1]
            true = densified_cell_area_km2(geod, w, e, s, n)
            assert area[row, col] == pytest.approx(true, rel=1e-4)
            quad, _ = geod.polygon_area_perimeter([w, e, e, w], [s, s, n, n])
            assert area[row, col] == pytest.approx(abs(quad) / 1e6, rel=1e-9)


def test_projected_cells_tile_the_region(geod):
    """Neighbouring cells share geodesic edges: their sum is the area of the outer boundary
    polygon through all the boundary corners (pyproj)."""
    h = 2e5
    t = Grid.from_extent(-1e6, 1e6, 2e6, 5e6, h, crs="EPSG:3857")
    total = float(cell_area_km2(t).sum())
    xs = -1e6 + h * np.arange(t.width + 1)
    ys = 5e6 - h * np.arange(t.height + 1)
    ring_x = np.concatenate(
        [xs, np.full(t.height, xs[-1]), xs[::-1][1:], np.full(t.height - 1, xs[0])]
    )
    ring_y = np.concatenate(
        [np.full(t.width + 1, ys[0]), ys[1:], np.full(t.width, ys[-1]), ys[::-1][1:-1]]
    )
    boundary, _ = geod.polygon_area_perimeter(
        np.degrees(ring_x / R_3857), mercator_inverse_lat(ring_y)
    )
    assert total == pytest.approx(abs(boundary) / 1e6, rel=1e-9)


def test_chunked_matches_numpy():
    geo = Grid.from_extent(-20, 20, -10, 10, 0.5)
    lazy = cell_area_km2(geo, chunks=(16, 32))
    assert hasattr(lazy.data, "dask")
    npt.assert_array_equal(lazy.values, cell_area_km2(geo).values)
    proj = Grid.from_extent(-5e5, 5e5, -5e5, 5e5, 5e4, crs="EPSG:3857")
    lazy = cell_area_km2(proj, chunks=(7, 9))
    npt.assert_array_equal(lazy.values, cell_area_km2(proj).values)


def test_coords_and_errors():
    t = Grid.from_extent(0, 4, 0, 2, 1.0)
    area = cell_area_km2(t)
    npt.assert_array_equal(area["x"], t.template()["x"])
    assert tuple(area.rio.transform())[:6] == t.transform
    with pytest.raises(GridError, match=r"must be a Grid"):
        cell_area_km2("EPSG:4326")
