"""The `lidmelt column` command, tested in-process and once as a subprocess."""

import json
import subprocess
import sys

import numpy as np
import pytest

from lidmelt.cli import main
from lidmelt.physics import (
    excess_to_melt_k,
    get_cooling_model,
    get_table,
    isotherm_depth_km,
    melt_column,
)
from lidmelt.physics._cooling import seafloor_depth_m
from lidmelt.physics._geotherm import geotherm_tops
from lidmelt.physics._pressure import water_load_km

KEYS = {
    "melt_thickness_km",
    "onset_depth_km",
    "onset_pressure_gpa",
    "melting_top_km",
    "max_melt_fraction",
    "mean_melt_pressure_gpa",
    "excess_to_melt_k",
}


def run_json(capsys, *args):
    assert main(["column", *args, "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_json_has_every_key_and_matches_the_api(capsys):
    doc = run_json(
        capsys, "--excess-temperature", "200", "--age", "80", "--top-of-melting", "isotherm"
    )
    assert set(doc) >= KEYS
    half_space = get_cooling_model("half-space")
    lid = float(isotherm_depth_km(1100.0, 80.0, model=half_space))
    # with --age the water above the seafloor loads the column: the cooling model's seafloor
    # depth at that age (docs/physics.md, section "Depth and pressure")
    depth_m = float(seafloor_depth_m(80.0, model=half_space))
    load = float(water_load_km(depth_m))
    assert doc["water_depth_m"] == pytest.approx(depth_m)
    res = melt_column(1550.0, lid, 0.0, method="direct", water_load_km=load)
    assert doc["melt_thickness_km"] == pytest.approx(float(res.melt_thickness_km))
    assert doc["melting_top_km"] == pytest.approx(lid)
    assert doc["excess_to_melt_k"] == pytest.approx(
        float(excess_to_melt_k(lid, water_load_km=load))
    )
    # physically sensible (common practice): a 200 K plume under 80 Ma seafloor melts from below
    # the lid; the onset is deeper than the lid and the excess needed is below the 200 K given
    assert doc["melt_thickness_km"] > 0
    assert doc["onset_depth_km"] > doc["melting_top_km"]
    assert 0 < doc["excess_to_melt_k"] < 200
    assert doc["validity_flag"] == 0
    assert doc["model"] == "katz2003"


def test_no_melt_gives_null_mean_pressure(capsys):
    doc = run_json(capsys, "--potential-temperature", "1350", "--lid-depth", "150")
    assert doc["melt_thickness_km"] == 0.0
    assert doc["mean_melt_pressure_gpa"] is None
    # lidmelt definition: no onset where nothing melts; the solidus crossing stays (82.2 km at
    # Tp 1350 C dry, docs/physics.md "Isentropic decompression melting")
    assert doc["onset_depth_km"] is None
    assert doc["onset_pressure_gpa"] is None
    assert doc["solidus_crossing_depth_km"] == pytest.approx(82.2, abs=0.05)


def test_the_geotherm_top_of_melting(capsys):
    # lidmelt definition (docs/physics.md, "One mantle beneath the lid"): with --age the column
    # melts up to where it meets the cooling model's geotherm (default rule), its depths below
    # the seafloor beneath the water of the cooling model's seafloor depth at that age; the run
    # reports the rule, and direct integration and the table agree within the table's tolerance
    doc = run_json(capsys, "--excess-temperature", "0", "--age", "5")
    table = run_json(capsys, "--excess-temperature", "0", "--age", "5", "--method", "table")
    half_space = get_cooling_model("half-space")
    load = float(water_load_km(seafloor_depth_m(5.0, model=half_space)))
    top, _amb, excess = geotherm_tops(
        get_table("katz2003"), half_space, 1350.0, 0.0, 5.0, ambient_c=1350.0,
        water_load_km=load,
    )  # fmt: skip
    assert doc["top_of_melting"] == "geotherm"
    assert doc["lid_isotherm_c"] is None
    assert doc["melting_top_km"] == pytest.approx(float(top), abs=0.3)
    assert table["melting_top_km"] == pytest.approx(float(top), abs=1e-4)
    assert doc["melt_thickness_km"] == pytest.approx(table["melt_thickness_km"], abs=0.03)
    assert doc["excess_to_melt_k"] == pytest.approx(float(excess), abs=1.5)
    # beneath 60 Ma half-space seafloor the ambient column meets its geotherm nowhere
    old = run_json(capsys, "--excess-temperature", "0", "--age", "60")
    assert old["melt_thickness_km"] == 0.0
    assert old["melting_top_km"] is None
    assert old["onset_depth_km"] is None
    assert old["melting_regime"] == 0


def test_model_parameter_override(capsys):
    base = run_json(capsys, "--potential-temperature", "1550", "--lid-depth", "0")
    lean = run_json(
        capsys,
        "--potential-temperature",
        "1550",
        "--lid-depth",
        "0",
        "--param",
        "cpx_mass_fraction=0.12",
    )
    assert lean["model_parameters"]["cpx_mass_fraction"] == 0.12
    assert lean["melt_thickness_km"] < base["melt_thickness_km"]


def test_readable_table_and_profile(tmp_path, capsys):
    prof = tmp_path / "column.csv"
    assert (
        main(
            [
                "column",
                "--potential-temperature",
                "1450",
                "--lid-depth",
                "40",
                "--water",
                "0.01",
                "--profile",
                str(prof),
            ]
        )
        == 0
    )
    out = capsys.readouterr().out
    assert "melt thickness" in out
    assert "km" in out
    assert "onset depth" in out
    data = np.genfromtxt(prof, delimiter=",", names=True)
    assert data.dtype.names == ("depth_km", "pressure_gpa", "temperature_c", "melt_fraction")
    assert np.all(np.diff(data["depth_km"]) < 0)  # deepest first, up to the top of melting
    assert data["depth_km"][-1] == pytest.approx(40.0)
    assert 0 < data["melt_fraction"].max() <= 1
    assert not list(tmp_path.glob(".*.tmp"))


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--potential-temperature", "1000", "--lid-depth", "10"], "surface solidus"),
        (["--potential-temperature", "1350", "--lid-depth", "-5"], "negative"),
        (["--potential-temperature", "nan", "--lid-depth", "10"], "not a finite number"),
        (["--potential-temperature", "1350", "--lid-depth", "10", "--water", "0.6"], "water"),
        (["--potential-temperature", "1350", "--age", "-3"], "negative"),
        (["--potential-temperature", "1350", "--lid-depth", "10", "--model", "katz"], "katz2003"),
        (
            [
                "--potential-temperature",
                "1350",
                "--lid-depth",
                "10",
                "--model",
                "mckenzie-bickle1988",
                "--water",
                "0.01",
            ],
            "anhydrous",
        ),
        (
            ["--potential-temperature", "1350", "--lid-depth", "10", "--param", "beta1"],
            "NAME=NUMBER",
        ),
    ],
)
def test_bad_input_is_a_clear_error(capsys, args, message):
    assert main(["column", *args]) == 1
    err = capsys.readouterr().err
    assert message in err
    assert "Traceback" not in err


def test_beyond_calibration_is_noted(capsys):
    doc = run_json(capsys, "--potential-temperature", "1640", "--lid-depth", "0")
    assert doc["validity_flag"] == 4
    assert "calibration" in capsys.readouterr().err or doc["onset_pressure_gpa"] > 7


def test_python_dash_m_lidmelt():
    out = subprocess.run(
        [
            sys.executable,
            "-m",
            "lidmelt",
            "column",
            "--potential-temperature",
            "1350",
            "--lid-depth",
            "0",
            "--json",
        ],
        capture_output=True,
        text=True,
        check=True,
    )
    assert 6.3 < json.loads(out.stdout)["melt_thickness_km"] < 7.9  # White et al. 1992, from memory


def test_the_ambient_used_is_reported_or_the_excess_omitted(capsys):
    # issue 11: with only Tp given there is no ambient to compare with, so no excess is shown
    doc = run_json(capsys, "--potential-temperature", "1450", "--lid-depth", "30")
    assert "excess_to_melt_k" not in doc
    assert "anomaly_melt_thickness_km" not in doc
    assert doc["ambient_potential_temperature_c"] is None
    assert main(["column", "--potential-temperature", "1450", "--lid-depth", "30"]) == 0
    text = capsys.readouterr().out
    assert "excess to melt  " not in text  # no row (the note below names it)
    assert "--ambient" in text
    # with --excess-temperature the default ambient (1350 C, Herzberg et al. 2010) is shown
    doc = run_json(capsys, "--excess-temperature", "100", "--lid-depth", "30")
    assert doc["ambient_potential_temperature_c"] == 1350.0
    amb = melt_column(1350.0, 30.0, 0.0, method="direct").melt_thickness_km
    tot = melt_column(1450.0, 30.0, 0.0, method="direct").melt_thickness_km
    # lidmelt definition (docs/physics.md): anomaly melt = H(ambient + anomaly) - H(ambient)
    assert doc["anomaly_melt_thickness_km"] == pytest.approx(float(tot - amb))
    # ambient mantle melts beneath a 30 km lid and the anomaly adds (regime 2, the registry)
    assert doc["melting_regime"] == 2
    # lidmelt definition: crust = H x 3300 / crust density
    assert doc["crustal_thickness_km"] == pytest.approx(float(tot) * 3300.0 / 2900.0)
    doc = run_json(
        capsys, "--excess-temperature", "100", "--lid-depth", "30", "--crust-density", "2800"
    )
    assert doc["crustal_thickness_km"] == pytest.approx(float(tot) * 3300.0 / 2800.0)


def test_unit_mistakes_get_hints(capsys):
    # water given in ppm (100 ppm = 0.01 wt%): refused with the conversion
    assert (
        main(["column", "--potential-temperature", "1350", "--lid-depth", "30", "--water", "100"])
        != 0
    )
    assert "--water 0.01" in capsys.readouterr().err
    # Tp in kelvin: 1623 K = 1349.85 C, a likely ambient value; a note gives the conversion
    assert main(["column", "--potential-temperature", "1623", "--lid-depth", "30"]) == 0
    assert "--potential-temperature 1349.85" in capsys.readouterr().err
    # issue 20: an excess is a difference (1 K = 1 degree C): no kelvin hint for 200 K
    assert main(["column", "--excess-temperature", "200", "--age", "80"]) == 0
    err = capsys.readouterr().err
    assert "kelvin" not in err
    assert "--potential-temperature" not in err
    # an excess that looks like an absolute Tp is noted as such (the note comes before the
    # error it may explain: Tp 2250 C has no onset within the model's 30 GPa)
    main(["column", "--excess-temperature", "900", "--age", "80"])
    assert "give --potential-temperature 900" in capsys.readouterr().err
