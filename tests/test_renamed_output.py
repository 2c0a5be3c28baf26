"""The output once named ``lid_depth_km`` is ``melting_top_km`` (it holds the top of the melting
column, not the lid): a workflow, an option or a run folder that uses the old name is refused
with a message naming the new one, and a run folder of an earlier lidmelt is refused by every
product with "run 'lidmelt run' again" (lidmelt._variables.legacy_message, the one text)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from affine import Affine

from lidmelt._errors import InputError, RunDirError, WorkflowError
from lidmelt._variables import OUTPUTS, get_variable
from lidmelt.cli import main
from lidmelt.grids._rundir import open_run
from lidmelt.workflow import load_workflow

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "grids_demo"
#: A 40 x 40 half-degree grid over the invented demo basin (-45 to -25 E, -10 to 10 N).
T = Affine(0.5, 0.0, -45.0, 0.0, -0.5, 10.0)
#: What every refusal of the old name says: the old and the new name.
NAMED = r"'lid_depth_km'.*'melting_top_km'"


def test_the_registry_names_the_top_of_melting_and_no_longer_the_old_name():
    assert "melting_top_km" in OUTPUTS
    assert "lid_depth_km" not in OUTPUTS
    assert OUTPUTS["melting_top_km"].long_name.startswith("top of the melting column")
    with pytest.raises(InputError, match=NAMED):
        get_variable("lid_depth_km")
    # an ensemble percentile of the old name says its new name too
    with pytest.raises(InputError, match=r"'lid_depth_km_p90'.*'melting_top_km_p90'"):
        get_variable("lid_depth_km_p90")
    # an input that is a lid thickness keeps its name and is not refused
    assert get_variable("lid_thickness_km").kind == "input"


def test_a_workflow_listing_the_old_name_is_refused_naming_the_new_one(tmp_path):
    text = (ROOT / "workflows" / "demo.toml").read_text(encoding="utf-8")
    path = ROOT / "workflows" / "demo.toml"
    assert "lid_depth_km" not in text
    with pytest.raises(WorkflowError, match=r"'outputs\.variables'.*lists 'lid_depth_km'.*"
                       r"now 'melting_top_km'"):  # fmt: skip
        load_workflow(path, overrides=['outputs.variables=["melt_thickness_km","lid_depth_km"]'])
    cfg = load_workflow(path, overrides=['outputs.variables=["melting_top_km"]'])
    assert cfg.outputs.variables == ("melting_top_km",)


@pytest.fixture
def old_run(make_run_dir):
    """A run folder as an earlier lidmelt wrote it: lid_depth_km.tif, listed in its summary."""
    melt = np.full((40, 40), 2.0)
    return make_run_dir({"melt_thickness_km": melt, "lid_depth_km": np.full((40, 40), 30.0)},
                        transform=T, name="old")  # fmt: skip


def test_a_run_folder_of_an_earlier_lidmelt_is_refused_when_opened(old_run):
    with pytest.raises(RunDirError, match=r"made by an earlier lidmelt.*" + NAMED):
        open_run(old_run)
    with pytest.raises(RunDirError, match=r"run 'lidmelt run' again"):
        open_run(old_run)


@pytest.mark.parametrize(
    "command",
    [
        ["sample", "{run}", str(DEMO / "stations.csv"), "-o", "{out}/s.csv"],
        ["profile", "{run}", str(DEMO / "track.csv"), "--spacing", "50", "-o", "{out}/p.csv"],
        ["regions", "{run}", str(DEMO / "boxes.geojson"), "-o", "{out}/r.csv"],
        ["screen", "{run}", "--min-melt-thickness", "1", "-o", "{out}/c.gpkg"],
        ["map", "{run}", "-o", "{out}/maps"],
        ["report", "{run}", "-o", "{out}/report.html"],
        ["assess", "{run}", str(DEMO / "known_seamounts.csv")],
    ],
    ids=lambda c: c[0],
)
def test_every_product_refuses_a_run_of_an_earlier_lidmelt(old_run, tmp_path, capsys, command):
    args = [a.format(run=old_run, out=tmp_path) for a in command]
    assert main(args) == 1
    err = capsys.readouterr().err
    assert "earlier lidmelt" in err
    assert "'melting_top_km'" in err
    assert "run 'lidmelt run' again" in err
    assert not any(p.name not in ("old",) for p in tmp_path.iterdir())  # nothing written


def test_a_map_of_the_old_name_on_a_new_run_names_the_new_one(make_run_dir, tmp_path, capsys):
    run = make_run_dir({"melt_thickness_km": np.full((40, 40), 2.0),
                        "melting_top_km": np.full((40, 40), 30.0)}, transform=T)  # fmt: skip
    assert open_run(run).outputs == ["melt_thickness_km", "melting_top_km"]
    out = tmp_path / "maps"
    assert main(["map", str(run), "--variable", "lid_depth_km", "-o", str(out)]) == 1
    assert "it is now 'melting_top_km'" in capsys.readouterr().err
    assert not out.exists()
