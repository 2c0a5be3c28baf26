"""Tests of lidmelt.products._regions (region statistics, screening, ``lidmelt regions`` and
``lidmelt screen``) and of the geodesic cell areas they use.

Check values: pyproj.Geod (WGS84; Karney 2013) polygon areas of cells and polygons; the closed
form of the surface area of an ellipsoid of revolution; the equal-area property of an
equal-area projection (EPSG:6933); cell membership by shapely.contains_xy on cell centres,
independent of the rasterio masks the code uses.
"""

from __future__ import annotations

import json
import math
import warnings

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import pytest
import shapely
from affine import Affine

from lidmelt._errors import GridError, InputError
from lidmelt.cli import main
from lidmelt.grids._area import WGS84_SURFACE_AREA_KM2, cell_areas_km2, row_areas_km2
from lidmelt.grids._grid import Grid
from lidmelt.products._candidate_files import write_candidates
from lidmelt.products._regions import region_statistics
from lidmelt.products._screening import screen

GEOD = pyproj.Geod(ellps="WGS84")


def centres(transform, height, width):
    x = transform.c + transform.a * (np.arange(width) + 0.5)
    y = transform.f + transform.e * (np.arange(height) + 0.5)
    return np.meshgrid(x, y)


def geod_cell_area_km2(lon0, lon1, lat0, lat1, n=200):
    """Area of a lon/lat cell from pyproj.Geod, its parallels densified into n geodesics."""
    lons = np.linspace(lon0, lon1, n + 1)
    ring_lon = np.concatenate([lons, lons[::-1]])
    ring_lat = np.concatenate([np.full(n + 1, lat0), np.full(n + 1, lat1)])
    area, _ = GEOD.polygon_area_perimeter(ring_lon, ring_lat)
    return abs(area) / 1e6


def geod_row_areas_km2(transform, height):
    """Geod area of one cell per row of a geographic grid (check value)."""
    t = transform
    return np.array(
        [
            geod_cell_area_km2(t.c, t.c + t.a, t.f + t.e * r, t.f + t.e * (r + 1))
            for r in range(height)
        ]
    )


def geod_polygon_area_km2(geom, max_seg_deg=None):
    g = shapely.segmentize(geom, max_seg_deg) if max_seg_deg else geom
    area, _ = GEOD.geometry_area_perimeter(shapely.orient_polygons(g, exterior_cw=False))
    return abs(area) / 1e6


# ---------------------------------------------------------------------------------------
# Cell areas
# ---------------------------------------------------------------------------------------


def test_global_cell_areas_sum_to_the_ellipsoid_surface():
    """Sum over a global 1-degree grid = 2 pi a^2 [1 + (1 - e^2)/e atanh(e)], the closed-form
    surface area of an ellipsoid of revolution (WGS84: a = 6378137 m, f = 1/298.257223563)."""
    grid = Grid("EPSG:4326", Affine(1.0, 0, -180, 0, -1.0, 90), 360, 180)
    a, f = 6378137.0, 1 / 298.257223563
    e = math.sqrt(f * (2 - f))
    surface = 2 * math.pi * a**2 * (1 + (1 - e**2) / e * math.atanh(e)) / 1e6
    total = row_areas_km2(grid).sum() * 360
    np.testing.assert_allclose(total, surface, rtol=1e-12)
    # the published value (lidmelt.grids._area.WGS84_SURFACE_AREA_KM2 names its source)
    np.testing.assert_allclose(total, WGS84_SURFACE_AREA_KM2, rtol=1e-11)


def test_row_areas_match_pyproj_geod():
    t = Affine(0.5, 0, -40, 0, -0.5, 80)
    grid = Grid("EPSG:4326", t, 60, 320)
    np.testing.assert_allclose(row_areas_km2(grid), geod_row_areas_km2(t, 320), rtol=1e-7)


def test_projected_cell_areas_in_an_equal_area_projection():
    """EPSG:6933 (cylindrical equal-area on WGS84): every cell's ellipsoidal area is its map
    area, 25 km x 25 km (the defining property of an equal-area projection). The cell polygon
    has geodesic edges, not the map's straight ones; that second-order difference is bounded
    by (cell size / Earth radius)^2 = (25 / 6371)^2 = 1.5e-5 (common practice)."""
    t = Affine(25_000.0, 0, -2_000_000.0, 0, -25_000.0, 3_000_000.0)
    grid = Grid("EPSG:6933", t, 160, 240)
    flat = np.arange(0, 160 * 240, 997)
    np.testing.assert_allclose(cell_areas_km2(grid, flat), 625.0, rtol=1.5e-5)


# ---------------------------------------------------------------------------------------
# Region statistics
# ---------------------------------------------------------------------------------------

REGIONAL = Affine(0.5, 0.0, -40.0, 0.0, -0.5, 10.0)  # 40 rows x 60 columns


@pytest.fixture
def regional(make_run_dir):
    """Random invented fields with non-melting cells and a hole of nodata."""
    rng = np.random.default_rng(11)
    melt = np.where(rng.random((40, 60)) < 0.4, 0.0, rng.uniform(0.1, 12.0, (40, 60)))
    melt[30:34, 5:12] = np.nan
    onset = np.where(melt > 0, rng.uniform(40.0, 150.0, (40, 60)), np.nan)
    anomaly = rng.uniform(-50.0, 250.0, (40, 60))
    anomaly[0:3, :] = np.nan
    fields = {
        "melt_thickness_km": melt,
        "onset_depth_km": onset,
        "melting_top_km": np.full((40, 60), 50.0),
        "thermal_anomaly_k": anomaly,
    }
    run = make_run_dir(fields, transform=REGIONAL)
    fields = {k: v.astype(np.float32).astype(float) for k, v in fields.items()}
    return run, fields


def expected_stats(fields, inside, areas):
    """Statistics computed directly from their definitions (module notes)."""
    melt = fields["melt_thickness_km"]
    ok = inside & np.isfinite(melt)
    a = areas[ok]
    t = melt[ok]
    onset = fields["onset_depth_km"][ok]
    anom = fields["thermal_anomaly_k"][ok]  # over the cells with data, like the others
    aa = a[np.isfinite(anom)]
    return {
        "n_cells": ok.sum(),
        "data_area_km2": a.sum(),
        "melting_area_km2": a[t > 0].sum(),
        "melt_volume_km3": (t * a).sum(),
        "mean_melt_thickness_km": (t * a).sum() / a.sum(),
        "max_melt_thickness_km": t.max(),
        "shallowest_onset_depth_km": np.nanmin(onset),
        "mean_thermal_anomaly_k": (anom[np.isfinite(anom)] * aa).sum() / aa.sum(),
    }


def test_overlapping_polygons_are_each_right(regional):
    run, fields = regional
    triangle = shapely.Polygon([(-38.2, -8.1), (-15.3, 2.2), (-30.4, 9.1)])
    box = shapely.box(-29.9, -6.1, -12.2, 4.3)  # overlaps the triangle
    inner = shapely.box(-25.1, -3.1, -20.1, 1.1)  # inside both
    polys = gpd.GeoDataFrame(
        {"name": ["tri", "box", "inner"], "priority": [3, 1, 2]},
        geometry=[triangle, box, inner],
        crs="EPSG:4326",
    )
    out = region_statistics(run, polys)
    assert list(out["name"]) == ["tri", "box", "inner"]
    assert list(out["priority"]) == [3, 1, 2]
    lon, lat = centres(REGIONAL, 40, 60)
    areas = np.broadcast_to(geod_row_areas_km2(REGIONAL, 40)[:, None], (40, 60))
    for k, geom in enumerate(polys.geometry):
        inside = shapely.contains_xy(geom, lon, lat)  # independent of rasterio
        want = expected_stats(fields, inside, areas)
        row = out.iloc[k]
        assert row["n_cells"] == want.pop("n_cells")
        for key, value in want.items():
            np.testing.assert_allclose(row[key], value, rtol=1e-7, err_msg=key)
        # The polygon's geodesic area: pyproj.Geod's polygon area (spec: within 0.1 %).
        np.testing.assert_allclose(row["area_km2"], geod_polygon_area_km2(geom), rtol=1e-3)


def test_flagged_fraction_is_exact(regional, add_validity_flag):
    """Invented flags: bit 4 on a 4 x 5 block, bit 2 on the nodata hole (rows 30-33, cols 5-11:
    no melt data, but flagged), nodata 255 on rows 0-1. A polygon's flagged_fraction is, over
    its cells whose flag is not 255, the share with any bit set (the module's definition),
    counted here from the constructed array; a polygon on 255 cells only gets NaN."""
    run, _ = regional
    flags = np.zeros((40, 60), dtype=np.uint8)
    flags[10:14, 20:25] = 4
    flags[30:34, 5:12] = 2
    flags[0:2, :] = 255
    add_validity_flag(run, flags)
    polys = [
        shapely.box(-36.1, -7.6, -32.9, -4.4),  # over part of the hole
        shapely.box(-31.1, 2.1, -26.9, 5.1),  # over the bit-4 block
        shapely.box(-39.9, 9.05, -30.1, 9.95),  # the 255 rows only
    ]
    out = region_statistics(run, gpd.GeoDataFrame(geometry=polys, crs="EPSG:4326"))
    lon, lat = centres(REGIONAL, 40, 60)
    for k, geom in enumerate(polys[:2]):
        inside = shapely.contains_xy(geom, lon, lat)
        known = inside & (flags != 255)
        want = (known & (flags > 0)).sum() / known.sum()
        assert 0 < want < 1  # precondition: both kinds of cell inside
        assert out.loc[k, "flagged_fraction"] == pytest.approx(want, rel=1e-12)
    assert np.isnan(out.loc[2, "flagged_fraction"])


def test_polygon_in_a_projected_crs(regional):
    """A polygon in Web Mercator: cells whose centres, transformed by pyproj into EPSG:3857,
    fall inside; area within 0.1 % of pyproj.Geod's area of its vertices in lon/lat."""
    run, fields = regional
    to_merc = pyproj.Transformer.from_crs(4326, 3857, always_xy=True)
    ring = [(-35.3, -7.2), (-14.1, -4.4), (-18.7, 8.3), (-33.9, 5.2)]
    merc = shapely.Polygon([to_merc.transform(x, y) for x, y in ring])
    polys = gpd.GeoDataFrame({"id": [7]}, geometry=[merc], crs="EPSG:3857")
    out = region_statistics(run, polys)
    lon, lat = centres(REGIONAL, 40, 60)
    mx, my = to_merc.transform(lon, lat)
    # Precondition: no cell centre within 20 m of the edge, where the densified edge used for
    # the mask could differ from the straight Mercator edge (a chord of 1/64 of the polygon
    # deviates by (36 km)^2 / 8 * sin(lat) cos(lat) / R < 4 m here: analytic bound).
    assert shapely.distance(merc.exterior, shapely.points(mx, my)).min() > 20.0
    inside = shapely.contains_xy(merc, mx, my)
    areas = np.broadcast_to(geod_row_areas_km2(REGIONAL, 40)[:, None], (40, 60))
    want = expected_stats(fields, inside, areas)
    assert out.loc[0, "n_cells"] == want["n_cells"]
    np.testing.assert_allclose(out.loc[0, "melt_volume_km3"], want["melt_volume_km3"], rtol=1e-7)
    # The region has straight edges in Mercator: its check area is pyproj.Geod's area of the
    # polygon densified in Mercator (1 km steps) and transformed by pyproj (spec: 0.1 %).
    dense = shapely.segmentize(merc, 1000.0)
    to_lonlat = pyproj.Transformer.from_crs(3857, 4326, always_xy=True)
    dense_ll = shapely.transform(dense, lambda xy: np.column_stack(to_lonlat.transform(*xy.T)))
    np.testing.assert_allclose(out.loc[0, "area_km2"], geod_polygon_area_km2(dense_ll), rtol=1e-3)
    assert out.crs.to_epsg() == 3857


def test_polygon_across_the_antimeridian(make_run_dir):
    """A grid over 160..200 E and polygons given in -180..180, crossing 180 as one ring or split
    in two: the cells are those inside the unwrapped polygon (contains_xy)."""
    t = Affine(0.5, 0.0, 160.0, 0.0, -0.5, 10.0)
    lon, lat = centres(t, 40, 80)
    melt = 0.25 * (lon - 160.0) + 1.0
    run = make_run_dir({"melt_thickness_km": melt}, transform=t)
    ring = shapely.Polygon([(174.1, -4.1), (-172.2, -3.3), (-175.6, 6.1), (176.3, 5.2)])
    split = shapely.MultiPolygon(
        [shapely.box(171.1, -2.1, 180.0, 3.1), shapely.box(-180.0, -2.1, -169.9, 3.1)]
    )
    out = region_statistics(run, gpd.GeoDataFrame(geometry=[ring, split], crs="EPSG:4326"))
    unwrapped = [
        shapely.Polygon([(174.1, -4.1), (187.8, -3.3), (184.4, 6.1), (176.3, 5.2)]),
        shapely.box(171.1, -2.1, 190.1, 3.1),
    ]
    areas = np.broadcast_to(geod_row_areas_km2(t, 40)[:, None], (40, 80))
    # pyproj.Geod reads the given ring across 180 as the small polygon; the split one is its
    # two parts (each with its own geodesic edges).
    geod_areas = [geod_polygon_area_km2(ring), geod_polygon_area_km2(split)]
    np.testing.assert_allclose(geod_areas[0], geod_polygon_area_km2(unwrapped[0]), rtol=1e-12)
    for k, geom in enumerate(unwrapped):
        inside = shapely.contains_xy(geom, lon, lat)
        assert out.loc[k, "n_cells"] == inside.sum() > 100
        np.testing.assert_allclose(
            out.loc[k, "melt_volume_km3"], (melt * areas)[inside].sum(), rtol=1e-7
        )
        np.testing.assert_allclose(out.loc[k, "area_km2"], geod_areas[k], rtol=1e-9)


def test_projected_grid_regions_and_screen(make_run_dir, tmp_path):
    """An equal-area grid (EPSG:6933, 25 km cells): cell areas are 625 km^2 each (equal-area
    property, to (25/6371)^2); a lon/lat polygon takes the cells whose centres, transformed by
    pyproj, fall inside it; a screened disk's area is its cell count times 625 km^2, and its
    GeoJSON is in lon/lat."""
    t = Affine(25_000.0, 0, -1_000_000.0, 0, -25_000.0, 1_000_000.0)  # 80 x 80 cells
    x, y = centres(t, 80, 80)
    disk = np.hypot(x - 100_000.0, y + 150_000.0) < 300_000.0
    melt = np.where(disk, 2.0, 0.0)
    run = make_run_dir({"melt_thickness_km": melt}, transform=t, crs="EPSG:6933")
    lon, lat = pyproj.Transformer.from_crs(6933, 4326, always_xy=True).transform(x, y)
    poly = shapely.Polygon([(-7.279, -6.179), (6.121, -4.4), (3.3, 7.721), (-5.2, 5.079)])
    # Precondition: no centre within 1e-4 degrees of an edge, where the densified edge could
    # differ from the straight lon/lat one (analytic bound about 2e-5 degrees here).
    assert shapely.distance(poly.exterior, shapely.points(lon, lat)).min() > 1e-4
    inside = shapely.contains_xy(poly, lon, lat)
    out = region_statistics(run, gpd.GeoDataFrame(geometry=[poly], crs="EPSG:4326"))
    assert out.loc[0, "n_cells"] == inside.sum()
    np.testing.assert_allclose(out.loc[0, "data_area_km2"], 625.0 * inside.sum(), rtol=1.5e-5)
    np.testing.assert_allclose(
        out.loc[0, "melt_volume_km3"], 2.0 * 625.0 * (inside & disk).sum(), rtol=1.5e-5
    )
    cand = screen(run, min_melt_thickness_km=1.0, basis="total")
    assert len(cand) == 1
    assert cand.loc[0, "n_cells"] == disk.sum()
    np.testing.assert_allclose(cand.loc[0, "area_km2"], 625.0 * disk.sum(), rtol=1.5e-5)
    _, geojson = write_candidates(cand, tmp_path / "c.gpkg")
    back = gpd.read_file(geojson)
    assert back.crs.to_epsg() == 4326
    # The lon/lat polygon (densified edges) keeps the region's area (pyproj.Geod).
    np.testing.assert_allclose(
        geod_polygon_area_km2(back.geometry.iloc[0]), cand.loc[0, "area_km2"], rtol=1e-4
    )


def test_polygon_that_misses_the_grid(regional):
    run, _ = regional
    polys = gpd.GeoDataFrame(
        {"name": ["in", "far"]},
        geometry=[shapely.box(-30, -5, -20, 5), shapely.box(100, 0, 110, 10)],
        crs="EPSG:4326",
    )
    with pytest.raises(GridError, match=r"1 polygon\(s\).*miss the grid.*name=far.*-40\.\.-10"):
        region_statistics(run, polys)


def test_polygon_between_cell_centres_warns(regional):
    run, _ = regional
    tiny = shapely.box(-30.2, 0.05, -30.1, 0.15)  # inside one cell, away from its centre
    with pytest.warns(UserWarning, match="contain no cell centre"):
        out = region_statistics(run, gpd.GeoDataFrame(geometry=[tiny], crs="EPSG:4326"))
    assert out.loc[0, "n_cells"] == 0
    assert np.isnan(out.loc[0, "mean_melt_thickness_km"])
    assert out.loc[0, "melt_volume_km3"] == 0.0


def test_non_polygons_rejected(regional):
    run, _ = regional
    with pytest.raises(InputError, match="not polygons"):
        region_statistics(run, gpd.GeoDataFrame(geometry=[shapely.Point(-20, 0)], crs=4326))


def test_cli_regions(regional, tmp_path, capsys):
    run, _ = regional
    path = tmp_path / "zones.geojson"
    gpd.GeoDataFrame(
        {"zone": ["north", "south"]},
        geometry=[shapely.box(-35, 0, -15, 9), shapely.box(-35, -9, -15, 0)],
        crs="EPSG:4326",
    ).to_file(path)
    for suffix in (".gpkg", ".csv"):
        out = tmp_path / f"stats{suffix}"
        assert main(["regions", str(run), str(path), "-o", str(out)]) == 0
        assert "melt_volume_km3" in capsys.readouterr().out
        back = gpd.read_file(out) if suffix == ".gpkg" else pd.read_csv(out)
        assert list(back["zone"]) == ["north", "south"]
        assert "shallowest_onset_depth_km" in back.columns
    assert sorted(p.name for p in tmp_path.iterdir()) == [
        "run",
        "stats.csv",
        "stats.gpkg",
        "zones.geojson",
    ]


def test_cli_regions_bad_input(regional, tmp_path, capsys):
    run, _ = regional
    shp = tmp_path / "nocrs.shp"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # pyogrio warns that the file gets no CRS
        gpd.GeoDataFrame(geometry=[shapely.box(-30, -5, -20, 5)]).to_file(shp)
    out = tmp_path / "o.gpkg"
    assert main(["regions", str(run), str(shp), "-o", str(out)]) == 1
    assert "has no coordinate reference system" in capsys.readouterr().err
    far = tmp_path / "far.geojson"
    gpd.GeoDataFrame(geometry=[shapely.box(100, 0, 110, 10)], crs=4326).to_file(far)
    assert main(["regions", str(run), str(far), "-o", str(out)]) == 1
    assert "miss the grid" in capsys.readouterr().err
    empty = tmp_path / "empty.geojson"
    empty.write_text("", encoding="utf-8")
    assert main(["regions", str(run), str(empty)]) == 1
    assert "is empty" in capsys.readouterr().err
    assert main(["regions", str(tmp_path), str(far)]) == 1
    assert "not a lidmelt run directory" in capsys.readouterr().err
    assert main(["screen", str(tmp_path), "--min-melt-thickness", "1"]) == 1
    assert "not a lidmelt run directory" in capsys.readouterr().err
    assert main(["regions", str(run), str(far), "-o", str(tmp_path / "o.shp")]) == 1
    assert "suffix '.shp'" in capsys.readouterr().err
    assert not out.exists()
    assert not (tmp_path / "o.shp").exists()


# ---------------------------------------------------------------------------------------
# Screening
# ---------------------------------------------------------------------------------------

DISKS = Affine(0.5, 0.0, 0.0, 0.0, -0.5, 20.0)  # 80 x 80 cells, 0..40 E, -20..20 N


@pytest.fixture
def disks(make_run_dir):
    """Two disks of melt above 1 km, a weak patch below it, and a nodata hole (invented)."""
    lon, lat = centres(DISKS, 80, 80)
    r1 = np.hypot(lon - 10.0, lat - 5.0)
    r2 = np.hypot(lon - 30.0, lat + 8.0)
    disk1, disk2 = r1 < 3.0, r2 < 2.0
    melt = np.zeros((80, 80))
    melt[disk1] = 6.0 - r1[disk1]  # 3..6 km
    melt[disk2] = 2.5 - 0.5 * r2[disk2]  # 1.5..2.5 km
    weak = np.hypot(lon - 25.0, lat - 12.0) < 2.0
    melt[weak] = 0.5
    melt[(lon > 2) & (lon < 5) & (lat < -15)] = np.nan
    onset = np.where(melt > 0, 60.0 + melt, np.nan)
    run = make_run_dir(
        {"melt_thickness_km": melt, "onset_depth_km": onset, "thermal_anomaly_k": 100 + 0 * lon},
        transform=DISKS,
    )
    return run, melt.astype(np.float32).astype(float), disk1, disk2


def test_two_disks_give_two_candidates(disks):
    run, melt, disk1, disk2 = disks
    out = screen(run, min_melt_thickness_km=1.0, basis="total")
    assert len(out) == 2
    areas = np.broadcast_to(geod_row_areas_km2(DISKS, 80)[:, None], (80, 80))
    lon, lat = centres(DISKS, 80, 80)
    # Disk 1 holds more melt than disk 2, so it ranks first.
    for row, disk, centre in ((out.iloc[0], disk1, (10.0, 5.0)), (out.iloc[1], disk2, (30, -8))):
        assert row["n_cells"] == disk.sum()
        np.testing.assert_allclose(row["area_km2"], areas[disk].sum(), rtol=1e-7)
        np.testing.assert_allclose(row["melt_volume_km3"], (melt * areas)[disk].sum(), rtol=1e-7)
        np.testing.assert_allclose(row["max_melt_thickness_km"], melt[disk].max())
        np.testing.assert_allclose(row["shallowest_onset_depth_km"], 60.0 + melt[disk].min())
        geom = row.geometry
        assert geom.is_valid
        np.testing.assert_array_equal(shapely.contains_xy(geom, lon, lat), disk)
        # Its polygon follows the cell edges: Geod area of the densified polygon = cell areas.
        np.testing.assert_allclose(geod_polygon_area_km2(geom, 0.01), row["area_km2"], rtol=1e-6)
        # Symmetry: a disk centred on a cell edge has its area-weighted centroid on its
        # meridian of symmetry; the latitude is within a cell of the centre.
        np.testing.assert_allclose(row["centroid_lon"], centre[0], atol=1e-9)
        assert abs(row["centroid_lat"] - centre[1]) < 0.5
    assert list(out["rank"]) == [1, 2]
    assert out.iloc[0]["melt_volume_km3"] > out.iloc[1]["melt_volume_km3"]


def test_min_area_drops_the_small_disk(disks):
    run, _, disk1, _disk2 = disks
    full = screen(run, min_melt_thickness_km=1.0, basis="total")
    cut = 0.5 * (full["area_km2"].iloc[0] + full["area_km2"].iloc[1])
    out = screen(run, min_melt_thickness_km=1.0, min_area_km2=cut, basis="total")
    assert len(out) == 1
    assert out.loc[0, "n_cells"] == disk1.sum()
    # A lower threshold takes the weak patch as a third region.
    assert len(screen(run, min_melt_thickness_km=0.4, basis="total")) == 3


def test_eight_connectivity(make_run_dir):
    """Cells touching at a corner form one region (8-connectivity); a one-cell gap splits."""
    melt = np.zeros((10, 10))
    melt[2, 2] = melt[3, 3] = 5.0  # diagonal neighbours
    melt[7, 2] = melt[7, 4] = 5.0  # one cell apart
    run = make_run_dir({"melt_thickness_km": melt}, transform=Affine(1, 0, 0, 0, -1, 10))
    out = screen(run, min_melt_thickness_km=1.0, basis="total")
    assert sorted(out["n_cells"]) == [1, 1, 2]
    assert out.geometry.is_valid.all()


def test_region_across_the_seam_of_a_global_grid(make_run_dir, tmp_path):
    """A disk on 180 E of a global grid is one region; its GeoJSON stays within -180..180."""
    t = Affine(1.0, 0.0, -180.0, 0.0, -1.0, 90.0)
    lon, lat = centres(t, 180, 360)
    dist = np.hypot(np.mod(lon, 360.0) - 180.0, lat - 10.0)
    disk = dist < 4.0
    run = make_run_dir({"melt_thickness_km": np.where(disk, 3.0, 0.0)}, transform=t)
    out = screen(run, min_melt_thickness_km=1.0, basis="total")
    assert len(out) == 1
    assert out.loc[0, "n_cells"] == disk.sum()
    assert abs(abs(out.loc[0, "centroid_lon"]) - 180.0) < 1e-9
    areas = np.broadcast_to(geod_row_areas_km2(t, 180)[:, None], (180, 360))
    np.testing.assert_allclose(out.loc[0, "area_km2"], areas[disk].sum(), rtol=1e-7)
    _gpkg, geojson = write_candidates(out, tmp_path / "c.gpkg")
    doc = json.loads(geojson.read_text(encoding="utf-8"))
    coords = np.array(
        [xy for poly in doc["features"][0]["geometry"]["coordinates"] for r in poly for xy in r]
    )
    assert coords[:, 0].min() >= -180.0
    assert coords[:, 0].max() <= 180.0


def test_geojson_of_a_grid_beyond_180_is_split(make_run_dir, tmp_path):
    """Grid over 160..200 E: the GeoJSON polygon is cut at 180 into -180..180 parts whose Geod
    area still equals the region's cell area."""
    t = Affine(0.5, 0.0, 160.0, 0.0, -0.5, 10.0)
    lon, lat = centres(t, 40, 80)
    disk = np.hypot(lon - 180.0, lat) < 3.0
    run = make_run_dir({"melt_thickness_km": np.where(disk, 2.0, 0.0)}, transform=t)
    out = screen(run, min_melt_thickness_km=1.0, basis="total")
    _, geojson = write_candidates(out, tmp_path / "c.gpkg")
    back = gpd.read_file(geojson)
    geom = back.geometry.iloc[0]
    assert geom.geom_type == "MultiPolygon"
    assert len(geom.geoms) == 2
    minx, _, maxx, _ = geom.bounds
    assert minx >= -180
    assert maxx <= 180
    np.testing.assert_allclose(geod_polygon_area_km2(geom, 0.01), out.loc[0, "area_km2"], rtol=1e-6)


def test_cli_screen_writes_gpkg_and_geojson(disks, tmp_path, capsys):
    run, _, _, _ = disks
    out = tmp_path / "cands" / "screen.gpkg"
    assert (
        main(["screen", str(run), "--basis", "total", "--min-melt-thickness", "1", "-o", str(out)])
        == 0
    )
    assert "2 candidate region(s)" in capsys.readouterr().out
    assert sorted(p.name for p in out.parent.iterdir()) == ["screen.geojson", "screen.gpkg"]
    gpkg = gpd.read_file(out)
    gj = gpd.read_file(out.with_suffix(".geojson"))
    assert list(gpkg["rank"]) == [1, 2]
    assert list(gj["rank"]) == [1, 2]
    assert gj.crs.to_epsg() == 4326
    np.testing.assert_allclose(gj["melt_volume_km3"], gpkg["melt_volume_km3"])


def test_cli_screen_no_candidates_writes_empty_files(disks, tmp_path, capsys):
    run, _, _, _ = disks
    out = tmp_path / "none.gpkg"
    assert (
        main(
            ["screen", str(run), "--basis", "total", "--min-melt-thickness", "100", "-o", str(out)]
        )
        == 0
    )
    assert "0 candidate region(s)" in capsys.readouterr().out
    assert len(gpd.read_file(out)) == 0


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--min-melt-thickness", "0"], "not a positive thickness"),
        (["--min-melt-thickness", "1", "--min-area", "-5"], "not a non-negative area"),
        (["--min-melt-thickness", "1", "-o", "c.geojson"], "suffix '.geojson'"),
    ],
)
def test_cli_screen_errors(disks, tmp_path, capsys, monkeypatch, args, message):
    run, _, _, _ = disks
    monkeypatch.chdir(tmp_path)
    assert main(["screen", str(run), *args]) == 1
    assert message in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run"]


def test_shallowest_onset_only_where_the_polygon_melts(make_run_dir, tmp_path, capsys):
    """Issue 20: a polygon without a melting cell has no shallowest onset (NaN in the file,
    "no melting" printed), even in a run whose onset grid holds values where nothing melts (runs
    before issue 20). Check values: the invented fields (west: melt 0, onset 82 km; east: melt
    2 km, onsets 90 km and 120 km)."""
    melt = np.zeros((40, 60))
    melt[:, 30:] = 2.0
    onset = np.full((40, 60), 82.0)
    onset[:, 30:45] = 120.0
    onset[:, 45:] = 90.0
    run = make_run_dir({"melt_thickness_km": melt, "onset_depth_km": onset}, transform=REGIONAL)
    zones = gpd.GeoDataFrame(
        {"zone": ["dry", "wet"]},
        geometry=[shapely.box(-39, -9, -26, 9), shapely.box(-24, -9, -11, 9)],
        crs="EPSG:4326",
    )
    got = region_statistics(run, zones)
    assert np.isnan(got.loc[0, "shallowest_onset_depth_km"])
    assert got.loc[0, "melting_area_km2"] == 0
    assert got.loc[1, "shallowest_onset_depth_km"] == 90.0  # not the 82 km of the dry cells
    path = tmp_path / "zones.geojson"
    zones.to_file(path)
    assert main(["regions", str(run), str(path)]) == 0
    dry = next(line for line in capsys.readouterr().out.splitlines() if "dry" in line)
    assert "no melting" in dry
