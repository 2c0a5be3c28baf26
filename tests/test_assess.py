"""Scoring a map against known features (issue 22): rank statistics, the assessment of a run,
its command and its refusals.

Check values: scikit-learn's ``roc_auc_score`` with sample weights (an independent area-weighted
ROC area: features as positives of weight 1, every background cell as a negative weighted by its
area); the definition of the score (an identity: features drawn from the background in
proportion to area have a mean score of 1/2, so a 90 % interval holds 0.5 in about 90 % of
draws); Bonham-Carter's (1994, ch. 9) weights-of-evidence formulas written out by hand.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from affine import Affine
from sklearn.metrics import roc_auc_score

from lidmelt.cli import main
from lidmelt.ensemble._score import (
    NBINS,
    ExactRanks,
    bin_keys,
    binned_scores,
    feature_scores,
    interval,
    resample_counts,
)
from lidmelt.products._assess._assessment import assess
from lidmelt.products._assess._evidence import weights_of_evidence

TRANSFORM = Affine(0.5, 0.0, -10.0, 0.0, -0.5, 5.0)  # 0.5 degree cells, north-up


def field(shape=(40, 60), seed=0, zeros=0.6):
    """An invented field V >= 0 with many exact zeros (ties) and some NaN (no data)."""
    rng = np.random.default_rng(seed)
    v = rng.gamma(2.0, 1.0, shape).astype(np.float32)
    v[rng.random(shape) < zeros] = 0.0
    v[:3] = np.nan
    return v


def sklearn_auc(v, w, features):
    ok = np.isfinite(v)
    y = np.r_[np.ones(len(features)), np.zeros(ok.sum())]
    score = np.r_[features, v[ok]]
    weight = np.r_[np.ones(len(features)), np.broadcast_to(w, v.shape)[ok]]
    return roc_auc_score(y, score, sample_weight=weight)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_exact_scores_equal_sklearn_weighted_roc_area(seed):
    v = field(seed=seed)
    rows = np.linspace(1.0, 3.0, v.shape[0])[:, None]  # areas that differ by row
    rng = np.random.default_rng(seed + 10)
    cells = rng.choice(np.flatnonzero(np.isfinite(v)), 25)
    f = v.ravel()[cells].astype(np.float64)
    ranks = ExactRanks(f)
    for r in range(0, v.shape[0], 7):  # in bands, as the assessment reads a grid
        ranks.add(v[r : r + 7], rows[r : r + 7])
    assert ranks.scores().auc == pytest.approx(sklearn_auc(v, rows, f), abs=1e-12)
    full = feature_scores(v, np.broadcast_to(rows, v.shape), f)
    np.testing.assert_allclose(full.below, ranks.scores().below, atol=1e-15)


def test_features_sharing_a_bin_are_ranked_exactly():
    # values 1 ulp apart share a bin (:func:`bin_keys`); the exact ranks still separate them
    base = np.float32(3.0)
    close = np.nextafter(base, np.float32(4.0))
    v = np.array([[0.0, base, close, close, base, 5.0]], np.float32)
    assert bin_keys(np.array([base]))[0] == bin_keys(np.array([close]))[0]
    f = np.array([base, close], np.float64)
    got = feature_scores(v, 1.0, f)
    assert got.auc == pytest.approx(sklearn_auc(v, 1.0, f), abs=1e-15)
    # identity: 3.0 outranks the zero and ties two cells; 3.0+ulp outranks three and ties two
    np.testing.assert_allclose(got.scores, [(1 + 1) / 6, (3 + 1) / 6])


def test_binned_scores_are_within_their_bound_of_the_exact():
    v = field(shape=(80, 90), seed=4, zeros=0.3)
    ok = np.isfinite(v)
    rng = np.random.default_rng(5)
    f = v.ravel()[rng.choice(np.flatnonzero(ok), 40)].astype(np.float64)
    exact = feature_scores(v, 1.0, f).auc
    hist = np.bincount(bin_keys(v[ok]), minlength=NBINS).astype(float)
    binned = binned_scores(hist, f)
    assert 0 < binned.bound < 0.01
    assert abs(binned.auc - exact) <= binned.bound + 1e-15
    zeros = binned_scores(hist, np.zeros(5))  # V = 0: bin 0 holds exact ties only
    assert zeros.bound == 0.0
    assert zeros.auc == pytest.approx(feature_scores(v, 1.0, np.zeros(5)).auc, abs=1e-15)


def test_random_features_give_an_interval_holding_one_half():
    """Features drawn from the ocean in proportion to area: their mean score is 1/2 (module
    notes of lidmelt.ensemble._score), so a 90 % interval holds 0.5 in about 90 % of draws
    (200 seeds, 50 features each, fixed before running; Binomial(200, 0.9) has sd 4.2)."""
    v = field(shape=(60, 80), seed=7)
    rows = np.linspace(1.0, 2.0, v.shape[0])[:, None]
    area = np.broadcast_to(rows, v.shape)[np.isfinite(v)]
    values = v[np.isfinite(v)].astype(np.float64)
    held = 0
    for seed in range(200):
        rng = np.random.default_rng(seed)
        f = values[rng.choice(values.size, 50, p=area / area.sum())]
        s = feature_scores(v, rows, f).scores
        counts = resample_counts(f.size, seed)
        low, high = interval(counts @ s.astype(np.float32) / f.size, f.size)
        held += low <= 0.5 <= high
    assert held >= 180, held


def test_expanded_levels_follow_hesterberg_by_hand():
    """Hesterberg (2015): a' = Phi(sqrt(n/(n-1)) t_(a, n-1)). By hand for n = 10, 90 %:
    t_(0.05, 9) = -1.833 (Student t table), x sqrt(10/9) = -1.9322, Phi(-1.9322) = 0.02666
    (normal table: Phi(1.93) = 0.9732, Phi(1.94) = 0.9738); wider than the plain 5 %."""
    from lidmelt.ensemble._score import expanded_levels

    lo, hi = expanded_levels(10)
    assert lo == pytest.approx(2.666, abs=0.01)
    assert hi == pytest.approx(100 - 2.666, abs=0.01)
    assert expanded_levels(1) == pytest.approx((5.0, 95.0))  # n < 2: the plain levels


def test_features_at_the_highest_cells_score_above_095():
    v = field(seed=8)
    top = np.argsort(np.nan_to_num(v, nan=-1.0).ravel())[-30:]
    s = feature_scores(v, 1.0, v.ravel()[top])
    assert s.auc > 0.95


def test_weights_of_evidence_follow_bonham_carter():
    # Bonham-Carter (1994, ch. 9) written out: 1000 unit cells, 100 of them in B, 20 features,
    # 12 of them in B
    got = weights_of_evidence(12, 20, 0.1, 1000)
    w_plus = math.log((12 / 20) / ((100 - 12) / (1000 - 20)))
    w_minus = math.log((8 / 20) / ((1000 - 100 - 20 + 12) / (1000 - 20)))
    s = math.sqrt(1 / 12 + 1 / 88 + 1 / 8 + 1 / 892)
    assert got["w_plus"] == pytest.approx(w_plus, rel=1e-12)
    assert got["w_minus"] == pytest.approx(w_minus, rel=1e-12)
    assert got["contrast"] == pytest.approx(w_plus - w_minus, rel=1e-12)
    assert got["studentized_contrast"] == pytest.approx((w_plus - w_minus) / s, rel=1e-12)
    none = weights_of_evidence(0, 20, 0.1, 1000)
    assert none["contrast"] is None
    assert "no feature in B" in none["note"]


# ---- the assessment of a run -----------------------------------------------------------------


@pytest.fixture
def small_run(make_run_dir):
    v = field(shape=(20, 40), seed=3)
    v[:, -4:] = np.nan  # a nodata margin in the east
    melt = np.where(np.isfinite(v), v + 0.5, np.nan)
    return make_run_dir({"melt_thickness_km": melt, "anomaly_melt_thickness_km": v},
                        transform=TRANSFORM), v  # fmt: skip


def write_features(path, rows):
    path.write_text("name,longitude,latitude\n" + "".join(f"{n},{x},{y}\n" for n, x, y in rows))
    return path


def centre(row, col):
    return -10.0 + 0.5 * (col + 0.5), 5.0 - 0.5 * (row + 0.5)


def test_assessment_of_a_run_equals_sklearn_and_lists_what_it_cannot_score(small_run, tmp_path):
    run, v = small_run
    rng = np.random.default_rng(1)
    cells = rng.choice(np.flatnonzero(np.isfinite(v)), 12, replace=False)
    rows = [(f"s{k}", *centre(*divmod(int(c), v.shape[1]))) for k, c in enumerate(cells)]
    rows += [("east", *centre(10, 38)), ("far", 40.0, 0.0)]
    doc = assess(run, write_features(tmp_path / "f.csv", rows))
    f = v.ravel()[cells].astype(np.float64)
    from lidmelt.grids._area import row_areas_km2
    from lidmelt.products._sampling import as_run, run_grid

    area = row_areas_km2(run_grid(as_run(run)))[:, None]
    assert doc["auc"] == pytest.approx(sklearn_auc(v, area, f), abs=1e-12)
    assert (doc["n_features"], doc["n_features_used"]) == (14, 12)
    assert {(d["name"], d["reason"]) for d in doc["not_used"]} == {
        ("east", "nodata"), ("far", "outside_grid")}  # fmt: skip
    low, high = doc["auc_ci90"]
    assert low < doc["auc"] < high
    # the curve's area (trapezoids between its points) is the AUC (ties counted half)
    x, y = (np.asarray(doc["curve"][k]) for k in ("area_fraction", "feature_fraction"))
    assert np.trapezoid(y, x) == pytest.approx(doc["auc"], abs=1e-12)
    t1 = next(t for t in doc["thresholds"] if t["screening"])
    assert t1["value"] == 1.0
    assert t1["captured"] == int((f >= 1.0).sum())
    assert t1["area_fraction"] == pytest.approx(
        float((np.broadcast_to(area, v.shape)[v >= 1.0]).sum() / area.repeat(v.shape[1], 1)[
            np.isfinite(v)].sum()), rel=1e-12)  # fmt: skip


def test_features_in_candidate_regions_are_listed(small_run, tmp_path):
    run, v = small_run
    from lidmelt.products._candidate_files import write_candidates
    from lidmelt.products._screening import screen

    found = screen(run, min_melt_thickness_km=2.0)
    write_candidates(found, run / "candidates.gpkg")
    top = int(np.nanargmax(v))
    rows = [("peak", *centre(*divmod(top, v.shape[1]))), ("far", 40.0, 0.0)]
    zero = int(np.flatnonzero(v.ravel() == 0)[0])
    rows.append(("flat", *centre(*divmod(zero, v.shape[1]))))
    doc = assess(run, write_features(tmp_path / "f.csv", rows))
    regions = doc["candidates"]["regions"]
    assert sum(r["n_features"] for r in regions) == 1
    assert any(r["features"] == ["peak"] for r in regions)
    assert doc["candidates"]["in_no_candidate"] == ["far", "flat"]


@pytest.mark.parametrize(
    ("text", "suffix", "expected"),
    [
        ("name,x_pos,y_pos\na,1,1\n", ".csv", "no recognisable coordinate columns"),
        ("", ".csv", "is empty"),
        ("name,longitude,latitude\n", ".csv", "has a header but no rows"),
        ("name,longitude,latitude\na,40,0\nb,41,1\n", ".csv", "all 2 features"),
        (
            '{"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {}, '
            '"geometry": {"type": "Point", "coordinates": [0, 0]}}], "crs": {"type": "name", '
            '"properties": {"name": "EPSG:999999"}}}',
            ".geojson",
            "'EPSG:999999', which is not one pyproj knows",
        ),
        ("local", ".gpkg", "cannot be transformed to longitude/latitude"),
    ],
    ids=["no-coordinates", "empty", "header-only", "all-outside", "unknown-crs", "local-crs"],
)
def test_bad_feature_files_are_refused_naming_the_file(small_run, tmp_path, capsys, text, suffix,
                                                       expected):  # fmt: skip
    run, _ = small_run
    bad = tmp_path / f"features{suffix}"
    if text == "local":  # an engineering CRS: coordinates with no place on the Earth
        import geopandas as gpd

        local = 'LOCAL_CS["site grid",UNIT["metre",1]]'
        gdf = gpd.GeoDataFrame({"name": ["a"]}, geometry=gpd.points_from_xy([1.0], [2.0]),
                               crs=local)  # fmt: skip
        gdf.to_file(bad)
    else:
        bad.write_text(text)
    before = sorted(p.name for p in run.iterdir())
    assert main(["assess", str(run), str(bad)]) == 1
    err = capsys.readouterr().err
    assert err.startswith("lidmelt assess: error: ")
    assert str(bad) in err
    assert expected in err
    assert "Traceback" not in err
    assert sorted(p.name for p in run.iterdir()) == before  # nothing written


def test_the_command_writes_the_json_and_the_figure(small_run, tmp_path, capsys):
    run, _ = small_run
    rows = [("a", *centre(5, 5)), ("b", *centre(6, 20))]
    assert main(["assess", str(run), str(write_features(tmp_path / "f.csv", rows))]) == 0
    doc = json.loads((run / "assess.json").read_text())
    for key in ("variable", "n_features", "n_features_used", "auc", "auc_ci90", "curve",
                "thresholds"):  # fmt: skip
        assert key in doc
    assert doc["variable"] == "anomaly_melt_thickness_km"
    assert set(doc["thresholds"][0]) >= {"value", "captured", "area_fraction", "contrast",
                                         "studentized_contrast"}  # fmt: skip
    assert (run / "maps" / "success_rate.png").is_file()
    assert "AUC" in capsys.readouterr().out
    # the run itself is untouched: its manifest still verifies
    from lidmelt.grids._rundir import open_run

    open_run(run)


@pytest.mark.slow
def test_the_demo_auc_equals_sklearn_within_0001(tmp_path):
    """The invented demo basin and its invented known seamounts: the assessment's AUC equals
    scikit-learn's area-weighted ROC area within 0.001 (issue 22)."""
    from pathlib import Path

    import rasterio

    from lidmelt.grids._area import row_areas_km2
    from lidmelt.grids._features import nearest_cells, read_feature_points
    from lidmelt.products._sampling import as_run, run_grid

    root = Path(__file__).resolve().parents[1]
    out = tmp_path / "demo"
    argv = ["run", str(root / "workflows" / "demo.toml"), "-o", str(out), "--quiet", "--no-maps"]
    assert main([*argv, "--set", "run.netcdf=false"]) == 0
    known = root / "grids_demo" / "known_seamounts.csv"
    doc = assess(out, known)
    grid = run_grid(as_run(out))
    with rasterio.open(out / "anomaly_melt_thickness_km.tif") as src:
        v = src.read(1)
    fp = read_feature_points(known)
    inside, flat = nearest_cells(grid, *grid.to_grid_xy(fp.x, fp.y, fp.crs))
    f = v.ravel()[flat[inside]]
    f = f[np.isfinite(f)].astype(np.float64)
    assert f.size == doc["n_features_used"] == 20
    expected = sklearn_auc(v, row_areas_km2(grid)[:, None], f)
    assert abs(doc["auc"] - expected) < 0.001
    assert doc["auc"] > 0.5


def test_the_report_shows_the_assessment(small_run, tmp_path, capsys):
    from lidmelt.products._report._write import write_report

    run, _ = small_run
    rows = [("a", *centre(5, 5)), ("b", *centre(6, 20)), ("far", 40.0, 0.0)]
    assert main(["assess", str(run), str(write_features(tmp_path / "f.csv", rows))]) == 0
    doc = json.loads((run / "assess.json").read_text())
    page = write_report(run, maps=[]).read_text(encoding="utf-8")
    assert 'id="assess"' in page
    assert f"AUC {doc['auc']:.3f}" in page
    assert "far (outside grid)" in page
    assert "Studentized" in page


def test_a_float32_cell_at_the_threshold_is_captured_like_its_area(make_run_dir, tmp_path):
    """The grid holds float32: a cell of float32(1.3) lies in B = {V >= 1.3} (its area is in B's
    share), so a feature on it is captured too, though float64(float32(1.3)) < 1.3 (identity
    of float32 rounding; the same holds for a probability of 45/50 against 0.9)."""
    v = field(shape=(20, 40), seed=3)
    v[np.isclose(v, 1.3, atol=1e-3)] = 0.0  # no other cell near the threshold
    v[5, 5] = v[6, 20] = np.float32(1.3)
    assert float(np.float32(1.3)) < 1.3
    run = make_run_dir({"anomaly_melt_thickness_km": v}, transform=TRANSFORM)
    rows = [("on", *centre(5, 5)), ("low", *centre(4, 1))]
    doc = assess(run, write_features(tmp_path / "f.csv", rows), thresholds=[1.3])
    (t,) = doc["thresholds"]
    assert t["captured"] == 1 + int(v[4, 1] >= np.float32(1.3))
    from lidmelt.grids._area import row_areas_km2
    from lidmelt.products._sampling import as_run, run_grid

    area = np.broadcast_to(row_areas_km2(run_grid(as_run(run)))[:, None], v.shape)
    in_b = area[np.isfinite(v) & (v >= np.float32(1.3))].sum() / area[np.isfinite(v)].sum()
    assert t["area_fraction"] == pytest.approx(float(in_b), rel=1e-12)


def test_polygons_in_another_crs_count_once_by_a_point_inside_them(small_run, tmp_path):
    """A U-shaped outline (its centroid lies in the notch, outside it) and a square, written in
    Web Mercator: each is one feature, placed at a point inside its own outline (checked with
    shapely in the file's CRS), and takes the value of the cell that holds that point."""
    import geopandas as gpd
    import shapely
    from pyproj import Transformer

    run, v = small_run
    u = shapely.Polygon([(-8, -3), (-5, -3), (-5, 0), (-6, 0), (-6, -2), (-7, -2), (-7, 0),
                         (-8, 0)])  # fmt: skip
    square = shapely.box(-2.9, 1.1, -2.1, 1.9)
    assert not u.contains(u.centroid)
    gdf = gpd.GeoDataFrame({"name": ["u", "square"]}, geometry=[u, square], crs="EPSG:4326")
    merc = gdf.to_crs("EPSG:3857")
    merc.to_file(tmp_path / "outlines.gpkg")
    doc = assess(run, tmp_path / "outlines.gpkg")
    assert doc["n_features_used"] == 2
    to_merc = Transformer.from_crs("EPSG:4326", "EPSG:3857", always_xy=True)
    for feature, outline in zip(doc["features"], merc.geometry, strict=True):
        assert feature["kind"] == "polygon"
        x, y = to_merc.transform(feature["longitude"], feature["latitude"])
        assert outline.contains(shapely.Point(x, y)), feature["name"]
        col = int((feature["longitude"] + 10.0) // 0.5)
        row = int((5.0 - feature["latitude"]) // 0.5)
        assert feature["value"] == pytest.approx(float(v[row, col]), abs=0.0)
