"""Tests of coordinates in degrees and minutes (lidmelt.grids._vector.parse_angle, read_points)
and of screening centroids in the grid's longitude convention (issue 13)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from lidmelt._errors import InputError
from lidmelt.grids._vector import parse_angle, read_points


@pytest.mark.parametrize(
    ("text", "axis", "expected"),
    [
        # check values: d + m/60 + s/3600 with the hemisphere's sign (the definition)
        ("06°00.0'S", "lat", -6.0),
        ("6 00.0 S", "lat", -6.0),
        ("-6:00:00", "lat", -6.0),
        ("6 30 S", "lat", -6.5),
        ("N 12 30 36", "lat", 12.51),
        ("170°15'W", "lon", -170.25),
        ("359 30 E", "lon", 359.5),
        ("12d30m", "lon", 12.5),
        ("-12.25", "lon", -12.25),
    ],
)
def test_parse_angle(text, axis, expected):
    assert parse_angle(text, axis=axis) == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize(
    ("text", "axis"),
    [("6 75 S", "lat"), ("6 00 E", "lat"), ("-6 00 S", "lat"), ("6.5 30", "lat"), ("x", "lon")],
)
def test_parse_angle_refuses(text, axis):
    assert math.isnan(parse_angle(text, axis=axis))


def test_station_file_in_degrees_and_minutes(tmp_path):
    path = tmp_path / "stations.csv"
    path.write_text("name,lat,lon\nA,06°00.0'S,170°30.0'W\nB,6 00.0 N,-170:30:00\n", "utf-8")
    gdf = read_points(path)
    # check values: 6 degrees 0 minutes S/N, 170 degrees 30 minutes W (the definition)
    np.testing.assert_allclose(gdf.geometry.y, [-6.0, 6.0])
    np.testing.assert_allclose(gdf.geometry.x, [-170.5, -170.5])
    path.write_text("name,lat,lon\nA,06°75.0'S,170 W\n", "utf-8")
    with pytest.raises(InputError, match=r"line 2: \"06°75.0'S\".*N/S for this column"):
        read_points(path)


def test_screening_centroids_in_the_grid_longitude_convention(make_run_dir):
    from affine import Affine

    from lidmelt.products._screening import screen

    melt = np.zeros((20, 40))
    melt[8:12, 10:14] = 2.0  # cells 190-194 E, 8-12 N of a 180..220 grid (1-degree cells)
    run = make_run_dir(
        {"melt_thickness_km": melt, "anomaly_melt_thickness_km": melt},
        transform=Affine(1.0, 0.0, 180.0, 0.0, -1.0, 20.0),
    )
    found = screen(run, min_melt_thickness_km=0.5, min_area_km2=0.0)
    # check value: the block of cells spans 190-194 E, so its centroid is near 192 E (0..360),
    # not -168
    assert len(found) == 1
    assert found.loc[0, "centroid_lon"] == pytest.approx(192.0, abs=1e-6)
