"""Finite rotations against closed forms and a published worked example.

Check values: Rodrigues' rotation formula and the geometry of the sphere (closed forms: a point
turned about the north pole, the small circle of a constant angular velocity, whose arc is
omega t R sin(delta) and whose chord is 2 R sin(delta) sin(omega t / 2)); the finite rotations
of Cox & Hart (1986, Plate Tectonics: How It Works, Tables 7-1 and 7-3) with the stage pole and
the interpolated rotation worked from them in the documentation of an open-source
plate-kinematics package (its worked examples of a stage Euler vector and of interpolation).
"""

import numpy as np
import numpy.testing as npt
import pytest

from lidmelt.motion._rotations import (
    EARTH_RADIUS_KM,
    RotationHistory,
    compose,
    finite_rotation,
    great_circle_km,
    lonlat,
    pole_and_angle,
    rodrigues,
    rotate_lonlat,
    slerp_positions,
    stage_rotation,
    unit_vectors,
)


def test_right_hand_rule_about_the_north_pole():
    # closed form: anticlockwise seen from above the north pole moves a point east
    lon, lat = rotate_lonlat(finite_rotation(90.0, 0.0, 90.0), 0.0, 0.0)
    npt.assert_allclose([lon, lat], [90.0, 0.0], atol=1e-12)
    lon, lat = rotate_lonlat(finite_rotation(90.0, 0.0, -30.0), 10.0, 45.0)
    npt.assert_allclose([lon, lat], [-20.0, 45.0], atol=1e-12)


def test_rotation_is_rodrigues_formula():
    rng = np.random.default_rng(1)
    for _ in range(20):
        plat, plon, angle = rng.uniform(-90, 90), rng.uniform(-180, 180), rng.uniform(-180, 180)
        pts = unit_vectors(rng.uniform(-180, 180, 50), rng.uniform(-90, 90, 50))
        expected = rodrigues(pts, unit_vectors(plon, plat), angle)  # closed form
        npt.assert_allclose(finite_rotation(plat, plon, angle).apply(pts), expected, atol=1e-12)
        # a rotation keeps the angular distance to its pole (the point stays on its small circle)
        pole = unit_vectors(plon, plat)
        npt.assert_allclose(expected @ pole, pts @ pole, atol=1e-12)


def test_composition_and_inversion():
    # identities: same pole, the angles add; the inverse is the negative angle; the antipole
    # with the negative angle is the same rotation
    a, b = finite_rotation(30.0, -40.0, 12.0), finite_rotation(30.0, -40.0, 25.0)
    npt.assert_allclose(compose(a, b).as_matrix(), finite_rotation(30.0, -40.0, 37.0).as_matrix())
    npt.assert_allclose(a.inv().as_matrix(), finite_rotation(30.0, -40.0, -12.0).as_matrix())
    npt.assert_allclose(finite_rotation(-30.0, 140.0, -12.0).as_matrix(), a.as_matrix(), atol=1e-15)
    npt.assert_allclose(compose(a, a.inv()).as_matrix(), np.eye(3), atol=1e-15)
    # compose is "first, then": apply the first one, then the other (by hand)
    c = finite_rotation(-10.0, 70.0, 40.0)
    p = unit_vectors(5.0, 5.0)
    npt.assert_allclose(compose(a, c).apply(p), c.apply(a.apply(p)), atol=1e-15)
    assert not np.allclose(compose(a, c).apply(p), a.apply(c.apply(p)))


def test_pole_and_angle_round_trip():
    lat, lon, angle = pole_and_angle(finite_rotation(-35.0, 120.0, 17.5))
    npt.assert_allclose([lat, lon, angle], [-35.0, 120.0, 17.5], atol=1e-10)


def test_constant_angular_velocity_traces_a_small_circle():
    # a plate turning at omega about a fixed pole: R(t) = rotation by omega t
    omega, pole = 0.8, (60.0, -30.0)  # deg/Myr, Euler pole
    hist = RotationHistory.from_rows([50.0], pole[0], pole[1], [50.0 * omega])
    times = np.linspace(0.0, 50.0, 5001)
    lon, lat = hist.track(-20.0, 10.0, times)
    delta = np.radians(90.0 - 0.0)
    p, e = unit_vectors(-20.0, 10.0), unit_vectors(pole[1], pole[0])
    delta = np.arccos(p @ e)  # angular distance of the plume from the pole
    q = unit_vectors(lon, lat)
    npt.assert_allclose(q @ e, np.cos(delta), atol=1e-12)  # on the small circle
    chord = EARTH_RADIUS_KM * np.linalg.norm(q - p, axis=-1)
    expected = 2 * EARTH_RADIUS_KM * np.sin(delta) * np.sin(np.radians(omega * times) / 2)
    npt.assert_allclose(chord, expected, rtol=1e-10, atol=1e-9)
    arc = np.concatenate([[0.0], np.cumsum(great_circle_km(lon[:-1], lat[:-1], lon[1:], lat[1:]))])
    # arc length = angular rate x time x R sin(delta); the great-circle steps fall short of
    # the small circle by about (step angle)^2/24 of each step
    npt.assert_allclose(arc, np.radians(omega) * times * EARTH_RADIUS_KM * np.sin(delta), rtol=1e-5)
    # the track goes back along the motion: R(t)^-1 turns clockwise about the pole
    east = np.cross(e, p)
    assert (q[1] - p) @ east < 0


def test_cox_hart_table_7_1_stage_pole():
    # Eurasia relative to North America at 53 and 83 Ma (Cox & Hart 1986, Table 7-1); the
    # stage pole from 83 to 53 Ma is at 78.09 N, 75.94 W turning 0.4 deg/Myr (worked in the
    # documentation of an open-source plate-kinematics package, its stage Euler vector example)
    r53 = finite_rotation(40.0, 145.0, -11.4)
    r83 = finite_rotation(70.5, 150.1, -20.3)
    lat, lon, angle = pole_and_angle(stage_rotation(r83, r53))
    npt.assert_allclose([lat, lon], [78.09, -75.94], atol=0.005)
    assert round(angle / 30.0, 1) == 0.4
    # the same stage, read in the frame of the plate at 83 Ma: pole 80.44 N, 22.68 W (the
    # documentation's reverse-time example)
    lat, lon, _ = pole_and_angle(r83.inv() * r53)
    npt.assert_allclose([lat, lon], [80.44, -22.68], atol=0.005)


def test_cox_hart_table_7_3_interpolation():
    # Australia relative to Antarctica at 37 and 42 Ma (Cox & Hart 1986, Table 7-3); at 40 Ma
    # the interpolated rotation is 10.89 S, 145.35 W, 22.36 deg (the same documentation,
    # its interpolation example); at 30 Ma, between the present and
    # 37 Ma, the 37 Ma pole with 16.62 deg (closed form: 20.5 deg x 30 / 37)
    hist = RotationHistory.from_rows([37.0, 42.0], [11.9, 10.3], [34.4, 34.8], [-20.5, -23.6])
    lat, lon, angle = pole_and_angle(hist.at([40.0, 30.0]))
    # pole_and_angle gives the positive angle: the antipole of a negative rotation
    npt.assert_allclose([lat[0], lon[0], angle[0]], [-10.89, -145.35, 22.36], atol=0.005)
    npt.assert_allclose([lat[1], lon[1], angle[1]], [-11.9, -145.6, 16.62], atol=0.005)
    # the rows themselves come back exactly
    for age, row in ((37.0, (11.9, 34.4, -20.5)), (42.0, (10.3, 34.8, -23.6))):
        npt.assert_allclose(hist.at(age).as_matrix()[0], finite_rotation(*row).as_matrix())


def test_interpolation_follows_the_stage_pole():
    # between two rows the plate turns at a constant rate about the stage pole: the stage
    # rotation from t1 to t is the stage rotation of the interval with the fraction of its
    # angle (identity of the definition), and the path is not a straight blend of matrices
    hist = RotationHistory.from_rows([10.0, 30.0], [50.0, 20.0], [-60.0, 10.0], [5.0, 25.0])
    full = stage_rotation(hist.at(10.0), hist.at(30.0))
    part = stage_rotation(hist.at(10.0), hist.at(15.0))
    sl, so, sa = pole_and_angle(full)
    pl, po, pa = pole_and_angle(part)
    npt.assert_allclose([pl, po], [sl, so], atol=1e-9)
    npt.assert_allclose(pa, sa * 0.25, rtol=1e-12)


def test_slerp_keeps_a_constant_speed_on_the_great_circle():
    lon, lat = slerp_positions([0.0, 10.0], [0.0, 30.0], [0.0, 0.0], [0.0, 2.5, 5.0, 10.0])
    npt.assert_allclose(lon, [0.0, 7.5, 15.0, 30.0], atol=1e-12)  # closed form on the equator
    npt.assert_allclose(lat, 0.0, atol=1e-12)


@pytest.mark.parametrize("points", [(0.0, 0.0, 90.0, 0.0), (10.0, 80.0, -170.0, 80.0)])
def test_great_circle_distance(points):
    # closed forms: a quarter of the equator; two points 20 degrees apart across the pole
    d = great_circle_km(*points)
    lon, lat = lonlat(unit_vectors(points[0], points[1]))
    npt.assert_allclose([lon, lat], points[:2], atol=1e-12)
    expected = np.radians(90.0 if points[1] == 0 else 20.0) * EARTH_RADIUS_KM
    npt.assert_allclose(d, expected, rtol=1e-12)
