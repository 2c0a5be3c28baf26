"""Property-based fuzzing (hypothesis): workflow files and ``lidmelt column`` arguments, crafted
to be hostile, give lidmelt's own errors (a message, exit 1), argparse's usage error (exit 2) or
a result, never another exception or a traceback.

The quick tests run a few dozen cases; the ``slow`` ones a few hundred. The check is an
identity: the set of outcomes lidmelt documents (DEVELOPERS.md, "User errors raise a subclass of
LidmeltError").
"""

from __future__ import annotations

import json
import math

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import runkit
from lidmelt._errors import LidmeltError
from lidmelt._run_inputs import resolve_target_grid
from lidmelt.cli import main
from lidmelt.physics import get_cooling_model, get_model
from lidmelt.workflow import load_workflow

#: Cases tried, printed at the end of the session (conftest); hypothesis itself fails a test
#: that ran no case (every example filtered out).
CASES = runkit.tally("fuzz", workflow=0, column=0)

# ---- values a hostile user might write -----------------------------------------------------------
NUMBERS = st.one_of(
    st.sampled_from([0, -1, 1, 0.5, 4.9, 1e-9, 3e15, 1e308, -1e308, 2**63 - 1, 10**30]),
    st.floats(allow_nan=True, allow_infinity=True),
    st.integers(min_value=-(2**63), max_value=2**63 - 1),
)
SCALARS = st.one_of(
    NUMBERS,
    st.booleans(),
    st.text(max_size=12),
    st.sampled_from(["", "../../x", "~nouser/x", "a" * 5000, "katz2003", "gdh1", "nan"]),
)
VALUES = st.one_of(SCALARS, st.lists(SCALARS, max_size=4))


def toml_value(value) -> str:
    """``value`` as TOML (floats as TOML writes nan and inf; strings as JSON basic strings)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, str):
        return json.dumps(value)
    return "[" + ", ".join(toml_value(v) for v in value) + "]"


#: Keys of the tiny basin's workflow that the fuzzer sets (table, key).
KEYS = [
    ("run", "name"),
    ("run", "maps"),
    ("run", "netcdf"),
    ("grid", "resolution"),
    ("grid", "extent"),
    ("grid", "crs"),
    ("grid", "like"),
    ("inputs.plate_age", "path"),
    ("inputs.plate_age", "constant"),
    ("inputs.plate_age", "resampling"),
    ("inputs.water", "constant"),
    ("inputs.thermal_anomaly", "constant"),
    ("model", "name"),
    ("model", "ambient_potential_temperature_c"),
    ("model", "min_top_of_melting_km"),
    ("model", "crust_density_kg_m3"),
    ("model.parameters", "max_onset_pressure_gpa"),
    ("model.parameters", "cpx_mass_fraction"),
    ("model.parameters", "solid_density_kg_m3"),
    ("model.parameters", "beta1"),
    ("model.parameters", "unknown_key"),
    ("lithosphere", "cooling"),
    ("lithosphere", "lid_isotherm_c"),
    ("lithosphere.parameters", "mantle_temperature_c"),
    ("compute", "chunk_size"),
    ("compute", "workers"),
    ("compute", "method"),
    ("compute", "max_cells"),
    ("outputs", "variables"),
    ("nonsense", "key"),
]
EDITS = st.lists(st.tuples(st.sampled_from(KEYS), VALUES), min_size=1, max_size=4)


def workflow_text(edits) -> str:
    tables: dict[str, dict[str, str]] = {
        "run": {"name": '"tiny"', "maps": "false", "report": "false"},
        "grid": {"like": '"plate_age"'},
        "inputs.plate_age": {"path": '"age.tif"'},
        "inputs.thermal_anomaly": {},
        "inputs.water": {"constant": "0.0"},
        "compute": {"chunk_size": "64"},
    }
    for (table, key), value in edits:
        tables.setdefault(table, {})[key] = toml_value(value)
    if "extent" in tables["grid"] or "resolution" in tables["grid"]:
        tables["grid"].pop("like", None)
    lines = []
    for table, entries in tables.items():
        lines.append(f"[{table}]")
        lines.extend(f"{k} = {v}" for k, v in entries.items())
    return "\n".join(lines) + "\n"


@pytest.fixture(scope="module")
def fuzz_dir(tmp_path_factory):
    folder = tmp_path_factory.mktemp("fuzz")
    runkit.write_age(folder / "age.tif")
    return folder


def check_workflow(folder, edits) -> None:
    CASES["workflow"] += 1
    path = folder / "w.toml"
    path.write_text(workflow_text(edits), encoding="utf-8")
    message = "no error"
    try:
        cfg = load_workflow(path, output_dir=folder / "out")
        get_model(cfg.model.name, **dict(cfg.model.parameters))
        get_cooling_model(cfg.lithosphere.cooling, **dict(cfg.lithosphere.parameters))
        resolve_target_grid(cfg)
    except LidmeltError as exc:
        message = str(exc)
    assert message  # every error says what was wrong


FUZZ = settings(
    deadline=None, database=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)


@settings(FUZZ, max_examples=40)
@given(edits=EDITS)
def test_fuzzed_workflows_give_only_lidmelt_errors(fuzz_dir, edits):
    check_workflow(fuzz_dir, edits)


@pytest.mark.slow
@settings(FUZZ, max_examples=400)
@given(edits=EDITS)
def test_fuzzed_workflows_many(fuzz_dir, edits):
    check_workflow(fuzz_dir, edits)


# ---- lidmelt column ------------------------------------------------------------------------------
def arg_value(value) -> str:
    return value if isinstance(value, str) else repr(value)


COLUMN_OPTIONS = st.sampled_from(
    [
        "--potential-temperature",
        "--excess-temperature",
        "--ambient",
        "--water",
        "--lid-depth",
        "--age",
        "--cooling",
        "--lid-isotherm",
        "--min-top",
        "--crust-density",
        "--model",
        "--param",
        "--method",
    ]
)
PARAMS = st.sampled_from(
    [
        "max_onset_pressure_gpa",
        "cpx_mass_fraction",
        "beta1",
        "solid_density_kg_m3",
        "nope",
    ]
)


@st.composite
def column_args(draw):
    args = [
        draw(st.sampled_from(["--potential-temperature", "--excess-temperature"])),
        arg_value(draw(NUMBERS)),
        draw(st.sampled_from(["--lid-depth", "--age"])),
        arg_value(draw(NUMBERS)),
    ]
    for _ in range(draw(st.integers(0, 3))):
        option = draw(COLUMN_OPTIONS)
        if option == "--param":
            args += [option, f"{draw(PARAMS)}={arg_value(draw(SCALARS))}"]
        else:
            args += [option, arg_value(draw(SCALARS))]
    if draw(st.booleans()):
        args += ["--profile", draw(st.sampled_from(["p.csv", "FILE/p.csv", "deep/x/p.csv"]))]
    return args


def check_column(folder, args, capsys) -> None:
    CASES["column"] += 1
    args = [
        a.replace("FILE/", f"{folder}/age.tif/").replace("deep/", f"{folder}/deep/")
        if a.endswith(".csv")
        else a
        for a in args
    ]
    args = [f"{folder}/{a}" if a == "p.csv" else a for a in args]
    try:
        code = main(["column", *args, "--json"])
    except SystemExit as exc:  # argparse: a usage error
        code = exc.code
    err = capsys.readouterr().err
    if code == 2:
        assert "usage: lidmelt column" in err
        return
    assert code in (0, 1), (args, err)
    assert "Traceback" not in err
    if code == 1:
        # notes on likely unit mistakes may come first; the error is the last line
        assert err.strip().splitlines()[-1].startswith("lidmelt column: error: "), err


@settings(FUZZ, max_examples=30)
@given(args=column_args())
def test_fuzzed_column_arguments_give_only_lidmelt_errors(fuzz_dir, capsys, args):
    check_column(fuzz_dir, args, capsys)


@pytest.mark.slow
@settings(FUZZ, max_examples=300)
@given(args=column_args())
def test_fuzzed_column_arguments_many(fuzz_dir, capsys, args):
    check_column(fuzz_dir, args, capsys)


# ---- hostile workflow files: deep nesting, huge values ---------------------------------------
BASIN = """[run]
name = "tiny"
maps = false
report = false
[grid]
like = "plate_age"
[inputs.plate_age]
path = "age.tif"
"""
BIG = "a" * 3_000_000  # under the 4 MB a workflow file may have, so it is parsed and checked
HOSTILE = {
    "arrays-100000-deep": (
        "[model.parameters]\nx = " + "[" * 100_000 + "]" * 100_000 + "\n",
        ["nests arrays or inline tables too deeply", "at most 32 levels deep"],
    ),
    "inline-tables-100000-deep": (
        "[model.parameters]\nx = " + "{a = " * 100_000 + "1" + "}" * 100_000 + "\n",
        ["nests arrays or inline tables too deeply"],
    ),
    "tables-20000-deep": (
        "[model.parameters." + ".".join(["a"] * 20_000) + "]\nx = 1\n",
        ["'model.parameters.a.a.a", "is nested 33 or more levels deep (tables within tables, "
         "arrays within arrays); a workflow has at most 32"],
    ),
    "vary-tables-20000-deep": (
        "[ensemble]\nmembers = 4\n[ensemble.vary." + ".".join(["a"] * 20_000) + "]\nx = 1\n",
        ["'ensemble.vary.a.a.a", "is nested 33 or more levels deep"],
    ),
    "integer-of-10000-digits": (
        "[model]\nambient_potential_temperature_c = " + "9" * 10_000 + "\n",
        ["holds a number too long to read (more than 4300 digits)"],
    ),
    "3-MB-model-name": (
        f'[model]\nname = "{BIG}"\n',
        ["'model.name' = 'aaaa", "(3000000 characters) in w.toml is not valid",
         "Unknown melting model", "valid names are 'katz2003', 'mckenzie-bickle1988'"],
    ),
    "3-MB-key": (
        f"[model]\n{BIG} = 1\n", ["unknown key 'model.aaaa", "(3000006 characters)' in "]
    ),
    "3-MB-run-name": (
        f'[run]\nname = "{BIG}"\n',
        ["'run.name' in ", "(3000000 characters); expected a folder-safe name of up to 200"],
    ),
    "3-MB-crs": (
        f'[grid]\nextent = [-30, -21, 4, 10]\nresolution = 0.25\ncrs = "{BIG}"\n',
        ["'grid.crs' in ", "(3000000 characters), which is not a readable CRS"],
    ),
    "3-MB-output-name": (
        f'[outputs]\nvariables = ["{BIG}"]\n',
        ["'outputs.variables' in ", "(3000000 characters), which is not known"],
    ),
    "10-MB-file": ("# " + "a" * 10_000_000 + "\n", ["has 10,000,", "bytes; a workflow file has "
                                                     "at most 4,000,000"]),
}  # fmt: skip


def _hostile_text(extra: str) -> str:
    """The tiny basin with ``extra``; a table it repeats replaces the basin's own."""
    base = BASIN
    for table in ("[run]", "[grid]"):
        if extra.startswith(table):
            start = base.index(table)
            end = base.index("[", start + 1)
            base = base[:start] + base[end:]
    return base + extra


@pytest.mark.parametrize("case", list(HOSTILE))
def test_hostile_workflow_files_give_one_short_message(fuzz_dir, tmp_path, capsys, case):
    extra, parts = HOSTILE[case]
    folder = tmp_path / "in"
    folder.mkdir()
    (folder / "age.tif").write_bytes((fuzz_dir / "age.tif").read_bytes())
    wf = folder / "w.toml"
    wf.write_text(_hostile_text(extra), encoding="utf-8")
    before = runkit.snapshot(tmp_path)
    assert main(["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"]) == 1
    line = runkit.refused(capsys.readouterr().err, "run", *parts)
    assert len(line) < 1000  # never the value whole
    assert runkit.snapshot(tmp_path) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in"]


def test_a_catalogue_row_with_a_huge_name_gives_one_short_message(fuzz_dir, tmp_path, capsys):
    folder = tmp_path / "in"
    folder.mkdir()
    (folder / "age.tif").write_bytes((fuzz_dir / "age.tif").read_bytes())
    (folder / "hs.csv").write_text(f"name,lon,lat,radius_km,peak_excess_k\n{BIG},-25,7,100,50\n")
    wf = folder / "w.toml"
    wf.write_text(BASIN + '[inputs.thermal_anomaly]\nplumes_file = "hs.csv"\n')
    before = runkit.snapshot(tmp_path)
    assert main(["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"]) == 1
    line = runkit.refused(
        capsys.readouterr().err, "run", "'inputs.thermal_anomaly.plumes_file.1.name' in ",
        "(3000000 characters); expected a name of at most 200 characters",
    )  # fmt: skip
    assert len(line) < 1000
    assert runkit.snapshot(tmp_path) == before


@pytest.mark.parametrize("case", [c for c in HOSTILE if c.startswith("3-MB")])
def test_hostile_values_are_short_in_the_python_api_too(fuzz_dir, tmp_path, case):
    # the error load_workflow raises (not only the line the command prints) is short
    (tmp_path / "age.tif").write_bytes((fuzz_dir / "age.tif").read_bytes())
    wf = tmp_path / "w.toml"
    wf.write_text(_hostile_text(HOSTILE[case][0]), encoding="utf-8")
    with pytest.raises(LidmeltError) as refused:
        load_workflow(wf)
    assert len(str(refused.value)) < 1000
    assert "characters" in str(refused.value)  # the value's length is said instead


@pytest.mark.parametrize(
    ("item", "parts"),
    [
        ("model.parameters.x=" + "[" * 50_000 + "]" * 50_000,
         ["--set value '[[[[", "(100000 characters)' cannot be read", "nested too deeply"]),
        ("model.parameters.x=" + "9" * 10_000, ["a number too long"]),
        (".".join(["a"] * 20_000) + "=1", ["is nested 33 or more levels deep"]),
        ("model.name=" + "b" * 100_000,
         ["'model.name' = 'bbbb", "(with --set model.name=bbbb", "(100011 characters))",
          "Unknown melting model"]),
    ],
    ids=["deep-array", "long-integer", "deep-key", "long-value"],
)  # fmt: skip
def test_hostile_set_items_give_one_short_message(fuzz_dir, tmp_path, capsys, item, parts):
    wf = tmp_path / "w.toml"
    wf.write_text(BASIN.replace('"age.tif"', json.dumps(str(fuzz_dir / "age.tif"))))
    assert main(["run", str(wf), "-o", str(tmp_path / "out"), "--quiet", "--set", item]) == 1
    line = runkit.refused(capsys.readouterr().err, "run", *parts)
    assert len(line) < 1000
    assert sorted(p.name for p in tmp_path.iterdir()) == ["w.toml"]
