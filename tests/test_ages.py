"""Dated features against a run's history (``lidmelt ages``), and the products that read the
history through the registry (``sample``, ``profile``, the maps' styles, the report).

Check values: the synthetic plate of tests/motionkit.py (it turns 1 deg/Myr about the north pole,
a closed form: the plume passes a cell centre on its parallel at t = distance / speed), the
run's own grids read back (identities of sampling at a cell centre), and the registry's names.
"""

from __future__ import annotations

import numpy as np
import numpy.testing as npt
import pandas as pd
import pytest

import motionkit as mk
from lidmelt._variables import HISTORY
from lidmelt.cli import main
from lidmelt.grids._rundir import open_run
from lidmelt.motion._rotations import EARTH_RADIUS_KM
from lidmelt.products._ages import AGE_COLUMNS, feature_ages
from lidmelt.products._maps._style import style_for
from lidmelt.products._report._write import write_report
from lidmelt.products._sites import sample_stations

SPEED = np.radians(mk.OMEGA) * EARTH_RADIUS_KM * np.cos(np.radians(mk.PLUME["latitude"]))


@pytest.fixture(scope="module")
def moving(tmp_path_factory):
    return open_run(mk.run(tmp_path_factory.mktemp("ages")))


@pytest.fixture
def features(tmp_path):
    # three seamounts on cell centres the track passes at 2, 5 and 8 Ma, their observed ages
    # off by +0.5, -1.0 and 0 Myr; one far from the track
    t = np.array([2.0, 5.0, 8.0])
    lon = mk.PLUME["longitude"] - mk.OMEGA * t
    ages = t + np.array([0.5, -1.0, 0.0])
    rows = [
        f"S{k},{float(x)!r},0.125,{float(a)!r},0.5"
        for k, (x, a) in enumerate(zip(lon, ages, strict=False))
    ]
    rows.append("Far,-5.125,-8.125,3.0,")
    path = tmp_path / "dated.csv"
    path.write_text("name,lon,lat,age_ma,age_error_ma\n" + "\n".join(rows) + "\n", "utf-8")
    return path


def test_ages_are_predicted_where_the_plume_passed(moving, features):
    table, _ = feature_ages(moving, features)
    assert list(table.columns[-len(AGE_COLUMNS) :]) == list(AGE_COLUMNS)
    near = table.iloc[:3]
    npt.assert_array_equal(near["predicted_age_ma"], [2.0, 5.0, 8.0])
    npt.assert_allclose(near["residual_myr"], [0.5, -1.0, 0.0])
    npt.assert_allclose(near["residual_sigma"], [1.0, -2.0, 0.0])
    assert near["in_melting_swath"].all()
    assert (near["plume"] == "Solo").all()
    # along the track: the plate speed times the time (the track's own points, within 1 %)
    npt.assert_allclose(near["distance_along_track_km"], SPEED * np.array([2.0, 5.0, 8.0]),
                        rtol=0.01)  # fmt: skip
    npt.assert_allclose(near["distance_to_track_km"], np.radians(0.025) * EARTH_RADIUS_KM,
                        rtol=0.01)  # fmt: skip
    # the peak melt is the run's own cell value (nearest cell, a cell centre)
    peak = moving.open("peak_melt_thickness_km").values
    row = int(np.argmin(np.abs(mk.cell_lat() - 0.125)))
    cols = [int(np.argmin(np.abs(mk.cell_lon() - x))) for x in near["lon"]]
    npt.assert_allclose(near["peak_melt_thickness_km"], peak[row, cols])
    far = table.iloc[3]
    assert not far["in_melting_swath"]
    assert np.isnan(far["predicted_age_ma"])
    assert np.isnan(far["residual_sigma"])


def test_ages_command_writes_the_table_and_the_figure(moving, features, tmp_path, capsys):
    out = tmp_path / "ages.csv"
    assert main(["ages", str(moving.path), str(features), "-o", str(out)]) == 0
    table = pd.read_csv(out)
    assert len(table) == 4
    assert out.with_suffix(".png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    printed = capsys.readouterr().out
    assert "3 within a melting swath" in printed
    assert "3 of 3 with an error lie within 2 standard errors" in printed


def test_sample_reads_the_history(moving, features):
    gdf = sample_stations(moving, features, method="nearest")
    peak = moving.open("peak_anomaly_melt_time_ma").values
    row = int(np.argmin(np.abs(mk.cell_lat() - 0.125)))
    col = int(np.argmin(np.abs(mk.cell_lon() - (mk.PLUME["longitude"] - 5.0))))
    for name in HISTORY:
        if not HISTORY[name].needs:
            assert name in gdf.columns, name
    assert gdf["peak_anomaly_melt_time_ma"].iloc[1] == peak[row, col] == 5.0


def test_profile_reads_the_history(moving, tmp_path, capsys):
    track = tmp_path / "line.csv"
    track.write_text("lon,lat\n-6.0,0.125\n-2.0,0.125\n", "utf-8")
    out = tmp_path / "line_profile.csv"
    argv = ["profile", str(moving.path), str(track), "--spacing", "20", "-o", str(out)]
    assert main(argv) == 0
    profile = pd.read_csv(out)
    assert profile["peak_anomaly_melt_time_ma"].between(1.0, 7.0).all()


def test_history_styles_and_report(moving):
    assert style_for("peak_melt_thickness_km").zero_is_no_melt
    assert style_for("peak_anomaly_melt_time_ma").nan_with_data_is_no_melt
    assert style_for("melting_duration_myr").no_melt_label.startswith("added melt never")
    html = write_report(moving, maps=[]).read_text(encoding="utf-8")
    assert "The chain&#x27;s history" in html
    assert "<td>Solo</td>" in html
