"""Bad plate-motion inputs: each one clear message naming the file and the row, exit 1, nothing
written (the style of tests/test_faults.py: the command in-process, its stderr and the folder).

Check values are identities: the exit code lidmelt documents (1), the file and row of the bad
input as the test wrote them, and the keys of docs/workflow.md.
"""

from __future__ import annotations

import pytest

import motionkit as mk
import runkit
from lidmelt._errors import InputError
from lidmelt.cli import main
from lidmelt.grids._motionfiles import read_plume_drift, read_rotations


def refused(capsys, argv, folder, *parts):
    """Run ``lidmelt ARGV``: exit 1, one error line holding ``parts``, nothing written in
    ``folder`` but the inputs."""
    before = sorted(p.name for p in folder.iterdir())
    assert main(argv) == 1
    line = runkit.refused(capsys.readouterr().err, argv[0], *parts)
    assert sorted(p.name for p in folder.iterdir()) == before
    return line


ROTATION_CASES = {
    "missing column": ("age_ma,pole_lat,angle_deg\n20,90,20\n", ["lacks the column(s) pole_lon"]),
    "ages not ascending": (
        "age_ma,pole_lat,pole_lon,angle_deg\n10,90,0,10\n5,90,0,5\n20,90,0,20\n",
        ["row 2 (line 3)", "5 Ma is younger than the row before (line 2, 10 Ma)"],
    ),
    "repeated age": (
        "age_ma,pole_lat,pole_lon,angle_deg\n10,90,0,10\n10,90,0,11\n20,90,0,20\n",
        ["row 2 (line 3)", "repeats"],
    ),
    "pole off the sphere": (
        "age_ma,pole_lat,pole_lon,angle_deg\n10,91.5,0,10\n20,90,0,20\n",
        ["row 1 (line 2)", "Euler pole (91.5 N, 0 E) is off the sphere"],
    ),
    "angle not finite": (
        "age_ma,pole_lat,pole_lon,angle_deg\n10,90,0,nan\n20,90,0,20\n",
        ["row 1 (line 2)", "angle_deg is nan; expected a finite number in degrees"],
    ),
    "ages short of the history": (
        "age_ma,pole_lat,pole_lon,angle_deg\n10,90,0,10\n15,90,0,15\n",
        ["ends at 15 Ma (its last row, line 3)", "motion.max_age_ma = 20 Ma"],
    ),
    "present not the identity": (
        "age_ma,pole_lat,pole_lon,angle_deg\n0,90,0,3\n20,90,0,20\n",
        ["row 1 (line 2)", "the present is the identity"],
    ),
}


@pytest.mark.parametrize("case", list(ROTATION_CASES))
def test_bad_rotations_are_refused_naming_file_and_row(tmp_path, capsys, case):
    text, parts = ROTATION_CASES[case]
    wf = mk.workflow(tmp_path)
    (tmp_path / "rotations.csv").write_text(text, encoding="utf-8")
    argv = ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"]
    refused(capsys, argv, tmp_path, "motion.rotations", "rotations.csv", *parts)


def test_a_plume_that_never_lies_under_the_grid_is_refused(tmp_path, capsys):
    # the plume 30 degrees north of the grid: its track (along its parallel) never enters it
    wf = mk.workflow(tmp_path)
    text = wf.read_text(encoding="utf-8").replace("latitude = 0.1", "latitude = 40.0")
    wf.write_text(text, encoding="utf-8")
    argv = ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"]
    refused(capsys, argv, tmp_path, "plume 'Solo'", "inputs.thermal_anomaly.plumes.1",
            "basin.toml", "never lies under the grid between 0 and 20 Ma")  # fmt: skip


def test_a_catalogue_plume_never_under_the_grid_names_its_row(tmp_path, capsys):
    wf = mk.workflow(tmp_path)
    (tmp_path / "hotspots.csv").write_text(
        "name,lon,lat,radius_km,peak_excess_k\nNear,-5.0,0.0,100,200\nFar,120.0,-40.0,100,200\n",
        encoding="utf-8",
    )
    catalogue = '[inputs.thermal_anomaly]\nplumes_file = "hotspots.csv"\n'
    text = wf.read_text(encoding="utf-8").replace(
        "[[inputs.thermal_anomaly.plumes]]", catalogue + "[[inputs.thermal_anomaly.plumes]]"
    )
    wf.write_text(text, encoding="utf-8")
    argv = ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"]
    refused(capsys, argv, tmp_path, "plume 'Far'", "row 2 of the plume catalogue 'hotspots.csv'")


def test_motion_needs_a_plate_age(tmp_path, capsys):
    wf = mk.workflow(tmp_path)
    text = wf.read_text(encoding="utf-8").replace(
        '[inputs.plate_age]\npath = "age.tif"', "[inputs.lid_thickness]\nconstant = 80.0"
    )
    text = text.replace(
        'like = "plate_age"', "extent = [-30.0, 10.0, -10.0, 10.0]\nresolution = 0.25"
    )
    wf.write_text(text, encoding="utf-8")
    argv = ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"]
    refused(capsys, argv, tmp_path, "'motion' in", "needs inputs.plate_age",
            "only inputs.lid_thickness", "today's lid only")  # fmt: skip


@pytest.mark.parametrize(
    ("motion", "parts"),
    [
        ("step_ma = 0.3", ["motion.step_ma", "66.6667 steps", "whole number of steps"]),
        ("step_ma = -1.0", ["motion.step_ma", "outside the accepted range"]),
        ('plate_ids = "age.tif"', ["gives plate_ids without the other"]),
        ("duration_min_melt_km = 0", ["motion.duration_min_melt_km"]),
        ("step_size = 1.0", ["unknown key 'motion.step_size'", "did you mean 'motion.step_ma'"]),
    ],
)
def test_bad_motion_keys_are_refused(tmp_path, capsys, motion, parts):
    wf = mk.workflow(tmp_path, motion=motion)
    argv = ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"]
    refused(capsys, argv, tmp_path, "basin.toml", *parts)


def test_features_outside_the_grid_are_refused(tmp_path, capsys, moving_run):
    features = tmp_path / "dated.csv"
    features.write_text("name,lon,lat,age_ma\nin,-3.0,0.1,3.0\nout,60.0,0.1,5.0\n", "utf-8")
    argv = ["ages", str(moving_run), str(features), "-o", str(tmp_path / "ages.csv")]
    refused(capsys, argv, tmp_path, "dated.csv", "row 2 (name=out)", "outside the run's grid")


@pytest.mark.parametrize(
    ("table", "parts"),
    [
        ("name,lon,lat\nA,-3.0,0.1\n", ["has no column 'age_ma'"]),
        ("name,lon,lat,age_ma\nA,-3.0,0.1,-2\n", ["'age_ma' is not a number >= 0", "row 1"]),
        ("name,lon,lat,age_ma,age_error_ma\nA,-3.0,0.1,2,0\n", ["'age_error_ma'", "row 1"]),
    ],
)
def test_bad_feature_tables_are_refused(tmp_path, capsys, moving_run, table, parts):
    features = tmp_path / "dated.csv"
    features.write_text(table, "utf-8")
    argv = ["ages", str(moving_run), str(features), "-o", str(tmp_path / "ages.csv")]
    refused(capsys, argv, tmp_path, "dated.csv", *parts)


def test_ages_of_a_run_without_history_is_refused(tmp_path, capsys):
    wf = runkit.basin(tmp_path / "in")
    assert main(["run", str(wf), "-o", str(tmp_path / "plain"), "--quiet"]) == 0
    features = tmp_path / "dated.csv"
    features.write_text("lon,lat,age_ma\n-25,7,3\n", "utf-8")
    capsys.readouterr()
    argv = ["ages", str(tmp_path / "plain"), str(features), "-o", str(tmp_path / "ages.csv")]
    refused(capsys, argv, tmp_path, "no history through time", "[motion] table")


def test_drift_rows_are_checked(tmp_path):
    path = tmp_path / "drift.csv"
    path.write_text("plume,age_ma,lon,lat\nSolo,5,0,0\nOther,5,0,0\n", "utf-8")
    with pytest.raises(InputError, match=r"row 2 \(line 3\): plume 'Other' is not a plume"):
        read_plume_drift(path, plumes={"Solo": (0.0, 0.0)}, max_age_ma=5.0)
    path.write_text("plume,age_ma,lon,lat\nSolo,5,0,0\n", "utf-8")
    with pytest.raises(InputError, match=r"ends at 5 Ma .* for plume 'Solo'"):
        read_plume_drift(path, plumes={"Solo": (0.0, 0.0)}, max_age_ma=8.0)


def test_a_missing_rotations_file_names_the_key(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        read_rotations(tmp_path / "none.csv", max_age_ma=1.0)


@pytest.fixture(scope="module")
def moving_run(tmp_path_factory):
    return mk.run(tmp_path_factory.mktemp("moving"))
