"""The CLI's one error handler: expected failures give one line and exit 1, never a traceback;
--debug adds the traceback; model parameters out of range and empty runs are errors.

Check values are identities: the exit codes and message parts lidmelt documents
(lidmelt.cli docstring), and the failing file's name.
"""

from __future__ import annotations

import errno

import pytest

import runkit
from lidmelt.cli import main
from lidmelt.cli._failures import describe_failure
from lidmelt.errors import ModelError
from lidmelt.physics import get_model


@pytest.mark.parametrize(
    ("exc", "parts"),
    [
        (
            OSError(errno.ENOSPC, "No space left on device", "/x/a.tif"),
            ["No space left on device (ENOSPC): /x/a.tif", "free some disk space"],
        ),
        (OSError(errno.EROFS, "Read-only file system", "/ro"), ["(EROFS): /ro", "read-only"]),
        (PermissionError(errno.EACCES, "Permission denied", "/p"), ["(EACCES): /p"]),
        (OSError(errno.ENAMETOOLONG, "File name too long", "x"), ["use a shorter path"]),
        (MemoryError(), ["not enough memory", "compute.chunk_size"]),
        (RuntimeError("NetCDF: HDF error"), ["NetCDF/HDF5 file", "HDF error"]),
        (ValueError("embedded null byte"), ["NUL character"]),
    ],
)
def test_expected_failures_are_one_message(exc, parts):
    message = describe_failure(exc)
    for part in parts:
        assert part in message
    assert "\n" not in message


def test_a_bug_keeps_its_traceback():
    assert describe_failure(KeyError("x")) is None
    assert describe_failure(RuntimeError("something else")) is None


def test_a_damaged_geotiff_input_is_one_message_and_debug_shows_the_traceback(tmp_path, capsys):
    wf = runkit.basin(tmp_path / "in")
    age = tmp_path / "in" / "age.tif"
    age.write_bytes(age.read_bytes()[:-200])  # a truncated tile
    argv = ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"]
    assert main(argv) == 1
    err = capsys.readouterr().err
    assert err.startswith("lidmelt run: error: ")
    assert "Traceback" not in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in"]  # nothing written
    assert main(["--debug", *argv]) == 1
    assert "Traceback (most recent call last)" in capsys.readouterr().err


def test_an_all_nan_input_is_an_error_saying_why(tmp_path, capsys):
    wf = runkit.basin(tmp_path / "in", nan=True)
    assert main(["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"]) == 1
    err = capsys.readouterr().err
    assert "no cell of the grid has data" in err
    assert "not all NaN" in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in"]


def test_tp_below_the_solidus_everywhere_is_an_error(tmp_path, capsys):
    # Katz et al. (2003) dry solidus at the surface is 1085.7 C: an ambient Tp of 1000 C with
    # no anomaly cannot melt anywhere
    wf = runkit.basin(tmp_path / "in", extra="")
    text = wf.read_text().replace("peak_excess_k = 250.0", "peak_excess_k = 0.0")
    wf.write_text(text + "[model]\nambient_potential_temperature_c = 1000.0\n")
    assert main(["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"]) == 1
    err = capsys.readouterr().err
    assert "cells with data can be evaluated" in err
    assert "surface solidus" in err


@pytest.mark.parametrize(
    ("param", "value", "match"),
    [
        ("max_onset_pressure_gpa", 100.0, "outside the range this model can use, 1 to 22.5"),
        ("max_onset_pressure_gpa", 1e308, "outside the range"),
        ("cpx_mass_fraction", True, "is a boolean"),
        ("gravity_m_s2", 1e6, "outside the range"),
        ("calibrated_max_pressure_gpa", 20.0, "exceeds max_onset_pressure_gpa"),
    ],
)
def test_model_parameters_have_ranges(param, value, match):
    with pytest.raises(ModelError, match=match):
        get_model("katz2003", **{param: value})


def test_a_grid_above_the_cell_limit_is_refused(tmp_path, capsys):
    wf = runkit.basin(tmp_path / "in", extra="max_cells = 100")
    assert main(["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"]) == 1
    err = capsys.readouterr().err
    assert "36 x 24 = 864 cells, more than compute.max_cells = 100" in err
