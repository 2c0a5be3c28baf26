"""Ensembles narrowed by known features (issue 22): each member's score from the chunk pass,
GLUE weights, weighted distributions and the weighted probability.

Check values: each member's exact AUC, computed from its own deterministic run by the exact
ranks of lidmelt.products._assess (themselves checked against scikit-learn in test_assess.py);
sampling error of a weighted mean of a key independent of the weights, sd / sqrt(effective
members) (Kish 1965, from memory; 3 standard errors, common practice); the identity that
features drawn from one member's own map are best ranked by that map.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rasterio

import runkit
from lidmelt._engine import run_basin
from lidmelt.ensemble import ensemble_stages
from lidmelt.ensemble._posterior import (
    effective_members,
    glue_weights,
    weighted_distributions,
    weighted_probability,
    weighted_quantiles,
)
from lidmelt.products._assess._assessment import assess
from lidmelt.workflow import load_workflow

WORKFLOW = """
[run]
name = "scored"
netcdf = false
maps = false
report = false
[grid]
like = "plate_age"
[inputs.plate_age]
path = "age.tif"
[inputs.thermal_anomaly]
[[inputs.thermal_anomaly.plumes]]
name = "Wander"
longitude = -20.0
latitude = 2.0
radius_km = 180.0
peak_excess_k = 260.0
[compute]
chunk_size = 64
workers = 1
[ensemble]
members = {members}
seed = 5
sampling = "random"
[ensemble.vary]
"inputs.thermal_anomaly.plumes.1.longitude" = {{ uniform = [-27.0, -8.0] }}
"model.crust_density_kg_m3" = {{ uniform = [2700.0, 3100.0] }}
{assess}
"""


def workflow(folder, members, features=None, shape=1.0):
    folder.mkdir(parents=True, exist_ok=True)
    if not (folder / "age.tif").exists():
        runkit.write_age(folder / "age.tif", shape=(80, 100))  # 0.25 deg: -30..-5, -10..10
    extra = ""
    if features is not None:
        extra = f'[assess]\nfeatures = "{features}"\nlikelihood_shape = {shape}\n'
    wf = folder / f"scored_{members}_{features is not None}.toml"
    wf.write_text(WORKFLOW.format(members=members, assess=extra))
    return wf


def run_ensemble(wf, out):
    cfg = load_workflow(wf, output_dir=out)
    return run_basin(cfg, progress=False, extra_stages=ensemble_stages(cfg, announce=False))


def features_from(run_dir, count, seed, path, least=1.0):
    """``count`` features at random cells where the run's anomaly melt is >= ``least`` km."""
    with rasterio.open(run_dir / "anomaly_melt_thickness_km.tif") as src:
        v, transform = src.read(1), src.transform
    rng = np.random.default_rng(seed)
    cells = rng.choice(np.flatnonzero(v.ravel() >= least), count, replace=False)
    rows, cols = np.divmod(cells, v.shape[1])
    xs, ys = rasterio.transform.xy(transform, rows, cols)
    text = "name,longitude,latitude\n" + "".join(
        f"f{k},{x},{y}\n" for k, (x, y) in enumerate(zip(xs, ys, strict=True))
    )
    path.write_text(text + "outside,40.0,0.0\n")
    return path


@pytest.fixture(scope="module")
def truth(tmp_path_factory):
    """Member 4 of the ensemble drawn with seed 5, run alone; 25 features from its map."""
    folder = tmp_path_factory.mktemp("scored")
    cfg = load_workflow(workflow(folder, 24), output_dir=folder / "plain")
    k = 4
    alone = run_basin(cfg.ensemble.configs[k], output_dir=folder / "member", progress=False)
    path = features_from(alone.run_dir, 25, 0, folder / "from_member.csv")
    lon = [s[0] for s in cfg.ensemble.samples]
    return folder, path, k, np.asarray(lon, float)


@pytest.mark.slow
def test_member_scores_equal_their_exact_auc_within_the_stated_bound(truth):
    folder, path, _, _ = truth
    result = run_ensemble(workflow(folder, 24, path), folder / "ens_exact")
    members = pd.read_csv(result.run_dir / "ensemble_members.csv")
    cfg = load_workflow(workflow(folder, 24, path), output_dir=folder / "again")
    for m in (0, 4, 9):
        alone = run_basin(cfg.ensemble.configs[m], output_dir=folder / f"m{m}", progress=False)
        exact = assess(alone.run_dir, path, variable="anomaly_melt_thickness_km")["auc"]
        got, bound = members.loc[m, "auc"], members.loc[m, "auc_bound"]
        assert bound < 0.01
        assert abs(got - exact) <= bound + 1e-9, (m, got, exact, bound)
    assert (members["features_scored"] == 25).all()  # the feature outside is never scored
    entry = result.summary["ensemble"]["assessment"]
    assert entry["features_outside_grid"] == ["outside"]
    assert members["weight"].sum() == pytest.approx(1.0, abs=1e-12)


def test_features_from_one_members_map_weigh_the_members_near_it(truth):
    folder, path, k, lon = truth
    result = run_ensemble(workflow(folder, 24, path, shape=8.0), folder / "ens_near")
    members = pd.read_csv(result.run_dir / "ensemble_members.csv")
    w = members["weight"].to_numpy()
    distance = np.abs(lon - lon[k])
    nearest = np.argsort(distance)[:3]  # member k itself and its two nearest neighbours
    assert int(np.argmax(w)) in nearest
    assert w[nearest].sum() > 3 / len(w)  # more than their prior share
    entry = result.summary["ensemble"]["assessment"]["distributions"][0]
    assert abs(entry["posterior"]["mean"] - lon[k]) < abs(entry["prior"]["mean"] - lon[k])


def test_a_key_that_does_not_change_the_score_keeps_its_prior(truth):
    """The crust density changes only the crustal thickness, not the anomaly melt the members
    are scored on: its weighted mean stays within 3 standard errors of its prior mean, while
    the plume's longitude, which moves the melt, is narrowed (its weighted sd shrinks)."""
    folder, path, _, _ = truth
    result = run_ensemble(workflow(folder, 24, path, shape=8.0), folder / "ens_prior")
    entry = result.summary["ensemble"]["assessment"]
    lon, density = entry["distributions"]
    ess = entry["effective_members"]
    assert 1.5 < ess < 24
    se = density["prior"]["sd"] / np.sqrt(ess)
    assert abs(density["posterior"]["mean"] - density["prior"]["mean"]) < 3 * se
    assert lon["posterior"]["sd"] < 0.8 * lon["prior"]["sd"]


@pytest.mark.slow
def test_the_weighted_probability_weighs_the_members_where_they_differ(truth):
    folder, path, _, _ = truth
    result = run_ensemble(workflow(folder, 24, path, shape=8.0), folder / "ens_map")
    run = result.run_dir
    members = pd.read_csv(run / "ensemble_members.csv")
    w = members["weight"].to_numpy()
    with rasterio.open(run / "melt_probability_anomaly_ge_1km.tif") as src:
        plain = src.read(1)
    with rasterio.open(run / "melt_probability_anomaly_ge_1km_weighted.tif") as src:
        weighted = src.read(1)
    agree = (plain == 0) | (plain == 1)
    np.testing.assert_array_equal(weighted[agree], plain[agree])
    # identity: with every member run alone, sum_m w_m I_m at a cell where they differ
    cfg = load_workflow(workflow(folder, 24, path), output_dir=folder / "x")
    cells = np.argwhere((plain > 0) & (plain < 1))[:5]
    hits = np.zeros(len(cells))
    for m in np.flatnonzero(w > 1e-3):
        alone = run_basin(cfg.ensemble.configs[m], output_dir=folder / f"w{m}", progress=False)
        with rasterio.open(alone.run_dir / "anomaly_melt_thickness_km.tif") as src:
            melt = src.read(1)
        with rasterio.open(alone.run_dir / "max_melt_fraction.tif") as src:
            top = src.read(1)
        melts = (melt >= np.float32(1.0)) & (top >= np.float32(0.005))
        hits += w[m] * melts[cells[:, 0], cells[:, 1]]
    expected = hits / w[w > 1e-3].sum()
    got = weighted[cells[:, 0], cells[:, 1]]
    np.testing.assert_allclose(got, expected, atol=2e-3 + 1e-6)


def test_glue_weights_and_weighted_statistics():
    # identity: rejected members weigh nothing, the others in proportion to (AUC - r)/(1 - r)
    w = glue_weights(np.array([0.4, 0.5, 0.75, 1.0, np.nan]), 0.5, 1.0)
    np.testing.assert_allclose(w, [0, 0, 1 / 3, 2 / 3, 0])
    assert effective_members(np.full(10, 0.1)) == pytest.approx(10.0)
    assert glue_weights(np.array([0.3, 0.5]), 0.5, 1.0).sum() == 0.0
    # shape N = 2 by hand: L = (0.25/0.5)^2 = 0.25 and (0.5/0.5)^2 = 1, so w = 0.2 and 0.8
    np.testing.assert_allclose(glue_weights(np.array([0.75, 1.0]), 0.5, 2.0), [0.2, 0.8])
    # equal weights: mid-point interpolation is Hyndman & Fan definition 5 ((k - 1/2)/n)
    values = np.array([4.0, 1.0, 3.0, 2.0])
    assert weighted_quantiles(values, np.ones(4), [50.0, 12.5, 87.5]) == [2.5, 1.0, 4.0]
    from lidmelt._config_tables import VarySpec

    spec = VarySpec(key="lithosphere.cooling", distribution="choice",
                    parameters=("half-space", "gdh1"))  # fmt: skip
    (entry,) = weighted_distributions([spec], [("half-space",), ("gdh1",), ("gdh1",)],
                                      np.array([0.5, 0.25, 0.25]))  # fmt: skip
    assert entry["prior"]["shares"] == pytest.approx({"half-space": 1 / 3, "gdh1": 2 / 3})
    assert entry["posterior"]["shares"] == pytest.approx({"half-space": 0.5, "gdh1": 0.5})


def test_weighted_probability_of_packed_masks():
    from lidmelt.ensemble._posterior import pack_masks

    melting = np.array([[[1, 0]], [[0, 0]], [[1, 1]]], bool)  # 3 members, a 1 x 2 chunk
    valued = np.array([[[1, 1]], [[1, 0]], [[1, 1]]], bool)
    masks = pack_masks(melting, valued, np.array([True, True]))
    w = np.array([0.5, 0.3, 0.2])
    got = weighted_probability(np.full((1, 2), 0.5, np.float32), masks, w)
    # identity: (0.5 + 0.2) / 1.0 and (0.2) / (0.5 + 0.2)
    np.testing.assert_allclose(got, [[0.7, 0.2 / 0.7]], rtol=1e-6)


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("name,x_pos,y_pos\na,1,1\n", "no recognisable coordinate columns"),
        ("name,longitude,latitude\n", "has a header but no rows"),
        ("name,longitude,latitude\na,40,0\nb,41,1\n", "lie outside the run's grid"),
    ],
    ids=["no-coordinates", "header-only", "all-outside"],
)
def test_a_workflow_with_bad_known_features_writes_nothing(tmp_path, capsys, text, expected):
    from lidmelt.cli import main

    bad = tmp_path / "known.csv"
    bad.write_text(text)
    wf = workflow(tmp_path / "in", 3, bad)
    out = tmp_path / "out"
    assert main(["run", str(wf), "-o", str(out), "--quiet"]) == 1
    err = capsys.readouterr().err
    assert err.startswith("lidmelt run: error: ")  # before the run starts: no other line
    assert str(bad) in err
    assert expected in err
    assert not out.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in", "known.csv"]


def test_lidmelt_run_writes_the_assessment_naming_the_final_run(tmp_path, capsys):
    """The run's own assessment is computed in the staged run, but its JSON names the folder
    the run ends up in (no staging folder), and the ensemble's members are scored beside it."""
    import json

    from lidmelt.cli import main

    known = tmp_path / "known.csv"
    known.write_text("name,longitude,latitude\nnear,-20.0,2.0\naway,-10.0,-5.0\nout,40.0,0.0\n")
    wf = workflow(tmp_path / "in", 3, known)
    out = tmp_path / "out"
    assert main(["run", str(wf), "-o", str(out), "--quiet"]) == 0
    text = (out / "assess.json").read_text()
    doc = json.loads(text)
    assert doc["run"] == str(out.absolute())
    assert "staging" not in text
    assert f"lidmelt screen {out.absolute()} " in doc["candidates"]["note"]
    assert doc["variable"] == "melt_probability_anomaly_ge_1km"  # an ensemble's default
    assert (doc["n_features"], doc["n_features_used"], doc["n_outside_grid"]) == (3, 2, 1)
    assert (out / "maps" / "success_rate.png").is_file()
    assert len(pd.read_csv(out / "ensemble_members.csv")["auc"].dropna()) == 3
