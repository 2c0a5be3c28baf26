"""Tests of lidmelt.grids._anomaly: plume thermal anomalies.

Distances for the check values come from pyproj.Geod (WGS 84), an independent geodesic library,
or from the closed form on the equator: two points on the equator less than (1 - f) 180 degrees
apart are joined by the equatorial arc, of length a * dlon (a = 6378137 m, WGS 84 semi-major
axis, NIMA TR8350.2 table 3.1 [from memory]; the equatorial-geodesic property: Karney 2013,
J. Geodesy 87, 43-55).
"""

from __future__ import annotations

import json
import math

import numpy as np
import numpy.testing as npt
import pytest
import xarray as xr
from pyproj import Geod

from lidmelt._errors import GridError, InputError
from lidmelt.grids._anomaly import Plume, plume_anomaly, plume_profile
from lidmelt.grids._grid import Grid

A_WGS84_KM = 6378.137
GEOD = Geod(ellps="WGS84")


def equator_grid():
    """0.1 degree grid with cell centres on the equator and on whole tenths of a degree."""
    return Grid.from_extent(-10.05, 10.05, -1.05, 1.05, 0.1)


def value_at(da, lon, lat):
    return float(da.sel(x=lon, y=lat, method="nearest"))


def geod_distance_km(target, lon0, lat0):
    lon, lat = target.lonlat_centres()
    lon, lat = np.ascontiguousarray(lon).ravel(), np.ascontiguousarray(lat).ravel()
    _, _, d = GEOD.inv(np.full(lon.shape, lon0), np.full(lat.shape, lat0), lon, lat)
    return (np.asarray(d) / 1000.0).reshape(target.shape)


# ------------------------------------------------------------------------------ reference values


def test_peak_at_centre():
    t = equator_grid()
    for shape in ("gaussian", "cosine", "top-hat"):
        da = plume_anomaly(t, [Plume(0.0, 0.0, 300.0, 150.0, shape=shape)])
        # identity: d = 0 at the centre cell, every profile gives A there
        assert value_at(da, 0.0, 0.0) == pytest.approx(150.0, abs=1e-12)
        assert float(da.max()) == pytest.approx(150.0, abs=1e-12)


def test_profiles_at_known_distances_on_equator():
    t = equator_grid()
    two_deg_km = A_WGS84_KM * math.radians(2.0)  # equatorial arc, closed form
    # gaussian, r = the distance to lon 2: A exp(-1) there (definition)
    g = plume_anomaly(t, [Plume(0.0, 0.0, two_deg_km, 100.0, shape="gaussian")])
    assert value_at(g, 2.0, 0.0) == pytest.approx(100.0 / math.e, rel=1e-9)
    # cosine, r = twice that: A cos^2(pi/4) = A/2 at lon 2, and 0 at d = r (lon 4)
    c = plume_anomaly(t, [Plume(0.0, 0.0, 2 * two_deg_km, 100.0, shape="cosine")])
    assert value_at(c, 2.0, 0.0) == pytest.approx(50.0, rel=1e-9)
    assert value_at(c, -4.0, 0.0) == pytest.approx(0.0, abs=1e-9)
    assert value_at(c, 6.0, 0.0) == 0.0
    # top-hat just beyond lon 2: A at lon 2, 0 at lon 2.1
    h = plume_anomaly(t, [Plume(0.0, 0.0, two_deg_km * (1 + 1e-9), 100.0, shape="top-hat")])
    assert value_at(h, 2.0, 0.0) == 100.0
    assert value_at(h, 2.1, 0.0) == 0.0


@pytest.mark.parametrize("shape", ["gaussian", "cosine", "top-hat"])
def test_whole_field_against_geod_distances(shape):
    t = Grid.from_extent(-30, 30, -50, -10, 0.5)
    plume = Plume(5.0, -28.0, 800.0, 200.0, shape=shape)
    da = plume_anomaly(t, [plume])
    d = geod_distance_km(t, 5.0, -28.0)  # pyproj.Geod, independent distances
    r = 800.0
    expected = {
        "gaussian": 200.0 * np.exp(-((d / r) ** 2)),
        "cosine": np.where(d < r, 200.0 * np.cos(np.pi * d / (2 * r)) ** 2, 0.0),
        "top-hat": np.where(d <= r, 200.0, 0.0),
    }[shape]
    npt.assert_allclose(da.values, expected, rtol=1e-9, atol=1e-9)


def test_plume_across_antimeridian_is_symmetric():
    t = Grid.from_extent(-180, 180, -60, 20, 1.0)
    da = plume_anomaly(t, [Plume(180.0, -20.0, 800.0, 100.0)])
    # column j is (j + 0.5) degrees east of -180 = 180, column 359 - j as far west of it
    npt.assert_allclose(da.values, da.values[:, ::-1], rtol=1e-12, atol=1e-12)
    assert value_at(da, -179.5, -19.5) > 90.0
    assert value_at(da, 179.5, -19.5) > 90.0
    # the same plume given at -180 or in a 0..360 grid is the same field
    npt.assert_allclose(
        plume_anomaly(t, [Plume(-180.0, -20.0, 800.0, 100.0)]).values,
        da.values,
        rtol=1e-12,
        atol=1e-12,
    )
    t360 = Grid.from_extent(170, 190, -30, -10, 0.5)  # east > 180
    d360 = plume_anomaly(t360, [Plume(180.0, -20.0, 800.0, 100.0)])
    npt.assert_allclose(d360.values, d360.values[:, ::-1], rtol=1e-12, atol=1e-12)
    expected = 100.0 * np.exp(-((geod_distance_km(t360, 180.0, -20.0) / 800.0) ** 2))
    npt.assert_allclose(d360.values, expected, rtol=1e-9, atol=1e-9)


def test_plume_near_pole():
    t = Grid.from_extent(-180, 180, 60, 90, 1.0)
    da = plume_anomaly(t, [Plume(30.0, 89.0, 500.0, 100.0)])
    expected = 100.0 * np.exp(-((geod_distance_km(t, 30.0, 89.0) / 500.0) ** 2))
    npt.assert_allclose(da.values, expected, rtol=1e-9, atol=1e-9)


def test_projected_target():
    t = Grid.from_extent(-2e6, 2e6, -3e6, 1e6, 5e4, crs="EPSG:3857")
    da = plume_anomaly(t, [Plume(3.0, -8.0, 600.0, 120.0, shape="cosine")])
    d = geod_distance_km(t, 3.0, -8.0)
    expected = np.where(d < 600.0, 120.0 * np.cos(np.pi * d / 1200.0) ** 2, 0.0)
    npt.assert_allclose(da.values, expected, rtol=1e-9, atol=1e-9)


# ------------------------------------------------------------------------------ combination


def test_plumes_sum_and_background():
    t = Grid.from_extent(-20, 20, -20, 20, 0.5)
    p1 = Plume(-3.0, 0.0, 700.0, 100.0)
    p2 = Plume(4.0, 2.0, 500.0, 80.0, shape="cosine")
    both = plume_anomaly(t, [p1, p2], background=-15.0)
    d1 = geod_distance_km(t, -3.0, 0.0)
    d2 = geod_distance_km(t, 4.0, 2.0)
    expected = (
        100.0 * np.exp(-((d1 / 700.0) ** 2))
        + np.where(d2 < 500.0, 80.0 * np.cos(np.pi * d2 / 1000.0) ** 2, 0.0)
        - 15.0
    )
    npt.assert_allclose(both.values, expected, rtol=1e-9, atol=1e-9)  # documented: sum
    assert both.attrs["units"] == "K"
    assert both.attrs["combination"] == "sum"
    assert json.loads(both.attrs["plumes"])[1]["shape"] == "cosine"
    assert both.name == "thermal_anomaly_k"
    xr.testing.assert_identical(both.coords.to_dataset(), t.template().coords.to_dataset())
    # no plumes: just the background
    npt.assert_array_equal(plume_anomaly(t, [], background=7.0).values, 7.0)


def test_background_grid():
    t = Grid.from_extent(-10, 10, -10, 10, 1.0)
    bg = t.template().fillna(20.0).astype("float64")
    bg[3, 4] = np.nan
    bg.attrs["units"] = "kelvin"
    da = plume_anomaly(t, [Plume(0.0, 0.0, 300.0, 50.0, shape="top-hat")], background=bg)
    d = geod_distance_km(t, 0.0, 0.0)
    expected = 20.0 + np.where(d <= 300.0, 50.0, 0.0)
    expected[3, 4] = np.nan
    npt.assert_allclose(da.values, expected, rtol=1e-12)
    other = Grid.from_extent(-10, 10, -10, 10, 0.5).template()
    with pytest.raises(GridError, match=r"not on the target grid.*align"):
        plume_anomaly(t, [], background=other)
    bg.attrs["units"] = "km"
    with pytest.raises(GridError, match=r"units 'km'; expected 'K'"):
        plume_anomaly(t, [], background=bg)
    with pytest.raises(InputError, match=r"background='hot'"):
        plume_anomaly(t, [], background="hot")


def test_chunked_matches_numpy():
    t = Grid.from_extent(-30, 30, -30, 30, 0.25)
    plumes = [Plume(10.0, 5.0, 900.0, 150.0), Plume(-20.0, -10.0, 400.0, 60.0, "top-hat")]
    lazy = plume_anomaly(t, plumes, chunks=(100, 64))
    assert hasattr(lazy.data, "dask")
    assert lazy.data.chunksize == (100, 64)
    npt.assert_array_equal(lazy.values, plume_anomaly(t, plumes).values)


# ------------------------------------------------------------------------------ validation


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"latitude": 95.0}, r"latitude=95.0 is outside -90..90"),
        ({"radius_km": 0.0}, r"radius_km=0.0 must be > 0"),
        ({"radius_km": -5.0}, r"radius_km=-5.0 must be > 0"),
        ({"radius_km": float("nan")}, r"radius_km=nan must be finite"),
        ({"peak_excess_k": 1550.0}, r"peak_excess_k=1550.0 K is too large"),
        ({"shape": "square"}, r"shape='square' is unknown.*gaussian"),
        ({"longitude": 400.0}, r"longitude=400.0 is outside"),
        ({"longitude": "10"}, r"longitude='10' must be a number"),
    ],
)
def test_plume_validation(kwargs, match):
    args = {"longitude": 0.0, "latitude": 0.0, "radius_km": 100.0, "peak_excess_k": 100.0}
    args.update(kwargs)
    with pytest.raises(InputError, match=match):
        Plume(**args)


def test_plume_anomaly_rejects_non_plumes():
    t = Grid.from_extent(0, 1, 0, 1, 0.5)
    with pytest.raises(InputError, match=r"must hold Plume objects"):
        plume_anomaly(t, [(0, 0, 100, 100)])
    with pytest.raises(GridError, match=r"must be a Grid"):
        plume_anomaly("EPSG:4326", [])


def test_plume_profile_function():
    p = Plume(0.0, 0.0, 100.0, 10.0)
    # definition: A exp(-(d/r)^2); zero beyond 6 r
    npt.assert_allclose(
        plume_profile([0.0, 100.0, 200.0], p),
        [10.0, 10.0 / math.e, 10.0 * math.exp(-4.0)],
        rtol=1e-12,
    )
    assert plume_profile(601.0, p) == 0.0


# ------------------------------------------------------------------------------ many plumes


def _scattered_plumes(n, seed=3):
    """Invented plumes of every shape, some near the poles and across the antimeridian."""
    rng = np.random.default_rng(seed)
    shapes = ("gaussian", "cosine", "top-hat")
    return [
        Plume(
            float(rng.choice([rng.uniform(150, 210), rng.uniform(-180, 180)])),
            float(rng.choice([rng.uniform(70, 89.9), rng.uniform(-60, 60)])),
            float(rng.uniform(20, 1500)),
            float(rng.uniform(-200, 300)),
            shape=shapes[k % 3],
        )
        for k in range(n)
    ]


def test_cells_skipped_beyond_reach_leave_the_sum_unchanged():
    # check values: every plume's profile at pyproj.Geod distances to every cell, summed in
    # the same order (the cells skipped by the bound are exactly those whose profile is 0)
    t = Grid.from_extent(120.0, 240.0, -80.0, 90.0, 2.5)
    plumes = _scattered_plumes(24)
    expected = np.zeros(t.shape)
    for p in plumes:
        expected += plume_profile(geod_distance_km(t, p.longitude, p.latitude), p)
    got = plume_anomaly(t, plumes).values
    npt.assert_array_equal(got, expected)


def test_many_plumes_lazy_equal_the_eager_sum():
    # more than SHARED_PLUMES plumes are summed in one task per block: the same arithmetic as
    # the eager (numpy) sum, so equal bit for bit; fewer, one layer each (unit profile times
    # the peak: equal to rounding)
    from lidmelt.grids._anomaly import SHARED_PLUMES

    t = Grid.from_extent(150.0, 210.0, -40.0, 40.0, 1.0)
    rng = np.random.default_rng(4)
    plumes = [  # every one centred on the grid, so every one counts
        Plume(float(rng.uniform(150, 210)), float(rng.uniform(-40, 40)), 300.0, 10.0 + k)
        for k in range(SHARED_PLUMES + 8)
    ]
    lazy = plume_anomaly(t, plumes, chunks=32)
    assert len(lazy.data.dask.layers) < 10  # one layer for the plumes, not one each
    npt.assert_array_equal(lazy.values, plume_anomaly(t, plumes).values)
    few = plumes[:SHARED_PLUMES]
    npt.assert_allclose(
        plume_anomaly(t, few, chunks=32).values, plume_anomaly(t, few).values, rtol=1e-12,
        atol=1e-9,
    )  # fmt: skip


def test_plume_cells_estimates_the_cells_within_reach():
    # check values: the cells whose pyproj.Geod distance is within the reach, counted
    from lidmelt.grids._anomaly import plume_cells

    t = Grid.from_extent(-40.0, 40.0, -50.0, 50.0, 0.5)
    for plume in (Plume(0.0, 10.0, 150.0, 100.0), Plume(5.0, -30.0, 900.0, 50.0, shape="cosine")):
        counted = int(
            (geod_distance_km(t, plume.longitude, plume.latitude) <= plume.reach_km).sum()
        )
        estimate = plume_cells(t, [plume])
        assert 0.9 * counted <= estimate <= 1.1 * counted, (estimate, counted)
    huge = Plume(0.0, 0.0, 5000.0, 10.0)  # reaches the whole grid: at most every cell
    assert plume_cells(t, [huge, huge]) == 2 * t.width * t.height
