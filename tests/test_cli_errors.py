"""The CLI's one error handler: expected failures give one line and exit 1, never a traceback;
--debug adds the traceback; model parameters out of range and empty runs are errors.

Check values are identities: the exit codes and message parts lidmelt documents
(lidmelt.cli docstring), and the failing file's name.
"""

from __future__ import annotations

import errno

import pytest

import runkit
from lidmelt._errors import ModelError
from lidmelt.cli import main
from lidmelt.cli._failures import describe_failure
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


def test_every_printed_message_is_bounded():
    # identity: MESSAGE_CHARS (2000) bounds the line; the start (the file, the key) and the end
    # (the fix) are kept; a short message is untouched
    from lidmelt.cli._failures import MESSAGE_CHARS, bounded

    token = bounded(f"file 'x.toml': value {'a' * 10_000_000} is bad. Fix it.")
    assert len(token) < 400
    assert token.startswith("file 'x.toml': value aaaa")
    assert "...[10000000 characters]..." in token
    assert token.endswith(" is bad. Fix it.")
    words = bounded("start " + "ab " * 5_000_000 + "end: fix it.")
    assert len(words) <= MESSAGE_CHARS
    assert words.startswith("start ab")
    assert words.endswith("ab end: fix it.")
    assert "characters left out" in words
    assert bounded("short: fix it.") == "short: fix it."


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


# ---- the surfaces of issue 24: ensembles, caches, bathymetry, plumes ---------------------------
ENSEMBLE = """
[ensemble]
members = {members}
{extra}
[ensemble.vary]
"model.ambient_potential_temperature_c" = {{ {dist} = [1350.0, 25.0] }}
"""


def ensemble_basin(tmp_path, *, members=4, dist="normal", extra=""):
    wf = runkit.basin(tmp_path / "in")
    wf.write_text(wf.read_text() + ENSEMBLE.format(members=members, dist=dist, extra=extra))
    return wf


def run_refused(tmp_path, capsys, argv, *parts, command="run"):
    """``lidmelt ARGV`` exits 1 with one message holding ``parts``; nothing under ``tmp_path``
    was written, replaced or left beside it (no lock, no staging folder)."""
    before, names = runkit.snapshot(tmp_path), sorted(p.name for p in tmp_path.iterdir())
    assert main(argv) == 1
    line = runkit.refused(capsys.readouterr().err, command, *parts)
    assert runkit.snapshot(tmp_path) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == names
    return line


def test_a_mistyped_distribution_is_an_unknown_distribution(tmp_path, capsys):
    # check value: the distributions of docs/workflow.md, "[ensemble]: how sure is the answer?"
    wf = ensemble_basin(tmp_path, dist="gamma")
    run_refused(
        tmp_path, capsys, ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"],
        "'ensemble.vary.model.ambient_potential_temperature_c' in ",
        "names the distribution 'gamma', which is not known",
        "the known distributions are normal, uniform, lognormal, triangular, choice",
        "{ normal = [1350.0, 25.0] }",
    )  # fmt: skip


def _no_drawing(monkeypatch):
    """Fail the test if any member is drawn (the refusal must come first)."""
    import lidmelt.workflow._ensemble as reader

    def drawn(*args, **kwargs):
        raise AssertionError("members were drawn before the ensemble was refused")

    monkeypatch.setattr(reader, "draw_members", drawn)


@pytest.mark.parametrize("members", ["1000000000", "1e9"])
def test_a_billion_members_are_refused_before_any_is_drawn(tmp_path, capsys, monkeypatch, members):
    # written as a whole number or as a decimal (1e9): its size is what the message says
    import re

    _no_drawing(monkeypatch)
    wf = ensemble_basin(tmp_path, members=members)
    line = run_refused(
        tmp_path, capsys, ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"],
        "ensemble.members = 1000000000 with compute.chunk_size = 64 and compute.workers = 2",
        "over ensemble.memory_limit_gb = 2 GB",
        "Lower ensemble.members, compute.chunk_size (e.g. 256) or compute.workers, or raise "
        "ensemble.memory_limit_gb",
    )  # fmt: skip
    figure = float(re.search(r"needs about ([0-9.e+]+) GB", line)[1])
    # at least the members' kept layers: 64^2 cells x 2 workers x 1e9 members x 3 float32
    # outputs and their sorted copy (24 bytes; the estimate of lidmelt.ensemble._stage)
    assert figure >= 64**2 * 2 * 1e9 * 24 / 1e9


def test_more_members_than_can_be_checked_are_refused_before_any_is_drawn(
    tmp_path, capsys, monkeypatch
):
    # memory allowed (the largest memory_limit_gb), so the count limit decides
    _no_drawing(monkeypatch)
    wf = ensemble_basin(tmp_path, members=200_000, extra="memory_limit_gb = 1e6")
    run_refused(
        tmp_path, capsys, ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"],
        "'ensemble.members' in ", "is 200000; expected at most 100000 members",
        "Lower ensemble.members",
    )  # fmt: skip


@pytest.mark.parametrize("warm", [False, True], ids=["empty-cache", "warm-cache"])
def test_a_bad_cache_limit_is_refused_whether_the_cache_is_empty_or_warm(
    tmp_path, capsys, monkeypatch, warm
):
    import os
    from pathlib import Path

    from lidmelt.physics import get_table

    if warm:  # the session's cache holds the katz2003 table (built now if not yet)
        get_table("katz2003")
        cache = Path(os.environ["LIDMELT_CACHE_DIR"])
        assert list(cache.glob("katz2003-*.npz"))
    else:
        cache = tmp_path / "empty-cache"
        cache.mkdir()
        monkeypatch.setenv("LIDMELT_CACHE_DIR", str(cache))
    held = runkit.snapshot(cache)
    wf = runkit.basin(tmp_path / "in")
    monkeypatch.setenv("LIDMELT_CACHE_MAX_MB", "abc")
    run_refused(
        tmp_path, capsys, ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"],
        "LIDMELT_CACHE_MAX_MB = 'abc': expected a positive number of megabytes",
        "Set it to e.g. 2000, or unset it.",
    )  # fmt: skip
    assert runkit.snapshot(cache) == held  # the cache was neither filled nor evicted


def _bathymetry_basin(tmp_path, elevation_m, *, units="m"):
    """The tiny basin with its lid (60 km) given below sea level over ``elevation_m``."""
    import numpy as np
    import rasterio
    from rasterio.transform import from_origin

    wf = runkit.basin(tmp_path / "in")
    for name, values, unit in (("lid.tif", np.full((24, 36), 60.0), "km"),
                               ("bath.tif", elevation_m, units)):  # fmt: skip
        with rasterio.open(
            tmp_path / "in" / name, "w", driver="GTiff", height=24, width=36, count=1,
            dtype="float32", crs="EPSG:4326", transform=from_origin(-30, 10, 0.25, 0.25),
            nodata=np.nan,
        ) as dst:  # fmt: skip
            dst.write(np.asarray(values, "float32"), 1)
            dst.units = (unit,)
    wf.write_text(
        wf.read_text().replace('like = "plate_age"', 'like = "lid_thickness"')
        + '[inputs.lid_thickness]\npath = "lid.tif"\nreference = "sea_level"\n'
        'bathymetry = "bath.tif"\n'
    )
    return wf


#: An invented basin floor: 3000 m deep in the east, 4400 m in the west (m, negative down).
FLOOR_M = -3000.0 - 40.0 * __import__("numpy").mgrid[0:24, 0:36][1]


@pytest.mark.parametrize(
    ("elevation", "parts"),
    [
        (-FLOOR_M, ["has values from 3000 to 4400 m, 100% of its cells above sea level",
                    "expected elevation, negative below sea level",
                    "If the file holds depths positive down, multiply it by -1"]),
        (FLOOR_M / 1000.0, ["has values from -4.4 to -3 m",
                            "all within 11 m of sea level, as if in km; expected metres",
                            'Label the file\'s units "km"']),
        (FLOOR_M * 100.0, ["has values from -440000 to -300000 m",
                           "beyond the deepest seafloor"]),
    ],
    ids=["depth-positive-down", "km-as-m", "cm-as-m"],
)  # fmt: skip
def test_bathymetry_of_the_wrong_sign_or_unit_is_refused(tmp_path, capsys, elevation, parts):
    # check values: the invented floor above and the rule of lidmelt.grids._lidref (most cells
    # below sea level; the deepest seafloor about 11 km, from memory)
    wf = _bathymetry_basin(tmp_path, elevation)
    run_refused(
        tmp_path, capsys, ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"],
        f"bathymetry grid '{tmp_path / 'in' / 'bath.tif'}' (inputs.lid_thickness.bathymetry)",
        *parts, "then run again.",
    )  # fmt: skip


def test_bathymetry_in_km_labelled_so_equals_metres(tmp_path):
    # identity: the same floor in m, and in km with its units saying so, give the same lid
    from lidmelt._engine import run_basin
    from lidmelt.workflow import load_workflow

    lids = []
    for folder, values, units in (("m", FLOOR_M, "m"), ("km", FLOOR_M / 1000.0, "km")):
        wf = _bathymetry_basin(tmp_path / folder, values, units=units)
        done = run_basin(load_workflow(wf, output_dir=tmp_path / folder / "out"), progress=False)
        lids.append(done.summary["statistics"]["melt_volume_km3"])
    assert lids[0] == lids[1]
    assert lids[0] > 0  # the plume melts beneath the lid: the water depth matters


def _plumes(n, *, names=None, radius=300.0):
    out = []
    for i in range(n):
        name = f'name = "{names[i]}"\n' if names else ""
        out.append(
            f"[[inputs.thermal_anomaly.plumes]]\n{name}longitude = {-29.0 + 0.008 * i}\n"
            f"latitude = 5.0\nradius_km = {radius}\npeak_excess_k = 0.1\n"
        )
    return "".join(out)


def test_two_plumes_of_one_name_are_refused(tmp_path, capsys):
    wf = runkit.basin(tmp_path / "in")
    text = wf.read_text().replace(
        "[[inputs.thermal_anomaly.plumes]]\n",
        '[[inputs.thermal_anomaly.plumes]]\nname = "Ardent"\n',
    )
    wf.write_text(text + _plumes(2, names=["Brisa", "Ardent"]))
    run_refused(
        tmp_path, capsys, ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"],
        "'inputs.thermal_anomaly.plumes.3' in ", "is called 'Ardent', as "
        "inputs.thermal_anomaly.plumes.1 is", "give each plume its own name",
    )  # fmt: skip


def with_catalogue(wf):
    """Name ``hs.csv`` (beside ``wf``) as the basin's plume catalogue."""
    table = "[inputs.thermal_anomaly]\n"
    wf.write_text(wf.read_text().replace(table, table + 'plumes_file = "hs.csv"\n'))


def test_a_catalogue_row_named_like_an_unnamed_plume_is_refused(tmp_path, capsys):
    # the unnamed inline plume is 'plume 1' (lidmelt.products._screening.run_plumes' rule)
    wf = runkit.basin(tmp_path / "in")
    (tmp_path / "in" / "hs.csv").write_text(
        "name,lon,lat,radius_km,peak_excess_k\nX,-20,5,100,10\nplume 1,-22,5,100,10\n"
    )
    with_catalogue(wf)
    run_refused(
        tmp_path, capsys, ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"],
        "'inputs.thermal_anomaly.plumes_file.2' in ", "is called 'plume 1', as "
        "inputs.thermal_anomaly.plumes.1 is",
    )  # fmt: skip


def test_plumes_reaching_too_many_cells_are_refused_with_the_estimate(tmp_path, capsys):
    # 1000 plumes of 300 km radius inside a 9 x 6 degree grid: each gaussian reaches 1800 km,
    # so every one of the 36 x 24 cells; 864 000 in all (an identity of the estimate's cap)
    wf = runkit.basin(tmp_path / "in", extra="max_cells = 100000")
    wf.write_text(wf.read_text() + _plumes(999))
    run_refused(
        tmp_path, capsys, ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"],
        "the 1000 plume(s) of inputs.thermal_anomaly reach about 864,000 cells",
        "more than compute.max_cells = 100,000",
        "or raise compute.max_cells in the workflow",
    )  # fmt: skip


def test_more_plumes_than_allowed_are_refused_before_they_are_checked(
    tmp_path, capsys, monkeypatch
):
    # the limit lowered to 40 for speed; the rule is the same at lidmelt._config.MAX_PLUMES
    import lidmelt.workflow._inputs as reader

    monkeypatch.setattr(reader, "MAX_PLUMES", 40)
    checked = []
    monkeypatch.setattr(reader, "_read_plume", lambda *a: checked.append(a))
    wf = runkit.basin(tmp_path / "in")
    wf.write_text(wf.read_text() + _plumes(40))
    run_refused(
        tmp_path, capsys, ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"],
        "'inputs.thermal_anomaly.plumes' in ", "gives 41 plumes; a workflow has at most 40",
    )  # fmt: skip
    assert checked == []


def test_a_catalogue_of_a_million_rows_is_refused_before_it_is_read(tmp_path, capsys, monkeypatch):
    import lidmelt.grids._catalogue as catalogue

    def read(*args, **kwargs):
        raise AssertionError("the catalogue's rows were read before it was refused")

    monkeypatch.setattr(catalogue, "read_points", read)
    wf = runkit.basin(tmp_path / "in")
    rows = "".join(f"p{i},-20,5,100,1\n" for i in range(1_000_000))
    (tmp_path / "in" / "hs.csv").write_text("name,lon,lat,radius_km,peak_excess_k\n" + rows)
    with_catalogue(wf)
    run_refused(
        tmp_path, capsys, ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"],
        f"plume catalogue '{tmp_path / 'in' / 'hs.csv'}'", "has 1,000,000 rows",
        "a workflow has at most 10,000 plumes",
    )  # fmt: skip


def test_a_text_grid_spanning_a_huge_lattice_is_refused_naming_the_file(tmp_path, capsys):
    # five points spanning 1 800 001 x 2 000 001 nodes (tests/test_grids_inputs.py)
    wf = runkit.basin(tmp_path / "in")
    grid = tmp_path / "in" / "age.xyz"
    grid.write_text(
        "lon lat age\n0 0 1\n0.00001 0.00001 2\n0.00002 0.00002 3\n0.00003 0.00003 4\n18 20 5\n"
    )
    wf.write_text(wf.read_text().replace('path = "age.tif"', 'path = "age.xyz"'))
    run_refused(
        tmp_path, capsys, ["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"],
        f"text grid '{grid}'", "= 3.6e+12 nodes", "Convert it to a GeoTIFF or NetCDF grid",
    )  # fmt: skip
