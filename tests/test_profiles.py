"""Tests of lidmelt.products._profiles (ship-track profiles, ``lidmelt profile``).

Check values: geodesic distances and azimuths from pyproj.Geod (WGS84), an independent
implementation (Karney 2013) of the geodesic problems; linear fields reproduced exactly by
bilinear interpolation (analytic identity).
"""

from __future__ import annotations

import geopandas as gpd
import matplotlib.image as mpimg
import numpy as np
import pandas as pd
import pyproj
import pytest
import shapely
from affine import Affine

from lidmelt._errors import InputError
from lidmelt.cli import main
from lidmelt.physics import FLAG_MEANINGS
from lidmelt.physics._flags import FLAG_BEYOND_CALIBRATION
from lidmelt.products._profile_figure import plot_profile
from lidmelt.products._profiles import read_track, sample_track, track_points

GEOD = pyproj.Geod(ellps="WGS84")

# A grid over 150..210 E (across the antimeridian), 0.5-degree cells, -30..30 N.
ACROSS = Affine(0.5, 0.0, 150.0, 0.0, -0.5, 30.0)
H, W = 120, 120


def centres(transform, height, width):
    x = transform.c + transform.a * (np.arange(width) + 0.5)
    y = transform.f + transform.e * (np.arange(height) + 0.5)
    return np.meshgrid(x, y)


def fields_across():
    """Linear fields of the unwrapped longitude (values multiples of 1/16: exact in float32)."""
    x, y = centres(ACROSS, H, W)
    return {
        "melt_thickness_km": 0.25 * (x - 150.0) + 0.5 * y + 20.0,
        "onset_depth_km": 100.0 + 0.5 * y,
        "melting_top_km": 40.0 + 0.25 * (x - 150.0),
        "thermal_anomaly_k": 2.0 * x,
    }


@pytest.fixture
def run(make_run_dir):
    return make_run_dir(fields_across(), transform=ACROSS)


WAYPOINTS = np.array([[160.0, -10.0], [172.5, 5.0], [-175.0, 8.0], [-160.0, -12.0]])


def geod_lengths_km(lon, lat):
    """Segment lengths from pyproj.Geod.inv (check value)."""
    _, _, d = GEOD.inv(lon[:-1], lat[:-1], lon[1:], lat[1:])
    return np.asarray(d) / 1000.0


def write_csv(path, lonlat, **extra):
    pd.DataFrame({"lon": lonlat[:, 0], "lat": lonlat[:, 1], **extra}).to_csv(path, index=False)
    return path


# ---------------------------------------------------------------------------------------
# Geometry of the points
# ---------------------------------------------------------------------------------------


def test_total_length_is_the_sum_of_geodesic_distances():
    lon, lat = WAYPOINTS[:, 0], WAYPOINTS[:, 1]
    _, _, distance, index = track_points(lon, lat, spacing_km=25.0)
    expected = geod_lengths_km(lon, lat).sum()  # pyproj.Geod
    np.testing.assert_allclose(distance[-1], expected, rtol=1e-12)
    assert index[0] == 0
    assert index[-1] == len(lon) - 1


def test_spacing_holds_along_and_across_waypoints():
    lon, lat = WAYPOINTS[:, 0], WAYPOINTS[:, 1]
    spacing = 37.0
    plon, plat, distance, index = track_points(lon, lat, spacing_km=spacing)
    steps = np.diff(distance)
    np.testing.assert_allclose(steps[:-1], spacing, rtol=1e-12)
    assert 0 < steps[-1] <= spacing
    # Within one segment consecutive points are `spacing` apart on the ellipsoid (pyproj.Geod).
    same = index[1:-1] == index[:-2]
    _, _, d = GEOD.inv(plon[:-2][same], plat[:-2][same], plon[1:-1][same], plat[1:-1][same])
    np.testing.assert_allclose(np.asarray(d) / 1000.0, spacing, rtol=0, atol=1e-6)
    # Across a waypoint the spacing is carried: distance to it plus distance from it.
    for k in np.flatnonzero(index[1:-1] != index[:-2]):
        w = index[k + 1]
        _, _, a = GEOD.inv(plon[k], plat[k], lon[w], lat[w])
        _, _, b = GEOD.inv(lon[w], lat[w], plon[k + 1], plat[k + 1])
        np.testing.assert_allclose((a + b) / 1000.0, spacing, rtol=0, atol=1e-6)


def test_points_lie_on_the_geodesics_and_index_the_waypoints():
    """Each point is at its along-track distance from its segment's start waypoint, in the
    direction of the next waypoint (pyproj.Geod inverse); waypoint_index counts the waypoints
    at or before the point (from pyproj.Geod distances)."""
    lon, lat = WAYPOINTS[:, 0], WAYPOINTS[:, 1]
    plon, plat, distance, index = track_points(lon, lat, spacing_km=50.0)
    starts = np.concatenate([[0.0], np.cumsum(geod_lengths_km(lon, lat))])
    expected_index = np.searchsorted(starts, distance + 1e-9, side="right") - 1
    np.testing.assert_array_equal(index, np.minimum(expected_index, len(lon) - 1))
    seg = np.minimum(index, len(lon) - 2)
    inner = distance - starts[seg] > 1e-6
    az_seg, _, _ = GEOD.inv(lon[seg], lat[seg], lon[seg + 1], lat[seg + 1])
    az, _, d = GEOD.inv(lon[seg][inner], lat[seg][inner], plon[inner], plat[inner])
    np.testing.assert_allclose(d / 1000.0, (distance - starts[seg])[inner], atol=1e-6)
    np.testing.assert_allclose(az, np.asarray(az_seg)[inner], atol=1e-6)
    assert np.all((plon >= -180) & (plon < 180))


def test_spacing_longer_than_the_track_gives_its_two_ends():
    lon, lat = np.array([0.0, 1.0]), np.array([0.0, 0.0])
    _, _, distance, index = track_points(lon, lat, spacing_km=500.0)
    np.testing.assert_allclose(distance, [0.0, geod_lengths_km(lon, lat)[0]], rtol=1e-12)
    assert list(index) == [0, 1]


@pytest.mark.parametrize("spacing", [0.0, -5.0, float("nan")])
def test_bad_spacing(spacing):
    with pytest.raises(InputError, match="not a positive distance"):
        track_points(np.array([0.0, 1.0]), np.array([0.0, 0.0]), spacing_km=spacing)


def test_too_many_points_rejected():
    with pytest.raises(InputError, match="more than 5000000"):
        track_points(np.array([0.0, 90.0]), np.array([0.0, 0.0]), spacing_km=1e-3)


# ---------------------------------------------------------------------------------------
# Sampling along the track
# ---------------------------------------------------------------------------------------


def test_track_across_the_antimeridian(run, tmp_path):
    """Waypoints given in -180..180 across 180 E: every point is inside, and the values are the
    linear field of the unwrapped longitude (analytic identity of bilinear interpolation)."""
    csv = write_csv(tmp_path / "track.csv", WAYPOINTS)
    gdf = sample_track(run, csv, spacing_km=20.0)
    assert (gdf["status"] == "ok").all()
    east = np.mod(gdf["lon"].to_numpy(), 360.0)  # 150..210 E
    lat = gdf["lat"].to_numpy()
    np.testing.assert_allclose(
        gdf["melt_thickness_km"], 0.25 * (east - 150.0) + 0.5 * lat + 20.0, atol=1e-9
    )
    np.testing.assert_allclose(gdf["thermal_anomaly_k"], 2.0 * east, atol=1e-9)
    # The same track with 0..360 waypoints gives the same profile.
    csv360 = write_csv(
        tmp_path / "track360.csv", np.column_stack([np.mod(WAYPOINTS[:, 0], 360), WAYPOINTS[:, 1]])
    )
    gdf360 = sample_track(run, csv360, spacing_km=20.0)
    np.testing.assert_allclose(gdf360["melt_thickness_km"], gdf["melt_thickness_km"], atol=1e-9)
    np.testing.assert_allclose(gdf360["distance_km"], gdf["distance_km"], rtol=1e-12)


def test_track_on_a_global_grid_crosses_the_seam(make_run_dir):
    """A global grid: points around 180 E are interpolated across the seam (field constant
    along rows, so the values are the row's: the bilinear rule)."""
    t = Affine(1.0, 0.0, -180.0, 0.0, -1.0, 90.0)
    _, y = centres(t, 180, 360)
    run = make_run_dir({"melt_thickness_km": 0.5 * y + 50.0}, transform=t)
    track = gpd.GeoDataFrame(
        geometry=[shapely.LineString([(178.0, 0.5), (-178.0, 0.5)])], crs="EPSG:4326"
    )
    gdf = sample_track(run, track, spacing_km=10.0)
    assert (gdf["status"] == "ok").all()
    np.testing.assert_allclose(gdf["melt_thickness_km"], 0.5 * gdf["lat"] + 50.0, atol=1e-6)


def test_line_file_in_a_projected_crs_matches_the_waypoints(run, tmp_path):
    """A LineString in Web Mercator through the same waypoints: the same points (the vertices
    transformed back by pyproj agree to well under a millimetre)."""
    lon, lat = WAYPOINTS[:, 0], WAYPOINTS[:, 1]
    x, y = pyproj.Transformer.from_crs(4326, 3857, always_xy=True).transform(lon, lat)
    path = tmp_path / "track.gpkg"
    line = shapely.LineString(np.column_stack([x, y]))
    gpd.GeoDataFrame({"cruise": ["X1"]}, geometry=[line], crs="EPSG:3857").to_file(path)
    from_line = sample_track(run, path, spacing_km=30.0)
    from_csv = sample_track(run, write_csv(tmp_path / "t.csv", WAYPOINTS), spacing_km=30.0)
    np.testing.assert_allclose(from_line["distance_km"], from_csv["distance_km"], atol=1e-6)
    np.testing.assert_allclose(from_line["lat"], from_csv["lat"], atol=1e-8)


def test_connected_multilinestring_joined_and_disconnected_rejected():
    parts = [[(160.0, 0.0), (165.0, 2.0)], [(165.0, 2.0), (170.0, 0.0)]]
    gdf = gpd.GeoDataFrame(geometry=[shapely.MultiLineString(parts)], crs="EPSG:4326")
    lon, lat = read_track(gdf)
    np.testing.assert_array_equal(lon, [160.0, 165.0, 170.0])
    np.testing.assert_array_equal(lat, [0.0, 2.0, 0.0])
    parts[1][0] = (166.0, 2.0)
    gdf = gpd.GeoDataFrame(geometry=[shapely.MultiLineString(parts)], crs="EPSG:4326")
    with pytest.raises(InputError, match="part 2 does not start where part 1 ends"):
        read_track(gdf)


def test_one_waypoint_rejected(tmp_path):
    csv = write_csv(tmp_path / "t.csv", np.array([[160.0, 0.0], [160.0, 0.0]]))
    with pytest.raises(InputError, match="1 distinct waypoint"):
        read_track(csv)


# ---------------------------------------------------------------------------------------
# Figure
# ---------------------------------------------------------------------------------------


def test_profile_figure_is_written_and_not_blank(run, tmp_path):
    gdf = sample_track(run, write_csv(tmp_path / "t.csv", WAYPOINTS), spacing_km=20.0)
    png = plot_profile(gdf, tmp_path / "fig" / "profile.png", title="invented track")
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    image = mpimg.imread(png)[..., :3]
    assert image.shape[0] > 500
    assert image.shape[1] > 800
    ink = (image < 0.9).any(axis=-1).mean()  # share of pixels that are not near-white
    assert ink > 0.02
    colours = np.unique((image * 255).astype(np.uint8).reshape(-1, 3), axis=0)
    assert len(colours) > 20  # lines, fills and text, not one flat colour
    assert [p.name for p in png.parent.iterdir()] == ["profile.png"]


def test_plot_needs_profile_columns(tmp_path):
    with pytest.raises(InputError, match="expected distance_km"):
        plot_profile(pd.DataFrame({"a": [1.0]}), tmp_path / "x.png")
    assert not (tmp_path / "x.png").exists()


# ---------------------------------------------------------------------------------------
# Command line
# ---------------------------------------------------------------------------------------


def test_cli_profile_writes_csv_and_png(run, tmp_path, capsys):
    csv = write_csv(tmp_path / "track.csv", WAYPOINTS, name=["A", "B", "C", "D"])
    out = tmp_path / "out" / "leg1.csv"
    assert main(["profile", str(run), str(csv), "--spacing", "15", "-o", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "track length" in printed
    assert "spacing 15 km" in printed
    table = pd.read_csv(out)
    assert list(table.columns[:4]) == ["distance_km", "waypoint_index", "lon", "lat"]
    np.testing.assert_allclose(
        table["distance_km"].iloc[-1],
        geod_lengths_km(WAYPOINTS[:, 0], WAYPOINTS[:, 1]).sum(),
        rtol=1e-9,
    )
    assert sorted(p.name for p in out.parent.iterdir()) == ["leg1.csv", "leg1.png"]


def test_cli_profile_flags_points_beyond_calibration(run, add_validity_flag, tmp_path, capsys):
    """Bit 4 (beyond calibration) on every cell east of 180 E (invented): the points there
    carry flag 4 and its meaning (lidmelt.physics.FLAG_MEANINGS), the others 0; points between
    the last flagged and first unflagged column take the OR of both (the documented rule)."""
    x, _ = centres(ACROSS, H, W)
    add_validity_flag(run, np.where(x > 180.0, 4, 0))
    csv = write_csv(tmp_path / "track.csv", np.array([[160.0, 0.0], [200.0, 0.0]]))
    out = tmp_path / "leg.csv"
    assert main(["profile", str(run), str(csv), "--spacing", "50", "-o", str(out)]) == 0
    printed = capsys.readouterr().out
    table = pd.read_csv(out, keep_default_na=False)
    lon = np.mod(table["lon"].to_numpy(), 360.0)
    expected = np.where(lon > 180.0 - 0.5 * ACROSS.a, 4, 0)  # within half a cell of 180 E too
    np.testing.assert_array_equal(table["validity_flag"], expected)
    meaning = FLAG_MEANINGS[FLAG_BEYOND_CALIBRATION]  # the meaning the run records
    assert set(table["flag_meaning"]) == {"", meaning}
    assert f"{int((expected > 0).sum())} flagged ({int((expected > 0).sum())} {meaning})" in printed


def test_cli_profile_default_output_name(run, tmp_path, monkeypatch):
    csv = write_csv(tmp_path / "leg2.csv", WAYPOINTS)
    monkeypatch.chdir(tmp_path)
    assert main(["profile", str(run), str(csv), "--spacing", "50"]) == 0
    assert (tmp_path / "leg2_profile.csv").is_file()
    assert (tmp_path / "leg2_profile.png").is_file()


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--spacing", "0"], "not a positive distance"),
        (["--spacing", "5", "-o", "x.gpkg"], "suffix '.gpkg'"),
    ],
)
def test_cli_profile_errors_write_nothing(run, tmp_path, capsys, monkeypatch, args, message):
    csv = write_csv(tmp_path / "t.csv", WAYPOINTS)
    monkeypatch.chdir(tmp_path)
    assert main(["profile", str(run), str(csv), *args]) == 1
    assert message in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run", "t.csv"]


def test_cli_profile_not_a_run_dir_and_bad_track(run, tmp_path, capsys):
    csv = write_csv(tmp_path / "t.csv", WAYPOINTS)
    assert main(["profile", str(tmp_path / "nowhere"), str(csv), "--spacing", "5"]) == 1
    assert "does not exist or is not a folder" in capsys.readouterr().err
    bad = tmp_path / "bad.csv"
    bad.write_text("when,depth\n1,2\n", encoding="utf-8")
    assert main(["profile", str(run), str(bad), "--spacing", "5"]) == 1
    assert "no recognisable coordinate columns" in capsys.readouterr().err


def test_cli_profile_never_overwrites_its_track(run, tmp_path, capsys, monkeypatch):
    # Issue 14: 'profile -o track.csv' run beside track.csv overwrote the input track.
    csv = write_csv(tmp_path / "track.csv", WAYPOINTS)
    before = csv.read_bytes()
    monkeypatch.chdir(tmp_path)
    assert main(["profile", str(run), "track.csv", "--spacing", "50", "-o", "./track.csv"]) == 1
    assert "would overwrite the input" in capsys.readouterr().err
    assert csv.read_bytes() == before
    assert not (tmp_path / "track.png").exists()
