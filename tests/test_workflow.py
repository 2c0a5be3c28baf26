"""Tests of lidmelt.workflow and lidmelt._config: reading, overriding and validating workflow files.

Check values are the inputs the tests write themselves, the defaults documented in
docs/workflow.md (with the published source of the physical ones), the path rules of
docs/workflow.md, and the standard library (json, pickle, pathlib) as the independent reference.
The grid files the tests create are empty: loading a workflow only checks that they exist.
"""

from __future__ import annotations

import dataclasses
import json
import pickle
import re
from pathlib import Path

import pytest

from lidmelt._config import OUTPUT_VARIABLES, Parameters, RunConfig
from lidmelt._errors import WorkflowError
from lidmelt._variables import INPUTS
from lidmelt.workflow import load_workflow
from lidmelt.workflow._schema import ALL_KEYS, SCHEMA

ROOT = Path(__file__).resolve().parents[1]

# A complete, valid workflow; the error cases edit one piece of it.
BASE = """\
[run]
name = "basin"
[grid]
like = "plate_age"
[inputs.plate_age]
path = "grids/age.tif"
[inputs.thermal_anomaly]
path = "grids/anomaly.nc"
variable = "thermal_anomaly"
constant = 10.0
[[inputs.thermal_anomaly.plumes]]
longitude = -25.0
latitude = -12.0
radius_km = 250.0
peak_excess_k = 250.0
[inputs.water]
constant = 0.01
[model]
ambient_potential_temperature_c = 1350.0
[lithosphere]
cooling = "half-space"
[compute]
chunk_size = 1024
[outputs]
variables = ["melt_thickness_km", "onset_depth_km"]
"""


@pytest.fixture
def basin(tmp_path):
    """A folder ``basin/`` with stand-in grid files (only their format signatures: a TIFF and a
    netCDF header, from the TIFF 6.0 and netCDF classic format specifications); returns a writer
    of ``basin/basin.toml``."""
    folder = tmp_path / "basin"
    (folder / "grids").mkdir(parents=True)
    for name in ("age.tif", "anomaly.nc", "lid.tif", "water.tif"):
        signature = b"CDF\x01" if name.endswith(".nc") else b"II*\x00"
        (folder / "grids" / name).write_bytes(signature)

    def write(text: str = BASE, name: str = "basin.toml") -> Path:
        path = folder / name
        path.write_text(text, encoding="utf-8")
        return path

    return write


def edit(old: str, new: str) -> str:
    """BASE with ``old`` replaced by ``new`` (``old`` must occur in BASE)."""
    assert old in BASE, old  # a test-writing check, not input validation
    return BASE.replace(old, new, 1)


# ---------------------------------------------------------------------------------------------
# The shipped workflows and the documentation


def test_template_loads():
    """workflows/template.toml loads as shipped; its input paths follow the path rule
    (relative to the workflow file's folder, docs/workflow.md)."""
    path = ROOT / "workflows" / "template.toml"
    cfg = load_workflow(path)
    assert cfg.inputs.plate_age.path == (ROOT / "grids_demo" / "plate_age_ma.tif").resolve()
    assert cfg.inputs.plate_age.path_as_written == "../grids_demo/plate_age_ma.tif"
    assert cfg.text == path.read_text(encoding="utf-8")


def _is_table(key: str) -> bool:
    return key in SCHEMA or f"{key}[]" in SCHEMA


def test_template_shows_every_key():
    """Every key of the schema appears in the template: tables as ``[table`` and values as
    ``key =`` (set or commented out)."""
    text = (ROOT / "workflows" / "template.toml").read_text(encoding="utf-8")
    for key in ALL_KEYS:
        if _is_table(key):
            assert f"[{key}" in text, key
        else:
            leaf = key.rsplit(".", 1)[-1]
            assert re.search(rf"^#?\s*{leaf} =", text, re.MULTILINE), key


def test_docs_list_every_key_and_variable():
    """docs/workflow.md documents every key of the schema and every output variable."""
    text = (ROOT / "docs" / "workflow.md").read_text(encoding="utf-8")
    for key in ALL_KEYS:
        if _is_table(key):
            assert f"[{key}" in text, key
        else:
            assert f"`{key.rsplit('.', 1)[-1]}`" in text, key
    for name in OUTPUT_VARIABLES:
        assert f"`{name}`" in text, name


def _readme_plumes() -> list[dict[str, float]]:
    """The plume list of grids_demo/README.md: rows of a Markdown table with a header row that
    names longitude, latitude, radius and peak excess."""
    text = (ROOT / "grids_demo" / "README.md").read_text(encoding="utf-8")
    rows = [line for line in text.splitlines() if line.strip().startswith("|")]
    header = next(r for r in rows if "longitude" in r.lower() and "latitude" in r.lower())
    cols = [c.strip().lower() for c in header.strip().strip("|").split("|")]
    wanted = {
        "longitude": next(i for i, c in enumerate(cols) if "longitude" in c),
        "latitude": next(i for i, c in enumerate(cols) if "latitude" in c),
        "radius_km": next(i for i, c in enumerate(cols) if "radius" in c),
        "peak_excess_k": next(i for i, c in enumerate(cols) if "excess" in c),
    }
    plumes = []
    for row in rows[rows.index(header) + 1 :]:
        cells = [c.strip() for c in row.strip().strip("|").split("|")]
        if set("".join(cells)) <= set("-: "):
            continue  # the separator row
        plumes.append({k: float(cells[i].replace("−", "-")) for k, i in wanted.items()})
    return plumes


def test_demo_loads_and_matches_the_demo_readme(monkeypatch):
    """workflows/demo.toml runs the invented demo basin: its grids are those of grids_demo/,
    its plumes are the list in grids_demo/README.md, and it writes to runs/demo (relative to
    the current working directory, docs/workflow.md)."""
    monkeypatch.chdir(ROOT)
    cfg = load_workflow(ROOT / "workflows" / "demo.toml")
    assert cfg.run.output_dir == ROOT / "runs" / "demo"
    assert cfg.inputs.plate_age.path == (ROOT / "grids_demo" / "plate_age_ma.tif").resolve()
    assert (
        cfg.inputs.thermal_anomaly.path
        == (ROOT / "grids_demo" / "background_anomaly_k.nc").resolve()
    )
    assert "invented" in cfg.text.lower()
    got = [
        {
            "longitude": p.longitude,
            "latitude": p.latitude,
            "radius_km": p.radius_km,
            "peak_excess_k": p.peak_excess_k,
        }
        for p in cfg.inputs.thermal_anomaly.plumes
    ]
    assert got == _readme_plumes()


def test_choices_match_the_stages_that_use_them():
    """The workflow's choices are the ones the grid stage accepts (lidmelt.grids as reference),
    and the model names documented in docs/workflow.md are the physics registries' names."""
    from lidmelt._config import PLUME_SHAPES, RESAMPLING_METHODS
    from lidmelt.grids._align import RESAMPLING_METHODS as ALIGN_RESAMPLING
    from lidmelt.grids._anomaly import PLUME_SHAPES as ANOMALY_SHAPES

    assert set(RESAMPLING_METHODS) == set(ALIGN_RESAMPLING)
    assert set(PLUME_SHAPES) == set(ANOMALY_SHAPES)
    from lidmelt.physics import _cooling as cooling
    from lidmelt.physics import _melting as melting

    text = (ROOT / "docs" / "workflow.md").read_text(encoding="utf-8")
    for name in (*melting.MODELS, *cooling.COOLING_MODELS):
        assert f"`{name}`" in text, name


def test_plume_spec_gives_the_anomaly_builders_plume(basin):
    """PlumeSpec.plume_fields() builds the anomaly builder's Plume with the workflow's values."""
    from lidmelt.grids._anomaly import Plume

    cfg = load_workflow(basin())
    plume = Plume(**cfg.inputs.thermal_anomaly.plumes[0].plume_fields())
    assert (plume.longitude, plume.latitude, plume.radius_km, plume.peak_excess_k) == (
        -25.0,
        -12.0,
        250.0,
        250.0,
    )  # the values written in BASE
    assert plume.shape == "gaussian"


# ---------------------------------------------------------------------------------------------
# Defaults and the configuration object


def test_defaults_are_applied(basin, tmp_path, monkeypatch):
    """A minimal workflow gets the defaults of docs/workflow.md."""
    monkeypatch.chdir(tmp_path)
    path = basin('[grid]\nlike = "plate_age"\n[inputs.plate_age]\npath = "grids/age.tif"\n')
    cfg = load_workflow(path)
    assert cfg.run.name == "basin"  # the file name without .toml (docs/workflow.md)
    assert cfg.run.output_dir == tmp_path / "runs" / "basin"  # runs/<name> under the cwd
    assert (cfg.run.netcdf, cfg.run.maps, cfg.run.report) == (False, True, True)
    assert cfg.grid.like == "plate_age"
    assert cfg.grid.extent is None
    assert cfg.inputs.lid_thickness is None
    assert cfg.inputs.plate_age.resampling == "bilinear"
    assert cfg.inputs.plate_age.constant is None
    # No anomaly and a dry source unless given (docs/workflow.md).
    assert cfg.inputs.thermal_anomaly.constant == 0.0
    assert cfg.inputs.thermal_anomaly.path is None
    assert cfg.inputs.thermal_anomaly.plumes == ()
    assert cfg.inputs.water.constant == 0.0
    assert cfg.model.name == "katz2003"
    # Ambient Tp 1350 C: the present MORB source of Herzberg, Condie & Korenaga (2010).
    assert cfg.model.ambient_potential_temperature_c == 1350.0
    # Top of melting 7 km, the base of normal oceanic crust (7.1 +- 0.8 km, White, McKenzie &
    # O'Nions 1992; from memory).
    assert cfg.model.min_top_of_melting_km == 7.0
    assert cfg.model.parameters == {}
    assert cfg.lithosphere.cooling == "half-space"
    assert cfg.lithosphere.lid_isotherm_c == 1100.0  # docs/workflow.md default
    assert cfg.lithosphere.parameters == {}
    assert (cfg.compute.chunk_size, cfg.compute.workers, cfg.compute.method) == (
        1024,
        2,
        "table",
    )
    assert cfg.outputs.variables == (
        "melt_thickness_km",
        "onset_depth_km",
        "onset_pressure_gpa",
        "melting_top_km",
        "max_melt_fraction",
        "mean_melt_pressure_gpa",
        "excess_to_melt_k",
        "anomaly_melt_thickness_km",
        "melting_regime",
        "deep_melt_share",
    )  # the ten default variables of docs/workflow.md, in that order (crustal thickness only
    # when listed, melt production only with an upwelling input: lidmelt._variables)
    assert cfg.overrides == ()


def test_full_workflow_values(basin):
    """Values written in the file come through with their types (integers as floats where the
    key is a number in a unit)."""
    cfg = load_workflow(
        basin(
            edit(
                "ambient_potential_temperature_c = 1350.0", "ambient_potential_temperature_c = 1400"
            )
        )
    )
    assert cfg.model.ambient_potential_temperature_c == 1400.0
    assert isinstance(cfg.model.ambient_potential_temperature_c, float)
    anomaly = cfg.inputs.thermal_anomaly
    assert anomaly.constant == 10.0
    assert anomaly.variable == "thermal_anomaly"
    assert len(anomaly.plumes) == 1
    plume = anomaly.plumes[0]
    assert (plume.longitude, plume.latitude, plume.radius_km, plume.peak_excess_k) == (
        -25.0,
        -12.0,
        250.0,
        250.0,
    )
    assert plume.shape == "gaussian"  # the default shape
    assert cfg.inputs.water.constant == 0.01
    assert cfg.inputs.water.units == "wt%"
    assert cfg.outputs.variables == ("melt_thickness_km", "onset_depth_km")
    assert set(cfg.inputs.given()) == {"plate_age", "thermal_anomaly", "water"}
    assert cfg.inputs["plate_age"] is cfg.inputs.plate_age


def test_extent_grid(basin):
    """A grid by extent and resolution, default CRS EPSG:4326 (docs/workflow.md), and a
    projected CRS with an extent in metres."""
    text = edit('like = "plate_age"', "extent = [-40, -10.0, -25.0, 5.0]\nresolution = 0.5")
    cfg = load_workflow(basin(text))
    assert cfg.grid.extent == (-40.0, -10.0, -25.0, 5.0)
    assert cfg.grid.resolution == 0.5
    assert cfg.grid.crs == "EPSG:4326"
    assert cfg.grid.like is None
    polar = 'extent = [-1.0e6, 1.0e6, -2.0e6, 0.0]\nresolution = 10000.0\ncrs = "EPSG:3031"'
    cfg = load_workflow(basin(edit('like = "plate_age"', polar)))
    assert cfg.grid.crs == "EPSG:3031"
    assert cfg.grid.extent == (-1.0e6, 1.0e6, -2.0e6, 0.0)


def test_to_dict_is_json_and_complete(basin):
    """to_dict() survives a JSON round trip (json module as reference) and keeps the paths,
    the workflow text and the overrides."""
    path = basin()
    cfg = load_workflow(path, overrides=["inputs.water.constant=0.02"])
    d = cfg.to_dict()
    assert json.loads(json.dumps(d)) == d
    assert d["workflow_path"] == str(path.resolve())
    assert d["text"] == BASE
    assert d["overrides"] == ["inputs.water.constant=0.02"]
    assert d["inputs"]["plate_age"]["path"] == str((path.parent / "grids/age.tif").resolve())
    assert d["inputs"]["water"]["constant"] == 0.02
    assert d["inputs"]["thermal_anomaly"]["plumes"][0]["radius_km"] == 250.0
    assert d["model"]["parameters"] == {}


def test_config_is_frozen_hashable_and_picklable(basin):
    """RunConfig is immutable (dataclasses.FrozenInstanceError), hashable, and survives pickle
    (so it can travel to dask workers)."""
    cfg = load_workflow(basin(), overrides=["model.parameters.cpx_mass_fraction=0.15"])
    with pytest.raises(dataclasses.FrozenInstanceError):
        cfg.model.name = "other"  # type: ignore[misc]
    with pytest.raises(TypeError):
        cfg.model.parameters["cpx_mass_fraction"] = 0.2  # type: ignore[index]
    assert isinstance(hash(cfg), int)
    again = pickle.loads(pickle.dumps(cfg))
    assert again == cfg
    assert again.model.parameters == {"cpx_mass_fraction": 0.15}
    assert isinstance(cfg, RunConfig)


def test_parameters_mapping():
    """Parameters behaves as a read-only dict (dict as reference)."""
    p = Parameters({"b": 2.0, "a": 1})
    assert dict(p) == {"a": 1, "b": 2.0}
    assert p["a"] == 1
    assert len(p) == 2
    assert p == {"b": 2.0, "a": 1}
    assert hash(p) == hash(Parameters({"a": 1, "b": 2.0}))
    with pytest.raises(KeyError):
        p["c"]


# ---------------------------------------------------------------------------------------------
# Paths


def test_paths_relative_to_workflow_file_and_cwd(tmp_path, monkeypatch):
    """Input paths resolve against the workflow file's folder; output_dir against the current
    working directory (docs/workflow.md); -o overrides output_dir."""
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "age.tif").touch()
    (tmp_path / "flows").mkdir()
    (tmp_path / "elsewhere").mkdir()
    wf = tmp_path / "flows" / "north.toml"
    wf.write_text(
        '[run]\noutput_dir = "out/north"\n[grid]\nlike = "plate_age"\n'
        '[inputs.plate_age]\npath = "../data/age.tif"\n',
        encoding="utf-8",
    )
    monkeypatch.chdir(tmp_path / "elsewhere")
    cfg = load_workflow(Path("..") / "flows" / "north.toml")
    assert cfg.workflow_path == wf.resolve()
    assert cfg.inputs.plate_age.path == (tmp_path / "data" / "age.tif").resolve()
    assert cfg.inputs.plate_age.path.is_absolute()
    assert cfg.inputs.plate_age.path_as_written == "../data/age.tif"
    assert cfg.run.output_dir == (tmp_path / "elsewhere" / "out" / "north").resolve()
    cfg = load_workflow(wf, output_dir="o")
    assert cfg.run.output_dir == (tmp_path / "elsewhere" / "o").resolve()
    absolute = tmp_path / "abs_out"
    cfg = load_workflow(wf, overrides=[f'run.output_dir="{absolute.as_posix()}"'])
    assert cfg.run.output_dir == absolute.resolve()


def test_absolute_and_home_paths(tmp_path, monkeypatch):
    """An absolute input path is used as it is; ``~`` expands to the home folder
    (pathlib.Path.expanduser as reference)."""
    (tmp_path / "home").mkdir()
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    (tmp_path / "home" / "age.tif").touch()
    wf = tmp_path / "w.toml"
    wf.write_text(
        '[grid]\nlike = "plate_age"\n[inputs.plate_age]\npath = "~/age.tif"\n'
        f'[inputs.water]\npath = "{(tmp_path / "home" / "age.tif").as_posix()}"\n',
        encoding="utf-8",
    )
    cfg = load_workflow(wf)
    assert cfg.inputs.plate_age.path == (Path("~/age.tif").expanduser()).resolve()
    assert cfg.inputs.water.path == (tmp_path / "home" / "age.tif").resolve()


@pytest.mark.parametrize("var", list(INPUTS.values()), ids=lambda v: v.workflow_key)
def test_constant_ranges_are_the_registry_ranges(basin, var):
    """inputs.<name>.constant accepts values up to the upper bound of the variable registry's
    valid_range (lidmelt._variables) and refuses a value above it with the registry's advice:
    one limit for each input, the one the engine applies to grid values too."""
    low, high = var.valid_range
    path = basin(
        "[grid]\nextent = [0.0, 1.0, 0.0, 1.0]\nresolution = 0.5\n"
        "[inputs.lid_thickness]\nconstant = 50.0\n"
    )
    key = f"inputs.{var.workflow_key}.constant"
    cfg = load_workflow(path, overrides=[f"{key}={high!r}"])
    assert cfg.inputs[var.workflow_key].constant == high
    match = (
        rf"'{re.escape(key)}'.* outside the accepted range {low:g} to {high:g} "
        rf"{re.escape(var.units)}; expected {re.escape(var.advice)}"
    )
    with pytest.raises(WorkflowError, match=match):
        load_workflow(path, overrides=[f"{key}={high + 1.0!r}"])


def test_lid_thickness_limit_is_the_documented_one():
    """The lid thickness limit is 0-400 km (docs/workflow.md, "Accepted ranges of constant")."""
    assert INPUTS["lid_thickness_km"].valid_range == (0.0, 400.0)


# ---------------------------------------------------------------------------------------------
# --set overrides


def test_set_overrides_types_and_nested_keys(tmp_path, basin):
    """VALUE is read as TOML (tomllib) and falls back to a string; missing tables are created;
    array items are counted from 1; the file text is kept as written."""
    path = basin(BASE.replace("[inputs.water]\nconstant = 0.01\n", ""))
    cfg = load_workflow(
        path,
        overrides=[
            "model.ambient_potential_temperature_c=1400",  # TOML integer -> float in C
            "inputs.water.constant=0.01",  # creates [inputs.water]
            "model.parameters.cpx_mass_fraction=0.15",  # creates [model.parameters]
            "lithosphere.cooling=gdh1",  # not TOML: a plain string
            'compute.method="direct"',  # a TOML string
            "run.netcdf=true",  # a TOML boolean
            "compute.workers = 1",  # spaces around '=' are allowed
            'outputs.variables=["melting_top_km"]',  # a TOML array
            "inputs.thermal_anomaly.plumes.1.peak_excess_k=300",  # plume 1
            "run.name=first",
            "run.name=second",  # a later item wins
        ],
    )
    assert cfg.model.ambient_potential_temperature_c == 1400.0
    assert cfg.inputs.water.constant == 0.01
    assert cfg.model.parameters == {"cpx_mass_fraction": 0.15}
    assert cfg.lithosphere.cooling == "gdh1"
    assert cfg.compute.method == "direct"
    assert cfg.run.netcdf is True
    assert cfg.compute.workers == 1
    assert cfg.outputs.variables == ("melting_top_km",)
    assert cfg.inputs.thermal_anomaly.plumes[0].peak_excess_k == 300.0
    assert cfg.run.name == "second"
    assert len(cfg.overrides) == 11
    assert cfg.text == path.read_text(encoding="utf-8")


def test_set_inline_table_plumes(basin):
    """A whole plume array can be given as TOML inline tables."""
    item = (
        "inputs.thermal_anomaly.plumes=[{longitude=10.0, latitude=5.0, radius_km=200.0, "
        'peak_excess_k=150.0, shape="top-hat"}, {longitude=12.0, latitude=6.0, radius_km=100.0, '
        "peak_excess_k=100.0}]"
    )
    cfg = load_workflow(basin(), overrides=[item])
    plumes = cfg.inputs.thermal_anomaly.plumes
    assert [(p.longitude, p.shape) for p in plumes] == [(10.0, "top-hat"), (12.0, "gaussian")]


@pytest.mark.parametrize(
    ("item", "match"),
    [
        # Validated exactly like the file, and the message names the --set item.
        (
            "model.ambiant_potential_temperature_c=1400",
            r"unknown key 'model\.ambiant_potential_temperature_c' in .*basin\.toml \(from --set "
            r"model\.ambiant_potential_temperature_c=1400\); did you mean "
            r"'model\.ambient_potential_temperature_c'\?",
        ),
        ("compute.workers=two", r"'compute\.workers'.*from --set compute\.workers=two.*whole"),
        ("model.ambient_potential_temperature_c=3000", r"outside the accepted range 1000 to 2000"),
        ("no_equals_sign", r"is not KEY=VALUE"),
        ("=5", r"is not KEY=VALUE"),
        ("model..name=x", r"is not KEY=VALUE"),
        ("inputs.thermal_anomaly.plumes.2.radius_km=100", r"item number from 1 to 1"),
        ("inputs.thermal_anomaly.plumes.0.radius_km=100", r"item number from 1 to 1"),
        ("inputs.plate_age.path.x=1", r"'inputs\.plate_age\.path' .* is a value"),
        ("inputs.plate_age.path=missing.tif", r"written 'missing\.tif', resolved to"),
    ],
)
def test_set_errors(basin, item, match):
    with pytest.raises(WorkflowError, match=match):
        load_workflow(basin(), overrides=[item])


# ---------------------------------------------------------------------------------------------
# Errors in the file


ERROR_CASES = [
    # (description, old, new, match)
    (
        "unknown key with suggestion",
        "ambient_potential_temperature_c = 1350.0",
        "ambiant_potential_temperature_c = 1350.0",
        r"^unknown key 'model\.ambiant_potential_temperature_c' in .*basin\.toml; did you mean "
        r"'model\.ambient_potential_temperature_c'\?$",
    ),
    ("unknown table", "[compute]", "[compte]", r"unknown key 'compte'.*did you mean 'compute'"),
    (
        "key in the wrong table",
        "[model]\n",
        '[model]\ncooling = "gdh1"\n',
        r"unknown key 'model\.cooling'.*did you mean 'lithosphere\.cooling'",
    ),
    (
        "unknown plume key",
        "radius_km = 250.0",
        "radius = 250.0",
        r"unknown key 'inputs\.thermal_anomaly\.plumes\.1\.radius'.*did you mean "
        r"'inputs\.thermal_anomaly\.plumes\.1\.radius_km'",
    ),
    (
        "unknown input",
        "[inputs.water]",
        "[inputs.waters]",
        r"unknown key 'inputs\.waters'.*did you mean 'inputs\.water'",
    ),
    ("TOML syntax error with line", 'name = "basin"', "name = basin", r"not valid TOML.*line 2"),
    (
        "string for a number",
        "ambient_potential_temperature_c = 1350.0",
        'ambient_potential_temperature_c = "1350"',
        r"'model\.ambient_potential_temperature_c'.*is '1350' \(a string\); expected a number "
        r"in °C",
    ),
    ("boolean as a string", 'name = "basin"', 'name = "basin"\nnetcdf = "yes"', r"true or false"),
    ("boolean for a number", "chunk_size = 1024", "chunk_size = true", r"whole number"),
    ("decimal chunk size", "chunk_size = 1024", "chunk_size = 1024.5", r"whole number"),
    ("NaN", "constant = 10.0", "constant = nan", r"finite number"),
    (
        "table expected",
        '[run]\nname = "basin"\n',
        "run = 5\n",
        r"'run' in .*basin\.toml is 5 \(a whole number\); expected a table",
    ),
    (
        "no plate age nor lid",
        '[inputs.plate_age]\npath = "grids/age.tif"\n',
        "",
        r"neither 'plate_age' nor 'lid_thickness'",
    ),
    ("no grid", '[grid]\nlike = "plate_age"\n', "", r"'grid' .* a run needs a target grid"),
    (
        "like names an input without a path",
        'like = "plate_age"',
        'like = "water"',
        r"'grid\.like'.*'water', which is not an input with a grid file.*'plate_age'",
    ),
    ("like names no input", 'like = "plate_age"', 'like = "age"', r"not an input with a grid"),
    (
        "both like and extent",
        'like = "plate_age"',
        'like = "plate_age"\nextent = [0.0, 1.0, 0.0, 1.0]',
        r"both 'like' and extent; expected EITHER",
    ),
    ("extent without resolution", 'like = "plate_age"', "extent = [0, 1, 0, 1]", "lacks 'resol"),
    (
        "extent west > east",
        'like = "plate_age"',
        "extent = [10.0, 0.0, 0.0, 1.0]\nresolution = 0.1",
        r"west < east",
    ),
    (
        "extent of 3 numbers",
        'like = "plate_age"',
        "extent = [0.0, 1.0, 0.0]\nresolution = 0.1",
        r"array of 4 numbers",
    ),
    (
        "latitude beyond 90 in EPSG:4326",
        'like = "plate_age"',
        "extent = [0.0, 10.0, 80.0, 95.0]\nresolution = 0.1",
        r"latitudes must lie in -90 to 90",
    ),
    (
        "resolution larger than extent",
        'like = "plate_age"',
        "extent = [0.0, 1.0, 0.0, 1.0]\nresolution = 2.0",
        r"no larger than the extent",
    ),
    (
        "unreadable CRS",
        'like = "plate_age"',
        'extent = [0.0, 1.0, 0.0, 1.0]\nresolution = 0.1\ncrs = "EPSG:99999999"',
        r"'grid\.crs'.*not a readable CRS",
    ),
    (
        "input file missing",
        'path = "grids/age.tif"',
        'path = "grids/nope.tif"',
        r"'inputs\.plate_age\.path'.*does not exist: written 'grids/nope\.tif', resolved to "
        r"'.*basin/grids/nope\.tif'",
    ),
    ("input path is a folder", 'path = "grids/age.tif"', 'path = "grids"', r"is a folder"),
    (
        "unknown resampling",
        'path = "grids/age.tif"',
        'path = "grids/age.tif"\nresampling = "bilinar"',
        r"'bilinar', which is not known; expected one of 'bilinear', 'nearest', 'cubic', "
        r"'average'\. Did you mean 'bilinear'\?",
    ),
    ("unknown method", "chunk_size = 1024", 'method = "fast"', r"'fast'.*'table', 'direct'"),
    (
        "ambient Tp too low",
        "ambient_potential_temperature_c = 1350.0",
        "ambient_potential_temperature_c = 900.0",
        r"is 900 °C, outside the accepted range 1000 to 2000 °C",
    ),
    (
        "ambient Tp too high",
        "ambient_potential_temperature_c = 1350.0",
        "ambient_potential_temperature_c = 2100.0",
        r"outside the accepted range 1000 to 2000",
    ),
    (
        "negative top of melting",
        "[model]\n",
        "[model]\nmin_top_of_melting_km = -1.0\n",
        r"'model\.min_top_of_melting_km'.*-1 km; expected a depth >= 0 km",
    ),
    (
        "chunk size < 64",
        "chunk_size = 1024",
        "chunk_size = 32",
        r"is 32 cells; expected at least 64",
    ),
    ("workers < 1", "chunk_size = 1024", "workers = 0", r"'compute\.workers'.*expected at least 1"),
    ("plume radius 0", "radius_km = 250.0", "radius_km = 0.0", r"expected a radius > 0 km"),
    (
        # lidmelt.grids._anomaly.Plume requires |peak_excess_k| < 1000 K.
        "plume excess of 1000 K",
        "peak_excess_k = 250.0",
        "peak_excess_k = 1000.0",
        r"'inputs\.thermal_anomaly\.plumes\.1'.*not valid.*too large",
    ),
    (
        # 1.0 / 0.3 = 3.33 cells (arithmetic); lidmelt.grids._grid.Grid needs whole cells.
        "extent not a whole number of cells",
        'like = "plate_age"',
        "extent = [0.0, 1.0, 0.0, 1.0]\nresolution = 0.3",
        r"'grid\.extent'.*does not make a grid.*not a whole number of cells",
    ),
    (
        "plume latitude beyond 90",
        "latitude = -12.0",
        "latitude = -95.0",
        r"'inputs\.thermal_anomaly\.plumes\.1\.latitude'.*-95 degrees, outside .* -90 to 90",
    ),
    (
        "plume shape",
        "peak_excess_k = 250.0",
        'peak_excess_k = 250.0\nshape = "square"',
        r"'square', which is not known; expected one of 'gaussian', 'cosine', 'top-hat'",
    ),
    ("plume field missing", "peak_excess_k = 250.0\n", "", r"lacks 'peak_excess_k'"),
    (
        "plumes as a table",
        "[[inputs.thermal_anomaly.plumes]]",
        "[inputs.thermal_anomaly.plumes]",
        r"expected an array of tables",
    ),
    (
        "unknown output variable",
        '"onset_depth_km"]',
        '"onset_depth"]',
        r"'outputs\.variables'.*'onset_depth', which is not known.*Did you mean 'onset_depth_km'",
    ),
    ("output listed twice", '"onset_depth_km"]', '"melt_thickness_km"]', r"twice"),
    ("no output", '["melt_thickness_km", "onset_depth_km"]', "[]", r"non-empty array"),
    (
        "path and constant",
        'path = "grids/age.tif"',
        'path = "grids/age.tif"\nconstant = 50.0',
        r"both 'path' and 'constant'",
    ),
    (
        "variable for a GeoTIFF",
        'path = "grids/age.tif"',
        'path = "grids/age.tif"\nvariable = "age"',
        r"is a GeoTIFF.*NetCDF files only",
    ),
    (
        "water in ppm",
        "constant = 0.01",
        "constant = 100.0",
        r"'inputs\.water\.constant'.*100 wt%.*ppm: divide by 10000",
    ),
    (
        "plate age in years",
        'path = "grids/age.tif"',
        "constant = 5.0e7",
        r"'inputs\.plate_age\.constant'.*Ma.*years: divide by 1e6",
    ),
    (
        "empty input table",
        "[inputs.water]\nconstant = 0.01\n",
        "[inputs.water]\n",
        r"neither 'path'",
    ),
    ("run name with a slash", 'name = "basin"', 'name = "a/b"', r"folder-safe name"),
]


@pytest.mark.parametrize(
    ("old", "new", "match"), [c[1:] for c in ERROR_CASES], ids=[c[0] for c in ERROR_CASES]
)
def test_workflow_errors(basin, old, new, match):
    with pytest.raises(WorkflowError, match=match):
        load_workflow(basin(edit(old, new)))


def test_missing_workflow_file(tmp_path):
    with pytest.raises(WorkflowError, match=r"workflow file '.*nope\.toml' does not exist"):
        load_workflow(tmp_path / "nope.toml")


def test_output_dir_is_a_file(basin, tmp_path):
    (tmp_path / "taken").write_text("x", encoding="utf-8")
    with pytest.raises(WorkflowError, match=r"is an existing file, not a folder"):
        load_workflow(basin(), output_dir=tmp_path / "taken")


def test_not_utf8(basin):
    path = basin()
    path.write_bytes(b'[run]\nname = "\xff"\n')
    with pytest.raises(WorkflowError, match=r"cannot be read as UTF-8"):
        load_workflow(path)


# ---------------------------------------------------------------------------------------------
# Model names and parameters (checked by lidmelt.physics through validate_models)


@pytest.mark.parametrize(
    ("item", "match"),
    [
        # The suggestions come from lidmelt.physics (get_model / get_cooling_model).
        (
            "model.name=katz",
            r"'model\.name' = 'katz' in basin\.toml \(with --set .*Did you mean 'katz2003'",
        ),
        (
            "model.parameters.cpx_mass_fractio=0.15",
            r"'model\.parameters'.*not valid.*Did you mean 'cpx_mass_fraction'",
        ),
        ("lithosphere.cooling=gdh", r"'lithosphere\.cooling' = 'gdh'.*Did you mean 'gdh1'"),
        (
            "lithosphere.parameters.plate_thickness=100.0",
            r"'lithosphere\.parameters'.*Did you mean 'plate_thickness_km'",
        ),
        # The half-space default mantle temperature is 1300 C (Turcotte & Schubert,
        # Geodynamics, textbook constants; from memory), so the 1350 C isotherm lies in the
        # mantle.
        ("lithosphere.lid_isotherm_c=1350", r"'lithosphere\.lid_isotherm_c' = 1350\.0.*1300"),
    ],
)
def test_model_errors(basin, item, match):
    with pytest.raises(WorkflowError, match=match):
        load_workflow(basin(), overrides=[item])


def test_model_errors_in_file(basin):
    """A bad model name written in the file (not by --set) is reported without a --set note."""
    with pytest.raises(WorkflowError, match=r"^'model\.name' = 'katz2030' in basin\.toml is not"):
        load_workflow(basin(edit("[model]\n", '[model]\nname = "katz2030"\n')))


def test_valid_model_overrides_pass(basin):
    """Valid names and parameters pass: the GDH1 mantle is at 1450 C (Stein & Stein 1992), so a
    1350 C lid isotherm is allowed there; 0.15 is a valid cpx mass fraction (Katz et al. 2003,
    Table 2, use 0.17 for fertile lherzolite; from memory)."""
    cfg = load_workflow(
        basin(),
        overrides=[
            "model.name=mckenzie-bickle1988",
            "lithosphere.cooling=gdh1",
            "lithosphere.lid_isotherm_c=1350",
            "lithosphere.parameters.plate_thickness_km=100.0",
        ],
    )
    assert cfg.lithosphere.parameters == {"plate_thickness_km": 100.0}
    cfg = load_workflow(basin(), overrides=["model.parameters.cpx_mass_fraction=0.15"])
    assert cfg.model.parameters == {"cpx_mass_fraction": 0.15}


# ---- [ensemble] and compute.scheduler (issue 12) ------------------------------------------------
ENSEMBLE = """
[ensemble]
members = 6
seed = 4
[ensemble.vary]
"model.ambient_potential_temperature_c" = { normal = [1350.0, 20.0] }
inputs.thermal_anomaly.plumes.1.peak_excess_k = { uniform = [200.0, 300.0] }
"inputs.thermal_anomaly.scale" = { uniform = [0.8, 1.2] }
"lithosphere.cooling" = { choice = ["half-space", "gdh1"], weights = [3, 1] }
"""


def test_ensemble_table_draws_validated_members(basin):
    cfg = load_workflow(basin(BASE + ENSEMBLE))
    ens = cfg.ensemble
    assert ens.members == 6
    assert ens.sampling == "latin_hypercube"  # the default
    assert ens.percentiles == (10.0, 50.0, 90.0)  # the default of issue 12
    keys = [s.key for s in ens.vary]  # quoted and dotted (nested-table) keys alike
    assert keys[1] == "inputs.thermal_anomaly.plumes.1.peak_excess_k"
    assert len(ens.configs) == 6
    for row, member in zip(ens.samples, ens.configs, strict=True):
        assert member.model.ambient_potential_temperature_c == row[0]
        assert member.inputs.thermal_anomaly.plumes[0].peak_excess_k == row[1]
        assert member.inputs.thermal_anomaly.scale == row[2]  # issue 13's key, reused
        assert member.lithosphere.cooling == row[3]
    assert "configs" not in cfg.to_dict()["ensemble"]
    again = load_workflow(basin(BASE + ENSEMBLE))
    assert again.ensemble.samples == ens.samples  # deterministic for a seed


def test_ensemble_keys_take_set_overrides(basin):
    cfg = load_workflow(
        basin(BASE + ENSEMBLE), overrides=["ensemble.members=3", 'ensemble.sampling="random"']
    )
    assert cfg.ensemble.members == 3
    assert cfg.ensemble.sampling == "random"


def test_compute_scheduler_key(basin):
    cfg = load_workflow(basin(BASE), overrides=['compute.scheduler="tcp://127.0.0.1:8786"'])
    assert cfg.compute.scheduler == "tcp://127.0.0.1:8786"
    assert load_workflow(basin(BASE)).compute.scheduler is None
