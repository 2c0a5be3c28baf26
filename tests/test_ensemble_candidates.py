"""What drives each candidate: the deterministic run's candidates tracked over the members.

Check values and their sources:

- Spearman's rho of two variables where one is a strictly increasing function of the other is
  exactly 1 (Spearman 1904: the ranks are equal); a candidate's melt volume grows with its own
  plume's peak excess (a hotter plume melts more under the same lid: PHYSICS.md, melting grows
  with potential temperature).
- A cosine plume adds nothing beyond its radius (lidmelt.grids._anomaly, ``"cosine"``): a
  candidate of the other plume, 400 km away, has the same volume in every member, so its
  rank correlation and variance fraction are None (lidmelt.ensemble._drivers: None when the
  volume is constant), and that volume is the deterministic one up to the rounding of each
  cell's term to 2^-20 km3 (lidmelt.ensemble._kernel: at most 2^-21 per cell).
- The candidates, their order and plumes are those of ``lidmelt screen --min-melt-thickness
  T`` on the same run (the documented rule: docs/workflow.md, [ensemble]).
- Same workflow and seed, same outputs whatever the chunking and workers (issue 12).
"""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import pytest

from lidmelt._engine import run_basin
from lidmelt._errors import WorkflowError
from lidmelt.ensemble import ensemble_stages
from lidmelt.products._report._write import write_report
from lidmelt.products._screening import ensemble_candidates, screen
from lidmelt.workflow import load_workflow

TWO_PLUMES = """
[run]
name = "cand"
[grid]
extent = [0.0, 8.0, 0.0, 4.0]
resolution = 0.05
[inputs.lid_thickness]
constant = 90.0
[inputs.thermal_anomaly]
constant = 0.0
[[inputs.thermal_anomaly.plumes]]
name = "West"
longitude = 2.0
latitude = 2.0
radius_km = 150.0
peak_excess_k = 200.0
shape = "cosine"
[[inputs.thermal_anomaly.plumes]]
name = "East"
longitude = 6.0
latitude = 2.0
radius_km = 150.0
peak_excess_k = 250.0
shape = "cosine"
[compute]
chunk_size = {chunk}
workers = {workers}
[ensemble]
members = 10
seed = 5
{extra}
[ensemble.vary]
"inputs.thermal_anomaly.plumes.1.peak_excess_k" = {{ uniform = [160.0, 240.0] }}
"""
WEST_KEY = "inputs.thermal_anomaly.plumes.1.peak_excess_k"


def two_plumes(tmp_path, name, *, chunk=64, workers=1, extra="", source=ensemble_candidates):
    wf = tmp_path / f"{name}.toml"
    wf.write_text(TWO_PLUMES.format(chunk=chunk, workers=workers, extra=extra))
    cfg = load_workflow(wf, output_dir=tmp_path / name)
    stages = ensemble_stages(cfg, announce=False, candidates=source)
    return run_basin(cfg, progress=False, extra_stages=stages)


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("candidates")
    return two_plumes(tmp, "c64"), two_plumes(tmp, "c128", chunk=128, workers=2)


def test_each_candidate_is_driven_by_its_own_plume_only(runs):
    run = runs[0]
    found = run.summary["ensemble"]["candidates"]
    assert found["basis"] == "anomaly"
    assert found["found"] == found["tracked"] == 2  # one region per plume
    by_plume = {c["plume"]: c for c in found["list"]}
    west, east = by_plume["West"], by_plume["East"]
    (rho_west,) = [d for d in west["drivers"] if d["key"] == WEST_KEY]
    assert rho_west["rank_correlation_melt_volume"] == pytest.approx(1.0, abs=1e-12)
    assert rho_west["variance_fraction"] > 0.5
    assert rho_west["driver"]
    assert rho_west["variance_fraction_interval"][0] > 0.5
    (rho_east,) = [d for d in east["drivers"] if d["key"] == WEST_KEY]
    assert rho_east["rank_correlation_melt_volume"] is None
    assert rho_east["variance_fraction"] is None
    members = pd.read_csv(run.run_dir / "ensemble_members.csv")
    east_volume = members[f"candidate_{east['rank']}_melt_volume_km3"]
    assert east_volume.nunique() == 1
    rounding = east["n_cells"] * 2.0**-21
    assert abs(east_volume.iloc[0] - east["melt_volume_km3"]) <= rounding + 1e-9
    west_volume = members[f"candidate_{west['rank']}_melt_volume_km3"].to_numpy()
    order = np.argsort(members[WEST_KEY].to_numpy())
    assert np.all(np.diff(west_volume[order]) > 0)  # strictly increasing with the excess
    stats = west["members_melt_volume_km3"]
    assert west_volume.min() <= stats["p10"] <= stats["p50"] <= stats["p90"] <= west_volume.max()


def test_candidates_are_those_lidmelt_screen_lists(runs):
    run = runs[0]
    found = run.summary["ensemble"]["candidates"]
    listed = screen(run.run_dir, min_melt_thickness_km=found["min_melt_thickness_km"])
    assert list(listed["rank"]) == [c["rank"] for c in found["list"]]
    assert list(listed["plume"]) == [c["plume"] for c in found["list"]]
    assert list(listed["n_cells"]) == [c["n_cells"] for c in found["list"]]
    np.testing.assert_allclose(
        listed["melt_volume_km3"], [c["melt_volume_km3"] for c in found["list"]], rtol=1e-12
    )
    # each carries its probability: basis, threshold and the statistics that lidmelt screen
    # computes from the probability map over the same cells (area-weighted in float64 there,
    # exact sums of 2^-20 multiples in the run: the same to 1e-6)
    assert list(listed["probability_basis"]) == ["anomaly"] * len(listed)
    for c, (_, row) in zip(found["list"], listed.iterrows(), strict=True):
        assert c["probability"] == "melt_probability_anomaly_ge_1km"
        assert (c["probability_basis"], c["probability_threshold_km"]) == ("anomaly", 1.0)
        assert row["probability_threshold_km"] == 1.0
        for key in ("mean_probability", "max_probability", "likely_area_km2"):
            assert c[key] == pytest.approx(row[key], rel=1e-6, abs=1e-6), key


def test_candidate_volumes_do_not_depend_on_chunking_or_workers(runs):
    a, b = runs
    csv_a = (a.run_dir / "ensemble_members.csv").read_text()
    assert csv_a == (b.run_dir / "ensemble_members.csv").read_text()
    assert "candidate_2_melt_volume_km3" in csv_a.splitlines()[0]
    assert "candidate_2_cells_without_value" in csv_a.splitlines()[0]
    assert a.summary["ensemble"]["candidates"] == b.summary["ensemble"]["candidates"]


def test_report_lists_each_candidate_and_its_drivers(runs):
    html = write_report(runs[0].run_dir, pdf=False).read_text(encoding="utf-8")
    start = html.index('<section id="ensemble">')
    section = html[start : html.index("</section>", start)]
    table = section[section.index("What drives each candidate") :]
    assert table.index("<td>East</td>") < table.index("<td>West</td>")  # rank 1 first
    # 3 significant figures; the share with its 90 % interval, then rho
    assert re.search(
        rf"{re.escape(WEST_KEY)} \(share 0\.9\d+ \(0\.\d+ to 1\.00\); rho 1\.00\)", table
    )
    assert "none: the same volume in every member" in table


def test_no_candidates_without_a_source_or_with_zero(tmp_path):
    without = two_plumes(tmp_path, "none", source=None)
    assert "candidates" not in without.summary["ensemble"]
    head = (without.run_dir / "ensemble_members.csv").read_text().splitlines()[0]
    assert head.split(",")[-2:] == ["anomaly_melt_volume_km3", "cells_without_value"]
    zero = two_plumes(tmp_path, "zero", extra="candidates = 0")
    assert "candidates" not in json.loads((zero.run_dir / "summary.json").read_text())["ensemble"]


@pytest.mark.parametrize(
    ("extra", "match"),
    [("candidates = -1", "at least 0"), ("candidate_min_melt_km = 0.0", "outside the accepted")],
)
def test_bad_candidate_keys_are_refused(tmp_path, extra, match):
    wf = tmp_path / "bad.toml"
    wf.write_text(TWO_PLUMES.format(chunk=64, workers=1, extra=extra))
    with pytest.raises(WorkflowError, match=match):
        load_workflow(wf, output_dir=tmp_path / "bad")
