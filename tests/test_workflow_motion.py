"""The [motion] table of a workflow: read, defaults, --set, provenance.

Check values: the keys and defaults of docs/workflow.md ([motion]) and the rows of the demo's
rotations file as written (grids_demo/demo_rotations.csv, invented: its values are read back,
never used as physics).
"""

from __future__ import annotations

import json
from pathlib import Path

from lidmelt._run_inputs import files_read
from lidmelt.workflow import load_workflow

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "workflows" / "demo_tracks.toml"


def test_demo_tracks_workflow_reads_its_motion():
    cfg = load_workflow(DEMO)
    m = cfg.motion
    assert m.max_age_ma == 40.0
    assert m.step_ma == 1.0
    assert m.duration_min_melt_km == 1.0
    assert m.rotations_file == ROOT / "grids_demo" / "demo_rotations.csv"
    rows = [
        line.split(",")
        for line in m.rotations_file.read_text(encoding="utf-8").splitlines()
        if line and not line.startswith(("#", "age_ma"))
    ]
    assert m.rotations == tuple(tuple(float(v) for v in row) for row in rows)
    assert m.rotations_file in files_read(cfg)  # a run never replaces a folder holding it
    record = json.loads(json.dumps(cfg.to_dict()))
    assert record["motion"]["max_age_ma"] == 40.0


def test_motion_keys_take_set_and_defaults():
    cfg = load_workflow(DEMO, overrides=["motion.step_ma=0.5", "motion.max_age_ma=20"])
    assert (cfg.motion.step_ma, cfg.motion.max_age_ma) == (0.5, 20.0)
    plain = load_workflow(ROOT / "workflows" / "demo.toml")
    assert plain.motion is None
