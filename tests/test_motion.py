"""Melting through time on a synthetic plate moving at a constant angular velocity over a plume.

Check values: the geometry of the motion (the plate turns omega = 1 deg/Myr about the north
pole, so its speed on the equator is omega R, R = 6371 km: a closed form), the tests' own
invented age field, and single-column evaluations through :func:`lidmelt.melt_column` (its
direct integration, proven against published values in tests/test_column.py) at each point's
potential temperature and lid then, compared within the table tolerance of tests/test_table.py
(0.5 % or 0.02 km on the melt thickness, 0.2 km on the onset depth).
"""

from __future__ import annotations

import numpy as np
import numpy.testing as npt
import pandas as pd
import pytest

import motionkit as mk
from lidmelt import melt_column
from lidmelt.grids._motionfiles import read_tracks
from lidmelt.grids._rundir import open_run
from lidmelt.motion._rotations import EARTH_RADIUS_KM, great_circle_km
from lidmelt.motion._tracks import TRACK_COLUMNS
from lidmelt.physics import get_cooling_model, isotherm_depth_km
from lidmelt.physics._cooling import seafloor_depth_m
from lidmelt.physics._pressure import water_load_km

SPEED_KM_MYR = np.radians(mk.OMEGA) * EARTH_RADIUS_KM  # omega R on the equator (closed form)
HALF_SPACE = get_cooling_model("half-space")


def table_tolerance(h):
    return np.maximum(0.005 * np.abs(h), 0.02)


def column_then(tp, age_then):
    """One column at Tp and the lid then (the half-space lid at the 1100 C isotherm and the water
    load of the half-space seafloor depth, the run's defaults), by direct integration."""
    age_then = np.asarray(age_then, float)
    lid = isotherm_depth_km(1100.0, age_then, model=HALF_SPACE)
    load = water_load_km(seafloor_depth_m(age_then, model=HALF_SPACE))
    return melt_column(tp, lid, 0.0, method="direct", water_load_km=load)


@pytest.fixture(scope="module")
def moving(tmp_path_factory):
    return open_run(mk.run(tmp_path_factory.mktemp("moving")))


@pytest.fixture(scope="module")
def points(moving):
    return pd.read_csv(moving.path / "track_points.csv")


def test_track_points_have_the_listed_columns(points):
    assert tuple(points.columns) == TRACK_COLUMNS
    assert (points["plume"] == "Solo").all()
    npt.assert_allclose(points["time_ma"], np.arange(0.0, mk.MAX_AGE + 1.0))


def test_age_progression_is_distance_over_plate_speed(points):
    # every point lies on the plume's small circle (here the parallel at 0.1 N), and its time
    # is its distance along the track over the plate speed omega R cos(latitude)
    lon0, lat0 = mk.PLUME["longitude"], mk.PLUME["latitude"]
    npt.assert_allclose(points["lat"], lat0, atol=1e-9)
    steps = great_circle_km(points["lon"][:-1], points["lat"][:-1], points["lon"][1:],
                            points["lat"][1:])  # fmt: skip
    along = np.concatenate([[0.0], np.cumsum(steps)])
    speed = SPEED_KM_MYR * np.cos(np.radians(lat0))
    t = points["time_ma"].to_numpy()
    npt.assert_allclose(along[1:] / speed, t[1:], rtol=0.01)
    # the track runs west of the plume (the plate turns east about the north pole)
    npt.assert_allclose(points["lon"], lon0 - mk.OMEGA * t, atol=1e-9)


def test_track_point_melt_is_one_column_at_tp_and_lid_then(points):
    # the seafloor age then: today's age of the cell under the point, minus the time
    col = np.floor((points["lon"] - mk.WEST) / mk.RES).astype(int)
    age_then = mk.age_field(mk.cell_lon()[col]) - points["time_ma"]
    npt.assert_allclose(points["seafloor_age_then_ma"], age_then, atol=1e-4)
    formed = age_then >= 0
    assert formed.sum() >= 10
    assert (~formed).sum() >= 5
    # the seafloor did not exist yet: the row says so (negative age), no melt, flag 255
    assert points.loc[~formed, ["melt_thickness_km", "onset_depth_km"]].isna().all().all()
    assert (points.loc[~formed, "validity_flag"] == 255).all()
    tp = 1350.0 + mk.PLUME["peak_excess_k"]  # the track point is the plume's centre then
    ref = column_then(np.full(formed.sum(), tp), age_then[formed])
    got = points.loc[formed]
    h = got["melt_thickness_km"].to_numpy()
    assert np.all(np.abs(h - ref.melt_thickness_km) <= table_tolerance(ref.melt_thickness_km))
    npt.assert_allclose(got["onset_depth_km"], ref.onset_depth_km, atol=0.2)
    npt.assert_allclose(got["melting_top_then_km"], ref.melting_top_km, atol=0.02)
    # the melt the anomaly adds: minus the ambient column beneath the same lid
    amb = column_then(np.full(formed.sum(), 1350.0), age_then[formed])
    added = ref.melt_thickness_km - amb.melt_thickness_km
    tol = table_tolerance(ref.melt_thickness_km) + table_tolerance(amb.melt_thickness_km)
    assert np.all(np.abs(got["anomaly_melt_thickness_km"].to_numpy() - added) <= tol)


def test_peak_time_along_the_track_follows_the_plate(moving):
    # the cells the track crosses on existing seafloor: their largest anomaly melt came when
    # the plume passed beneath them, at distance / plate speed (within a step)
    t_peak = moving.open("peak_anomaly_melt_time_ma").values
    row = int(np.argmin(np.abs(mk.cell_lat() - mk.PLUME["latitude"])))
    lon = mk.cell_lon()
    passed = mk.PLUME["longitude"] - lon  # degrees west of the plume = Myr of motion
    on_track = (passed > 0.5) & (passed < 9.0)  # seafloor older than the time all along
    expected = np.radians(passed[on_track]) * EARTH_RADIUS_KM / SPEED_KM_MYR
    assert np.all(np.abs(t_peak[row, on_track] - expected) <= 1.0)


def test_grid_history_is_one_column_at_the_closest_approach(moving):
    # the cells whose centres the track point of time t passes on their meridian, 2.8 to 58 km
    # away: their largest melt came at t, at the Tp of the plume's gaussian profile at that
    # distance and the lid then
    peaks = moving.open("peak_melt_thickness_km").values
    when = moving.open("peak_melt_time_ma").values
    t = np.arange(1.0, 11.0)
    lon = mk.PLUME["longitude"] - mk.OMEGA * t  # cell centres
    col = np.rint((lon - mk.WEST) / mk.RES - 0.5).astype(int)
    npt.assert_allclose(mk.cell_lon()[col], lon, atol=1e-9)
    for row in np.argsort(np.abs(mk.cell_lat() - mk.PLUME["latitude"]))[:4]:
        d = great_circle_km(lon, mk.cell_lat()[row], lon, mk.PLUME["latitude"])
        tp = 1350.0 + mk.PLUME["peak_excess_k"] * np.exp(-((d / mk.PLUME["radius_km"]) ** 2))
        ref = column_then(tp, mk.age_field(lon) - t)
        h = ref.melt_thickness_km
        assert np.all(np.abs(peaks[row, col] - h) <= table_tolerance(h)), (row, peaks[row, col], h)
        npt.assert_array_equal(when[row, col], t)


def test_history_present_is_todays_run(moving):
    # the step at t = 0 is the run itself: the peak is never below today's melt
    today = moving.open("melt_thickness_km").values
    peak = moving.open("peak_melt_thickness_km").values
    ok = np.isfinite(today)
    assert np.array_equal(ok, np.isfinite(peak))
    assert np.all(peak[ok] >= today[ok])
    added_today = moving.open("anomaly_melt_thickness_km").values
    assert np.all(moving.open("peak_anomaly_melt_thickness_km").values[ok] >= added_today[ok])


def test_far_from_the_track_a_cell_keeps_its_own_columns(moving):
    # cells 8 degrees from the track (beyond the gaussian's reach of 6 radii): no melt added at
    # any time, and the largest melt is the cell's own column at its youngest age then (its
    # lid was thinnest then): a single column at the ambient Tp
    far = np.abs(mk.cell_lat() - mk.PLUME["latitude"]) > 8.0
    peak = moving.open("peak_melt_thickness_km").values[far]
    today = moving.open("melt_thickness_km").values[far]
    assert np.all(moving.open("peak_anomaly_melt_thickness_km").values[far] == 0.0)
    assert np.all(moving.open("melting_duration_myr").values[far] == 0.0)
    assert np.isnan(moving.open("peak_anomaly_melt_time_ma").values[far]).all()
    age = np.broadcast_to(mk.age_field(mk.cell_lon()), peak.shape)
    youngest = age - np.minimum(np.floor(age), mk.MAX_AGE)  # the last step before it formed
    ref = column_then(np.full(peak[0].shape, 1350.0), youngest[0])
    assert np.all(np.abs(peak[0] - ref.melt_thickness_km) <= table_tolerance(ref.melt_thickness_km))
    # where even the youngest age then melts nothing, the peak is today's melt
    none_then = ref.melt_thickness_km == 0
    assert none_then.sum() > 20
    assert np.array_equal(peak[:, none_then], today[:, none_then])
    # and no time: nothing melted there at any step; where it melted the time is one of the steps
    when = moving.open("peak_melt_time_ma").values[far]
    assert np.isnan(when[:, none_then]).all()
    assert np.isin(when[:, ~none_then], np.arange(0.0, mk.MAX_AGE + 1.0)).all()
    # where the lid then was thinner than today's, the cell melted more then (the ridge)
    assert np.all(peak[0, ~none_then] > today[0, ~none_then])


def test_duration_counts_the_steps_over_the_threshold(moving, points):
    duration = moving.open("melting_duration_myr").values
    t_added = moving.open("peak_anomaly_melt_thickness_km").values
    assert np.nanmax(duration) > 1.0
    # a cell never reaching 1 km of added melt has no duration; every melting cell's duration
    # is a whole number of steps or half a step at the ends (the trapezoid weights)
    assert np.all(duration[np.isfinite(t_added) & (t_added < 1.0)] == 0.0)
    assert np.all(np.isin(np.round(duration[np.isfinite(duration)] * 2), np.arange(42)))


def test_tracks_file_carries_the_vertex_times(moving, points):
    formed = points["validity_flag"] != 255  # all points within the grid are written
    for name in ("hotspot_tracks.gpkg", "hotspot_tracks.geojson"):
        tracks = read_tracks(moving.path / name)
        assert list(tracks["plume"]) == ["Solo"]
        times = tracks["time_ma"].iloc[0]
        npt.assert_allclose(times, points["time_ma"])
        coords = np.asarray(tracks.geometry.iloc[0].geoms[0].coords)
        npt.assert_allclose(coords[:, 0], points["lon"], atol=1e-9)
        assert tracks["start_ma"].iloc[0] == 0.0
        assert tracks["end_ma"].iloc[0] == mk.MAX_AGE
    assert formed.any()


def test_run_records_the_history(moving):
    s = moving.summary
    assert s["motion"]["steps"] == 21
    for name in ("peak_melt_thickness_km", "peak_melt_time_ma", "melting_duration_myr"):
        assert name in moving.outputs
    for name in ("hotspot_tracks.gpkg", "hotspot_tracks.geojson", "track_points.csv"):
        assert name in s["manifest"]["files"]
    track = s["motion"]["tracks"][0]
    npt.assert_allclose(track["mean_rate_km_per_myr"], SPEED_KM_MYR * np.cos(np.radians(0.1)),
                        rtol=0.01)  # fmt: skip


def test_a_plume_drifting_with_the_plate_stays_over_one_point(tmp_path):
    # identity: a plume carried exactly like the plate (its position R(t) P) has the track
    # R(t)^-1 R(t) P = P: every track point is the plume's position today
    lon0, lat0 = mk.PLUME["longitude"], mk.PLUME["latitude"]
    rows = "".join(f"Solo,{t:g},{lon0 + mk.OMEGA * t!r},{lat0}\n" for t in range(1, 21))
    (tmp_path / "drift.csv").write_text("plume,age_ma,lon,lat\n" + rows, encoding="utf-8")
    run = open_run(mk.run(tmp_path, motion='plume_drift = "drift.csv"'))
    points = pd.read_csv(run.path / "track_points.csv")
    assert len(points) == 21
    npt.assert_allclose(points["lon"], lon0, atol=1e-9)
    npt.assert_allclose(points["lat"], lat0, atol=1e-9)
    assert run.summary["motion"]["files"]["plume_drift"]["source"].endswith("drift.csv")


def test_a_plate_id_grid_gives_each_plate_its_rotations(tmp_path):
    # west of 10 W a second plate that does not move (angle 0): the track on the moving plate
    # stops where it reaches that plate (t = 10 Myr at 1 deg/Myr), and the fixed plate's
    # cells never pass over the plume, 10 degrees east of them
    import rasterio
    from rasterio.transform import from_origin

    ids = np.where(mk.cell_lon() < -10.0, 2, 1).astype("int16")
    with rasterio.open(
        tmp_path / "plates.tif", "w", driver="GTiff", height=mk.HEIGHT, width=mk.WIDTH, count=1,
        dtype="int16", crs="EPSG:4326", transform=from_origin(mk.WEST, mk.NORTH, mk.RES, mk.RES),
    ) as dst:  # fmt: skip
        dst.write(np.broadcast_to(ids, (mk.HEIGHT, mk.WIDTH)), 1)
    tmp_path.mkdir(exist_ok=True)
    (tmp_path / "fixed.csv").write_text(mk.rotations_text(omega=0.0), encoding="utf-8")
    motion = (
        'plate_ids = "plates.tif"\n[motion.plate_rotations]\n1 = "rotations.csv"\n2 = "fixed.csv"'
    )
    run = open_run(mk.run(tmp_path, motion=motion))
    points = pd.read_csv(run.path / "track_points.csv")
    npt.assert_allclose(points["time_ma"], np.arange(0.0, 11.0))
    assert run.summary["motion"]["plates"] == [1, 2]
    added = run.open("peak_anomaly_melt_thickness_km").values
    assert np.all(added[:, mk.cell_lon() < -11.0] == 0.0)
    assert np.nanmax(added[:, (mk.cell_lon() > -9.0) & (mk.cell_lon() < -1.0)]) > 1.0


def test_the_present_read_from_the_files_or_computed_agree(moving, tmp_path):
    # identity: a run writing only melt_thickness_km computes the step t = 0 through the kernel
    # from today's inputs; the history is the same, bit for bit, as the one that read today's
    # outputs from the run's files
    other = open_run(mk.run(tmp_path, extra='[outputs]\nvariables = ["melt_thickness_km"]'))
    for name in ("peak_melt_thickness_km", "peak_anomaly_melt_time_ma", "melting_duration_myr"):
        npt.assert_array_equal(other.open(name).values, moving.open(name).values, err_msg=name)


def test_integrated_production_is_the_time_sum_of_w_times_f(tmp_path):
    # with a constant upwelling W and no plume upwelling, a cell far from the track produced
    # W F(top) at every step where its seafloor existed: the trapezoid sum over the steps
    # (weights 0.5 at the ends, 1 between: max_age_ma at every step) of W x the melt fraction
    # at the top of a single column at the ambient Tp and the lid then (mm/yr x Myr = km)
    w = 40.0
    run = open_run(mk.run(tmp_path, extra=f"[inputs.upwelling]\nconstant = {w}"))
    assert "integrated_melt_production_km" in run.outputs
    got = run.open("integrated_melt_production_km").values
    row = int(np.argmax(np.abs(mk.cell_lat() - mk.PLUME["latitude"])))  # 9.9 degrees away
    age = mk.age_field(mk.cell_lon())
    times = np.arange(0.0, mk.MAX_AGE + 1.0)
    weights = np.where((times == 0) | (times == mk.MAX_AGE), 0.5, 1.0)
    expected = np.zeros(age.shape)
    for t, weight in zip(times, weights, strict=True):
        formed = age - t >= 0
        f = column_then(np.full(formed.sum(), 1350.0), age[formed] - t).max_melt_fraction
        expected[formed] += weight * w * f
    tol = w * 2e-3 * mk.MAX_AGE  # the table's 2e-3 on F (tests/test_table.py) at every step
    assert expected.max() > 20 * tol  # the ridge's young cells produced melt
    assert np.all(np.abs(got[row] - expected) <= tol), np.max(np.abs(got[row] - expected))
    # the plume's track produced more than the same age far from it
    near = int(np.argmin(np.abs(mk.cell_lat() - mk.PLUME["latitude"])))
    west = (mk.cell_lon() > -8.0) & (mk.cell_lon() < -2.0)
    assert np.all(got[near, west] > got[row, west])


def test_a_mantle_grid_is_read_at_each_cells_position_then(tmp_path):
    # an anomaly grid rising 10 K per degree of longitude, fixed in the plumes' frame: a cell
    # on today's longitude L lay at L + omega t at time t (the plate turns east about the north
    # pole), on a cell centre of the grid at every whole Myr, so its Tp then is 1350 + 10 (L +
    # omega t + 30) (bilinear sampling is exact on a linear field). Hotter and beneath a
    # younger lid the further back, it melted most at the last step before its seafloor formed
    # (t* = the whole Myr below its age, at most the history's 20): one column at that Tp and
    # the lid then. The row 10 degrees from the plume's track has no plume melt.
    import rasterio
    from rasterio.transform import from_origin

    ramp = np.broadcast_to(10.0 * (mk.cell_lon() + 30.0), (mk.HEIGHT, mk.WIDTH))
    with rasterio.open(
        tmp_path / "ramp.tif", "w", driver="GTiff", height=mk.HEIGHT, width=mk.WIDTH, count=1,
        dtype="float32", crs="EPSG:4326", transform=from_origin(mk.WEST, mk.NORTH, mk.RES, mk.RES),
    ) as dst:  # fmt: skip
        dst.write(ramp.astype("float32"), 1)
    run = open_run(mk.run(tmp_path, extra='[inputs.thermal_anomaly]\npath = "ramp.tif"'))
    row = int(np.argmax(np.abs(mk.cell_lat() - mk.PLUME["latitude"])))
    lon = mk.cell_lon()
    age = mk.age_field(lon)
    t_star = np.minimum(np.floor(age), mk.MAX_AGE)
    inside = lon + mk.OMEGA * t_star < lon[-1] + 1e-9  # within the grid then (no edge values)
    ref = column_then(1350.0 + 10.0 * (lon + mk.OMEGA * t_star + 30.0), age - t_star)
    melts = inside & (ref.melt_thickness_km > 0)
    assert melts.sum() > 50
    h = ref.melt_thickness_km[melts]
    peak = run.open("peak_melt_thickness_km").values[row, melts]
    assert np.all(np.abs(peak - h) <= table_tolerance(h)), np.max(np.abs(peak - h))
    npt.assert_array_equal(run.open("peak_melt_time_ma").values[row, melts], t_star[melts])


def test_a_grid_departing_inside_a_cap_is_sampled_as_the_whole_grid():
    # identity: a field that departs from its median only inside a cap is sampled only there;
    # at any rotation the result equals the plain bilinear sampling of the whole grid
    from scipy.spatial.transform import Rotation

    from lidmelt.grids._grid import Grid
    from lidmelt.motion._history import FrameField
    from lidmelt.motion._rotations import finite_rotation, unit_vectors

    grid = Grid.from_extent(-30.0, 10.0, -10.0, 10.0, 0.25)
    lon, lat = grid.lonlat_centres()
    d = great_circle_km(lon, lat, -12.0, 2.0)
    values = (np.exp(-((d / 200.0) ** 2)) * (d < 600.0) * 80.0).astype("float32")
    capped = FrameField.from_grid(grid, values)
    assert capped.cap_centre is not None  # the cap is in use
    assert capped.cap_cos > -1.0
    whole = FrameField(0.0, capped.values, capped.baseline)
    xyz = unit_vectors(lon, lat).reshape(-1, 3)
    rotations = [Rotation.identity(), finite_rotation(90.0, 0.0, 6.0), finite_rotation(20.0, 40.0,
                 -9.0), finite_rotation(90.0, 0.0, 60.0)]  # fmt: skip
    seen = 0
    for rotation in rotations:
        a, b = capped.at(grid, xyz, rotation), whole.at(grid, xyz, rotation)
        npt.assert_allclose(np.broadcast_to(a, b.shape), b, atol=1e-4)
        seen += int(np.sum(b > 1.0))
    assert seen > 1000


def test_a_grid_is_read_at_the_rotated_positions_with_its_edge_values_beyond():
    # a field linear in longitude and latitude (2 K per degree east, 5 K per degree north):
    # bilinear sampling is exact on it (an identity), and beyond the grid its edge values are
    # those of the position clamped to the outermost cell centres; the positions then are
    # scipy's rotation of today's unit vectors, read back as longitude and latitude
    from lidmelt.grids._grid import Grid
    from lidmelt.motion._history import FrameField
    from lidmelt.motion._rotations import finite_rotation, lonlat, unit_vectors

    grid = Grid.from_extent(-30.0, 10.0, -10.0, 10.0, 0.25)
    lon, lat = grid.lonlat_centres()
    field = FrameField.from_grid(grid, 2.0 * lon + 5.0 * lat)
    xyz = unit_vectors(lon, lat).reshape(-1, 3)
    outside = 0
    for rotation in (finite_rotation(20.0, 40.0, -4.0), finite_rotation(-60.0, -20.0, 7.0)):
        lon_then, lat_then = lonlat(rotation.apply(xyz))
        lon_c = np.clip(lon_then, -29.875, 9.875)
        lat_c = np.clip(lat_then, -9.875, 9.875)
        outside += int(np.sum((lon_c != lon_then) | (lat_c != lat_then)))
        npt.assert_allclose(field.at(grid, xyz, rotation), 2.0 * lon_c + 5.0 * lat_c, atol=1e-4)
    assert outside > 1000


def test_a_plumes_upwelling_moves_with_its_track(tmp_path):
    # no upwelling but the plume's own (peak U0 = 100 mm/yr with its gaussian shape): a cell on
    # the plume's row 4 to 9 degrees west of it (beyond the plume's reach today) produced, at
    # each step t, U(d) F(top) with d its great-circle distance to the track point of t (on
    # the sphere of the rotations), F of one column at Tp(d) and the lid then; summed with the
    # trapezoid weights
    u0 = 100.0
    run = open_run(
        mk.run(tmp_path, extra="[inputs.upwelling]\nconstant = 0.0",
               plume_keys=f"peak_upwelling_mm_yr = {u0}")
    )  # fmt: skip
    got = run.open("integrated_melt_production_km").values
    row = int(np.argmin(np.abs(mk.cell_lat() - mk.PLUME["latitude"])))
    west = np.arange(4, 10)
    lon = mk.PLUME["longitude"] - mk.OMEGA * west  # cell centres
    col = np.rint((lon - mk.WEST) / mk.RES - 0.5).astype(int)
    times = np.arange(0.0, mk.MAX_AGE + 1.0)
    weights = np.where((times == 0) | (times == mk.MAX_AGE), 0.5, 1.0)
    expected, tol = np.zeros(lon.shape), np.zeros(lon.shape)
    for t, weight in zip(times, weights, strict=True):
        d = great_circle_km(lon, mk.cell_lat()[row], mk.PLUME["longitude"] - mk.OMEGA * t,
                            mk.PLUME["latitude"])  # fmt: skip
        shape = np.exp(-((d / mk.PLUME["radius_km"]) ** 2))
        age_then = mk.age_field(lon) - t
        formed = age_then >= 0
        f = np.zeros(lon.shape)
        ref = column_then(1350.0 + mk.PLUME["peak_excess_k"] * shape[formed], age_then[formed])
        f[formed] = ref.max_melt_fraction
        expected += weight * u0 * shape * f
        tol += weight * u0 * shape * 2e-3  # the table's 2e-3 on F (tests/test_table.py)
    assert np.all(expected > 10.0)
    assert np.all(np.abs(got[row, col] - expected) <= tol), (got[row, col], expected, tol)
