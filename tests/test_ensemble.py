"""Ensembles: sampling, reductions, probabilities against closed forms, members without a
value, reproducibility.

Check values name their sources beside them.
"""

import dataclasses
import json
import re

import numpy as np
import pandas as pd
import pytest
import rasterio
from scipy.optimize import brentq
from scipy.stats import chi2

from lidmelt._config_tables import VarySpec
from lidmelt._engine import run_basin
from lidmelt._errors import InputError, WorkflowError
from lidmelt._variables import ensemble_variable, get_variable, parse_ensemble_name
from lidmelt.ensemble import ensemble_stages
from lidmelt.ensemble._kernel import member_percentiles
from lidmelt.ensemble._missing import key_contrast, missing_summary, missing_warning
from lidmelt.ensemble._sampling import draw_members, inverse_cdf, unit_samples
from lidmelt.physics import evaluate_cells, get_model, get_table
from lidmelt.physics._cells import CellOptions
from lidmelt.physics._evaluate import EXTRACTION_MIN_MELT_FRACTION
from lidmelt.physics._kernel_records import Cells
from lidmelt.products._screening import ensemble_candidates
from lidmelt.workflow import load_workflow

BASE = """
[run]
name = "ens"
[grid]
extent = [0.0, 1.6, 0.0, 0.8]
resolution = 0.0125
[inputs.lid_thickness]
constant = {lid}
[compute]
chunk_size = {chunk}
workers = {workers}
[ensemble]
members = {members}
seed = 7
probability_basis = "{basis}"
thresholds_km = [{threshold}]
[ensemble.vary]
{vary}
"""


def run_ensemble(
    tmp_path, name, *, vary, lid=60.0, chunk=64, workers=1, members=20, extra=(),
    basis="total", threshold=0.5,
):  # fmt: skip
    wf = tmp_path / f"{name}.toml"
    text = BASE.format(
        lid=lid, chunk=chunk, workers=workers, members=members, vary=vary, basis=basis,
        threshold=threshold,
    )  # fmt: skip
    wf.write_text(text)
    cfg = load_workflow(wf, overrides=extra, output_dir=tmp_path / name)
    return run_basin(cfg, progress=False, extra_stages=ensemble_stages(cfg, announce=False))


def katz_cells(tp, lid, water=0.0, ambient=1350.0):
    """Every output of cells (Katz et al. 2003 by its table, as the runs evaluate them)."""
    model = get_model("katz2003")
    tp = np.atleast_1d(np.asarray(tp, float))
    options = CellOptions(
        ambient_potential_temperature_c=ambient, model=model, table=get_table(model),
        min_top_km=7.0,
    )  # fmt: skip
    return evaluate_cells(
        Cells(tp, np.full(tp.shape, lid), water), options, dtype=np.float32
    ).as_dict()


def read(run, name):
    with rasterio.open(run.run_dir / f"{name}.tif") as src:
        return src.read(1)


def test_latin_hypercube_marginals_are_uniform():
    # one member per stratum by construction (McKay, Beckman & Conover 1979): each of 10 equal
    # bins holds exactly N/10; a chi-square test of uniformity (Pearson 1900) passes trivially
    u = unit_samples(200, 3, seed=1, sampling="latin_hypercube")
    for d in range(3):
        counts = np.histogram(u[:, d], bins=10, range=(0, 1))[0]
        assert (counts == 20).all()
        stat = ((counts - 20.0) ** 2 / 20.0).sum()
        assert stat < chi2.ppf(0.95, 9)
    random = unit_samples(2000, 1, seed=1, sampling="random")[:, 0]
    counts = np.histogram(random, bins=10, range=(0, 1))[0]
    assert ((counts - 200.0) ** 2 / 200.0).sum() < chi2.ppf(0.999, 9)  # chi-square, 9 dof


def test_latin_hypercube_orders_its_columns_independently():
    """Each column is its own random permutation of the strata (McKay, Beckman & Conover 1979:
    the N strata of every input are paired at random, independently of the other inputs).

    Check values: each column's stratum indices floor(N u) are exactly 0..N-1 once each; between
    two independent random permutations Spearman's rank correlation has mean 0 and standard
    deviation 1/sqrt(N - 1) (its textbook null distribution, from memory), 0.071
    for N = 200: |rho| < 0.3 (4.2 sd) for the fixed seed. One permutation reused for every
    column would give rho = 1 up to the random position within each stratum."""
    members = 200
    u = unit_samples(members, 3, seed=1, sampling="latin_hypercube")
    strata = np.floor(u * members).astype(int)
    for d in range(3):
        assert sorted(strata[:, d]) == list(range(members))  # one member per stratum
    for d, e in ((0, 1), (0, 2), (1, 2)):
        assert not np.array_equal(strata[:, d], strata[:, e])
        rho = np.corrcoef(strata[:, d], strata[:, e])[0, 1]  # ranks = strata: Spearman's rho
        assert abs(rho) < 0.3, (d, e, rho)


def test_triangular_inverse_cdf_against_its_closed_form():
    """Triangular [low a, mode c, high b] = [0, 1, 4], skewed so that the two branches differ.

    Check values: the inverse of the triangular CDF F(x) = (x - a)^2/((b - a)(c - a)) for
    x <= c, 1 - (b - x)^2/((b - a)(b - c)) above (the common definition, as on the Wikipedia
    page "Triangular distribution", from memory; the round trip below checks it): F(c) = 1/4;
    x = a + sqrt(u (b - a)(c - a)) for u < F(c), else b - sqrt((1 - u)(b - a)(b - c)).
    Worked by hand: u = 0.1 -> sqrt(0.4) = 0.632455532; u = 0.25 -> 1 (the mode, both
    branches); u = 0.5 -> 4 - sqrt(6) = 1.550510257; u = 0.91 -> 4 - sqrt(1.08) = 2.960769515.
    Independently: scipy.stats.triang.ppf with c = 1/4, loc 0, scale 4."""
    from scipy.stats import triang

    tri = VarySpec(key="k", distribution="triangular", parameters=(0.0, 1.0, 4.0))
    u = np.array([0.1, 0.25, 0.5, 0.91])
    got = inverse_cdf(tri, u)
    np.testing.assert_allclose(got, [0.632455532, 1.0, 1.550510257, 2.960769515], atol=1e-9)
    np.testing.assert_allclose(got, triang.ppf(u, 0.25, loc=0.0, scale=4.0), rtol=1e-12)
    # the CDF at the values returns u (the round trip through the piecewise quadratic)
    x = np.asarray(inverse_cdf(tri, np.linspace(0.01, 0.99, 99)))
    cdf = np.where(x <= 1.0, x**2 / 4.0, 1.0 - (4.0 - x) ** 2 / 12.0)
    np.testing.assert_allclose(cdf, np.linspace(0.01, 0.99, 99), atol=1e-12)


def test_inverse_cdfs():
    u = np.array([0.5, 0.8413447460685429])  # Phi(1) = 0.841344746 (standard normal table)
    assert inverse_cdf(VarySpec(key="k", distribution="normal", parameters=(10.0, 2.0)), u) == (
        pytest.approx([10.0, 12.0])
    )
    same = inverse_cdf(VarySpec(key="k", distribution="normal", parameters=(10.0, 0.0)), u)
    assert same == [10.0, 10.0]  # zero spread: the mean itself
    tri = VarySpec(key="k", distribution="triangular", parameters=(0.0, 1.0, 2.0))
    assert inverse_cdf(tri, np.array([0.5]))[0] == pytest.approx(1.0)  # symmetric: median = mode
    logn = VarySpec(key="k", distribution="lognormal", parameters=(3.0, 0.5))
    assert inverse_cdf(logn, np.array([0.5]))[0] == pytest.approx(3.0)  # median of a lognormal
    pick = VarySpec(key="k", distribution="choice", parameters=("a", "b"), weights=(3.0, 1.0))
    assert inverse_cdf(pick, np.array([0.1, 0.74, 0.76])) == ["a", "a", "b"]  # cumulative 0.75


def test_draws_are_deterministic_for_a_seed():
    vary = [VarySpec(key="k", distribution="uniform", parameters=(0.0, 1.0))]
    a = draw_members(vary, 10, seed=5, sampling="latin_hypercube")
    assert a == draw_members(vary, 10, seed=5, sampling="latin_hypercube")
    assert a != draw_members(vary, 10, seed=6, sampling="latin_hypercube")


def test_percentiles_interpolate_between_order_statistics():
    # Hyndman & Fan (1996) definition 7: h = (N - 1) q / 100, x_floor(h) + frac(h) (x_next -
    # x_floor(h)); for the sorted values 1..5 (N = 5 finite): p10 h = 0.4 -> 1.4, p50 h = 2 -> 3,
    # p90 h = 3.6 -> 4.6, p100 -> 5, p0 -> 1 (worked by hand from the definition)
    values = np.array([5.0, 1.0, 4.0, 2.0, 3.0, np.nan])[:, None]
    got = member_percentiles(values, [0, 10, 50, 90, 100])[:, 0]
    np.testing.assert_allclose(got, [1.0, 1.4, 3.0, 4.6, 5.0], rtol=1e-15)


def test_zero_spread_equals_the_single_run(tmp_path):
    run = run_ensemble(
        tmp_path, "zero", vary='"model.ambient_potential_temperature_c" = {normal = [1400.0, 0]}',
        members=5, extra=["model.ambient_potential_temperature_c=1400"],
    )  # fmt: skip
    for base in ("melt_thickness_km", "anomaly_melt_thickness_km", "onset_depth_km"):
        single = read(run, base)
        for q in (10, 50, 90):
            np.testing.assert_array_equal(read(run, f"{base}_p{q}"), single)  # identity
    # identity: every member is the run itself, so the probability is 1 where the run's melt
    # reaches the threshold with a melt fraction at the top of at least the extraction minimum
    melt, top = read(run, "melt_thickness_km"), read(run, "max_melt_fraction")
    expected = (melt >= np.float32(0.5)) & (top >= np.float32(EXTRACTION_MIN_MELT_FRACTION))
    got = read(run, "melt_probability_total_ge_0.5km")
    np.testing.assert_array_equal(got, expected.astype(np.float32))
    assert got.max() == 1.0  # the lid of 60 km melts at Tp 1400 C
    totals = run.summary["ensemble"]["totals"]["melt_volume_km3"]
    assert totals["p50"] == pytest.approx(run.summary["statistics"]["melt_volume_km3"], rel=1e-6)
    np.testing.assert_array_equal(read(run, "members_without_value_fraction"), 0.0)
    # the threshold counts: a member whose melt equals T (its float32 value, every cell alike
    # beneath a constant lid) reaches it
    exact = float(melt[0, 0])
    assert np.all(melt == melt[0, 0])
    again = run_ensemble(
        tmp_path, "exact", vary='"model.ambient_potential_temperature_c" = {normal = [1400.0, 0]}',
        members=2, threshold=exact, extra=["model.ambient_potential_temperature_c=1400"],
    )  # fmt: skip
    (name,) = [n for n in again.summary["ensemble"]["outputs"] if n.startswith("melt_prob")]
    assert np.all(read(again, name) == 1.0)


@pytest.mark.parametrize(
    ("lid", "basis", "expected"),
    [(10.0, "total", 1.0), (200.0, "total", 0.0), (10.0, "anomaly", 0.0)],
)
def test_far_from_threshold_probability_is_0_or_1(tmp_path, lid, basis, expected):
    # a 10 km lid melts (far more than 0.5 km) for any Tp in 1300-1400 C and a 200 km lid not at
    # all (the column below the lid starts beneath the onset: excess_to_melt_k > 50 K); without
    # a thermal anomaly the anomaly adds nothing, however much ambient mantle melts
    assert katz_cells([1300.0], 10.0)["melt_thickness_km"][0] > 2.0
    assert katz_cells([1400.0], 200.0)["excess_to_melt_k"][0] > 50.0
    vary = '"model.ambient_potential_temperature_c" = {uniform = [1300.0, 1400.0]}'
    run = run_ensemble(tmp_path, f"far{lid:g}{basis}", vary=vary, lid=lid, members=10, basis=basis)
    assert np.all(read(run, f"melt_probability_{basis}_ge_0.5km") == expected)


def test_probability_equals_fraction_of_anomaly_interval_that_adds_the_threshold(tmp_path):
    """Held-out closed form, on the default basis: beneath a 90 km lid ambient mantle (1350 C)
    does not melt, so the melt the anomaly adds is the column's melt H(1350 + A), which grows
    with A. With the anomaly A uniform on [a, b] the probability that it adds >= T is
    (b - A*) / (b - a), A* the root of H(1350 + A) = T (found by root finding on the kernel,
    where the melt fraction at the top is well above the extraction minimum); a Latin
    hypercube of N members hits it within 1/N (one member per stratum)."""
    lid, members, threshold = 90.0, 40, 1.0
    assert katz_cells([1350.0], lid)["melt_thickness_km"][0] == 0.0

    def added(anomaly):
        return float(katz_cells([1350.0 + anomaly], lid)["melt_thickness_km"][0]) - threshold

    a_star = brentq(added, 0.0, 300.0, xtol=1e-6)
    top = katz_cells([1350.0 + a_star], lid)["max_melt_fraction"][0]
    assert top > 2 * EXTRACTION_MIN_MELT_FRACTION
    a, b = a_star - 30.0, a_star + 10.0
    vary = f'"inputs.thermal_anomaly.constant" = {{uniform = [{a!r}, {b!r}]}}'
    run = run_ensemble(
        tmp_path, "onset", vary=vary, lid=lid, members=members, basis="anomaly",
        threshold=threshold, extra=["inputs.thermal_anomaly.constant=0.0"],
    )  # fmt: skip
    prob = read(run, "melt_probability_anomaly_ge_1km")
    assert np.all(prob == prob.flat[0])
    assert abs(float(prob.flat[0]) - 0.25) <= 1.0 / members


def test_a_column_below_the_extraction_minimum_does_not_count(tmp_path):
    """Two Tp beneath a 60 km lid: one whose melt fraction at the top is half the extraction
    minimum, one with twice it (roots found on the kernel). Both melt more than the threshold
    (1 m); only the second counts (the definition, lidmelt.ensemble._kernel)."""
    lid = 60.0

    def top(tp, target):
        return float(katz_cells([tp], lid)["max_melt_fraction"][0]) - target

    for share, expected in ((0.5, 0.0), (2.0, 1.0)):
        tp = brentq(top, 1250.0, 1450.0, args=(share * EXTRACTION_MIN_MELT_FRACTION,), xtol=1e-6)
        assert katz_cells([tp], lid)["melt_thickness_km"][0] > 0.001
        run = run_ensemble(
            tmp_path, f"fmin{share:g}", lid=lid, members=3, threshold=0.001,
            vary=f'"model.ambient_potential_temperature_c" = {{normal = [{tp!r}, 0]}}',
            extra=[f"model.ambient_potential_temperature_c={tp!r}"],
        )  # fmt: skip
        assert np.all(read(run, "melt_probability_total_ge_0.001km") == expected)


def test_percentile_maps_equal_an_independent_computation(tmp_path):
    """Each cell's percentile is numpy's "linear" percentile (Hyndman & Fan definition 7) of the
    members' melt thickness, each member evaluated here from its Tp (ensemble_members.csv)."""
    vary = '"model.ambient_potential_temperature_c" = {uniform = [1330.0, 1420.0]}'
    run = run_ensemble(tmp_path, "mono", vary=vary, lid=40.0, members=11)
    members = pd.read_csv(run.run_dir / "ensemble_members.csv")
    tps = members["model.ambient_potential_temperature_c"].to_numpy()
    melt = katz_cells(tps, 40.0)["melt_thickness_km"].astype(np.float32)
    for q in (10, 50, 90):
        expected = np.float32(np.percentile(melt.astype(np.float64), q, method="linear"))
        np.testing.assert_allclose(read(run, f"melt_thickness_km_p{q}"), expected, rtol=2e-7)
    totals = run.summary["ensemble"]["totals"]["melt_volume_km3"]
    volume = members["melt_volume_km3"].to_numpy()
    for q in (10, 50, 90):  # the totals: the same definition
        assert totals[f"p{q}"] == pytest.approx(
            np.percentile(volume, q, method="linear"), rel=1e-12
        )


def test_the_warning_names_the_values_that_set_the_members_apart():
    """Members without a value are those with b > 0.8: b sets them apart (the Mann-Whitney
    statistic U / (n1 n0) = 1, Mann & Whitney 1947: every affected value exceeds every other),
    the other keys do not (a Latin hypercube draws them independently of b)."""
    vary = [
        VarySpec(key="a", distribution="uniform", parameters=(0.0, 1.0)),
        VarySpec(key="b", distribution="uniform", parameters=(0.0, 1.0)),
        VarySpec(key="c", distribution="choice", parameters=("x", "y")),
    ]
    samples = draw_members(vary, 40, seed=3, sampling="latin_hypercube")
    b = np.array([row[1] for row in samples])
    affected = b > 0.8
    named = key_contrast(vary, samples, affected)
    low, high = b[affected].min(), b[affected].max()
    assert named == [
        f"b from {low:.6g} to {high:.6g} (the others {b[~affected].min():.6g} to "
        f"{b[~affected].max():.6g})"
    ]
    sums = {
        "cells_without_value": np.where(affected, 3, 0),
        "cells_no_onset": np.where(affected, 3, 0),
        "cells_invalid_input": np.zeros(40, np.int64),
    }
    entry = missing_summary(vary, samples, sums)
    assert entry["members"] == affected.sum()
    assert entry["member_numbers"] == [int(k) + 1 for k in np.flatnonzero(affected)]
    text = missing_warning(entry, 40)
    assert text.startswith(f"{affected.sum()} of 40 ensemble members")
    assert named[0] in text
    few = {**sums, "cells_without_value": np.where(np.arange(40) < 2, 1, 0)}  # 5 %: no warning
    assert missing_warning(missing_summary(vary, samples, few), 40) is None


DEMO_VARY = """
"model.ambient_potential_temperature_c" = {normal = [1350.0, 25.0]}
"lithosphere.lid_isotherm_c" = {uniform = [1050.0, 1250.0]}
"inputs.water.constant" = {uniform = [0.005, 0.03]}
"""


def _ensemble_files(run):
    names = run.summary["ensemble"]["outputs"]
    return [read(run, n) for n in names], (run.run_dir / "ensemble_members.csv").read_text()


def test_same_outputs_whatever_the_chunking_and_workers(tmp_path):
    base = run_ensemble(tmp_path, "c64", vary=DEMO_VARY, lid=70.0, chunk=64, workers=1)
    other = run_ensemble(tmp_path, "c128", vary=DEMO_VARY, lid=70.0, chunk=128, workers=2)
    (a, csv_a), (b, csv_b) = _ensemble_files(base), _ensemble_files(other)
    for x, y in zip(a, b, strict=True):
        np.testing.assert_array_equal(x, y)
    assert csv_a == csv_b
    assert base.summary["ensemble"]["totals"] == other.summary["ensemble"]["totals"]


@pytest.mark.slow
def test_distributed_local_cluster_matches_threads(tmp_path):
    import distributed  # required (pyproject): a missing one fails, never skips

    base = run_ensemble(tmp_path, "threads", vary=DEMO_VARY, lid=70.0, chunk=64)
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    ) as cluster:
        other = run_ensemble(
            tmp_path, "cluster", vary=DEMO_VARY, lid=70.0, chunk=64,
            extra=[f'compute.scheduler="{cluster.scheduler_address}"'],
        )  # fmt: skip
    (a, csv_a), (b, csv_b) = _ensemble_files(base), _ensemble_files(other)
    for x, y in zip(a, b, strict=True):
        np.testing.assert_array_equal(x, y)
    assert csv_a == csv_b


def test_members_csv_and_summary(tmp_path):
    vary = DEMO_VARY + '"lithosphere.cooling" = {choice = ["half-space", "gdh1"]}\n'
    run = run_ensemble(tmp_path, "sum", vary=vary, lid=70.0, members=6)
    summary = json.loads((run.run_dir / "summary.json").read_text())["ensemble"]
    assert summary["members"] == 6
    assert summary["sampling"] == "latin_hypercube"
    assert summary["tables_built"] == 1  # Tp, lid and water change no model parameter
    assert summary["probability"]["basis"] == "total"
    assert summary["probability"]["outputs"] == ["melt_probability_total_ge_0.5km"]
    assert summary["probability"]["min_melt_fraction"] == EXTRACTION_MIN_MELT_FRACTION
    assert set(summary["totals"]["melt_volume_km3"]) == {"p10", "p50", "p90", "mean", "members"}
    assert summary["members_without_value"]["members"] == 0
    assert [d["key"] for d in summary["drivers"]].count("lithosphere.cooling") == 1
    head = (run.run_dir / "ensemble_members.csv").read_text().splitlines()[0].split(",")
    assert head[0] == "member"
    assert head[-4:] == [
        "melting_area_km2",
        "melt_volume_km3",
        "anomaly_melt_volume_km3",
        "cells_without_value",
    ]
    assert len((run.run_dir / "ensemble_members.csv").read_text().splitlines()) == 7


NO_ONSET = """
[run]
name = "hot"
[grid]
extent = [0.0, 0.5, 0.0, 0.5]
resolution = 0.1
[inputs.lid_thickness]
constant = 80.0
[inputs.thermal_anomaly]
constant = 400.0
[model]
name = "mckenzie-bickle1988"
[compute]
chunk_size = 64
[ensemble]
members = 20
seed = 1
[ensemble.vary]
"model.ambient_potential_temperature_c" = { uniform = [1300.0, 1500.0] }
"""


def test_hot_members_melt_more_with_mckenzie_bickle(tmp_path):
    """McKenzie & Bickle, an 80 km lid, a 400 K anomaly, ambient Tp uniform 1300-1500 C (the
    case where members without an onset once counted as zero and Tp's rank correlation came out
    negative): every column now has an onset (the hottest at the upper mantle's floor,
    lidmelt.physics.FLAG_UPPER_MANTLE_FLOOR), and the volume grows with Tp (hotter mantle melts
    more: McKenzie & Bickle 1988), so Tp's rank correlation with it is positive."""
    wf = tmp_path / "hot.toml"
    wf.write_text(NO_ONSET)
    cfg = load_workflow(wf, output_dir=tmp_path / "hot")
    stages = ensemble_stages(cfg, announce=False, candidates=ensemble_candidates)
    run = run_basin(cfg, progress=False, extra_stages=stages)
    entry = run.summary["ensemble"]
    members = pd.read_csv(run.run_dir / "ensemble_members.csv")
    assert (members["cells_without_value"] == 0).all()
    assert entry["totals"]["melt_volume_km3"]["members"] == len(members)
    (tp_driver,) = entry["drivers"]
    assert tp_driver["rank_correlation_melt_volume"] > 0.9
    assert tp_driver["rank_correlation_interval"][0] > 0
    (whole,) = entry["candidates"]["list"]  # the 400 K anomaly adds melt everywhere: one region
    assert whole["drivers"][0]["rank_correlation_melt_volume"] > 0.9


COLD = (
    NO_ONSET.replace("constant = 80.0", "constant = 60.0")
    .replace("constant = 400.0", "constant = 0.0")
    .replace('"mckenzie-bickle1988"', '"katz2003"')
    .replace("[1300.0, 1500.0]", "[1000.0, 1500.0]")
)


def test_members_without_a_value_are_counted_not_zero(tmp_path):
    """Katz et al. 2003, a 60 km lid, no anomaly, ambient Tp uniform 1000-1500 C: the members
    whose Tp is below the model's surface solidus (A1 = 1085.7 C, Katz et al. 2003 Table 2,
    from memory, not checked against the publication) have no value in any cell (an invalid
    input, never a melt of 0). They are counted and left out of the totals, percentiles and
    drivers."""
    wf = tmp_path / "cold.toml"
    wf.write_text(COLD)
    cfg = load_workflow(wf, output_dir=tmp_path / "cold")
    stages = ensemble_stages(cfg, announce=False, candidates=ensemble_candidates)
    run = run_basin(cfg, progress=False, extra_stages=stages)
    entry = run.summary["ensemble"]
    members = pd.read_csv(run.run_dir / "ensemble_members.csv")
    tp = members["model.ambient_potential_temperature_c"].to_numpy()
    cold = members["cells_without_value"].to_numpy() > 0
    assert 0 < cold.sum() < len(members)
    assert tp[cold].max() < 1085.7 < tp[~cold].min()
    assert members.loc[cold, "melt_volume_km3"].isna().all()
    assert (members.loc[cold, "cells_without_value"] == 25).all()  # every cell of the grid
    assert entry["members_without_value"]["members"] == cold.sum()
    assert entry["members_without_value"]["member_cells_invalid_input"] == 25 * cold.sum()
    assert entry["totals"]["melt_volume_km3"]["members"] == (~cold).sum()
    assert any("20 ensemble members" in w for w in run.summary["warnings"])
    (tp_driver,) = entry["drivers"]
    assert tp_driver["rank_correlation_melt_volume"] > 0.9
    share = read(run, "members_without_value_fraction")
    assert np.all(share == np.float32(cold.sum() / len(members)))
    p50 = read(run, "melt_thickness_km_p50")  # over the members with a value only
    expected = np.percentile(members.loc[~cold, "melt_volume_km3"], 50, method="linear")
    area = run.summary["statistics"]["melt_volume_km3"] / float(
        read(run, "melt_thickness_km")[0, 0]
    )
    assert float(np.nanmean(p50)) * area == pytest.approx(expected, rel=1e-4)


@pytest.mark.slow
def test_distinct_model_parameters_build_one_table_each(tmp_path):
    vary = '"model.parameters.cpx_mass_fraction" = {choice = [0.15, 0.2]}'
    run = run_ensemble(tmp_path, "tables", vary=vary, lid=40.0, members=4)
    assert run.summary["ensemble"]["tables_built"] == 2


def test_memory_limit_refuses_what_will_not_fit(tmp_path):
    wf = tmp_path / "big.toml"
    wf.write_text(
        BASE.format(
            lid=60.0,
            chunk=2048,
            workers=2,
            members=500,
            vary=DEMO_VARY,
            basis="anomaly",
            threshold=1.0,
        )
    )
    # refused while the workflow is read, before any member is drawn
    with pytest.raises(WorkflowError, match=r"ensemble\.members = 500 ") as refused:
        load_workflow(wf)
    figure = re.search(
        r"needs about ([0-9.e+]+) GB, over ensemble\.memory_limit_gb = 2 GB", str(refused.value)
    )
    # at least the members' kept layers: 2048^2 cells x 2 workers x 500 members x 3 float32
    # outputs and their sorted copy (24 bytes; the estimate documented in lidmelt.ensemble._stage)
    assert float(figure[1]) >= 2048**2 * 2 * 500 * 24 / 1e9
    # the stage checks again with the members' input groups (here one: the lower bound above)
    cfg = load_workflow(wf, overrides=["ensemble.memory_limit_gb=1e6"])
    limited = dataclasses.replace(
        cfg, ensemble=dataclasses.replace(cfg.ensemble, memory_limit_gb=2.0)
    )
    with pytest.raises(WorkflowError, match="memory_limit_gb"):
        ensemble_stages(limited, announce=False)


@pytest.mark.parametrize(
    ("vary", "match"),
    [
        ('"grid.resolution" = {uniform = [0.1, 0.2]}', "not a workflow key an ensemble can vary"),
        (
            '"model.ambient_potential_temperature_c" = {gauss = [1, 2]}',
            "names the distribution 'gauss', which is not known; the known distributions are "
            "normal, uniform, lognormal, triangular, choice",
        ),
        (
            '"model.ambient_potential_temperature_c" = {normal = [1, 2], uniform = [1, 2]}',
            "exactly one",
        ),
        ('"model.ambient_potential_temperature_c" = {uniform = [2, 1]}', "low <= high"),
        ('"model.ambient_potential_temperature_c" = {uniform = [1350, 3000]}', "outside"),
    ],
)
def test_bad_vary_tables_are_refused(tmp_path, vary, match):
    wf = tmp_path / "bad.toml"
    wf.write_text(
        BASE.format(
            lid=60.0, chunk=64, workers=1, members=20, vary=vary, basis="anomaly", threshold=1.0
        )
    )
    with pytest.raises(WorkflowError, match=match):
        load_workflow(wf)


@pytest.mark.parametrize(
    ("override", "match"),
    [
        ('ensemble.probability_basis="deep"', "'deep', which is not known"),
        ("ensemble.thresholds_km=[]", "is empty; list at least one melt thickness"),
        ("ensemble.thresholds_km=[0.0]", "outside"),
    ],
)
def test_bad_probability_keys_are_refused(tmp_path, override, match):
    wf = tmp_path / "bad.toml"
    wf.write_text(BASE.format(lid=60.0, chunk=64, workers=1, members=4, vary=DEMO_VARY,
                              basis="anomaly", threshold=1.0))  # fmt: skip
    with pytest.raises(WorkflowError, match=match):
        load_workflow(wf, overrides=[override])


def test_the_probability_threshold_defaults_to_the_candidates(tmp_path):
    # one melt for the candidates and the probability (docs/workflow.md, [ensemble])
    text = BASE.format(lid=60.0, chunk=64, workers=1, members=4, vary=DEMO_VARY, basis="anomaly",
                       threshold=1.0).replace("thresholds_km = [1.0]\n", "")  # fmt: skip
    assert "thresholds_km" not in text
    wf = tmp_path / "default.toml"
    wf.write_text(text)
    cfg = load_workflow(wf, overrides=["ensemble.candidate_min_melt_km=2.5"])
    assert cfg.ensemble.thresholds_km == (2.5,)
    assert cfg.ensemble.probability_basis == "anomaly"


def test_registry_knows_the_ensemble_outputs():
    p = get_variable("melt_probability_anomaly_ge_1km")
    assert (p.units, p.style) == ("1", "probability")
    assert p.long_name == "probability that the melt the thermal anomaly adds is at least 1 km"
    total = ensemble_variable("melt_probability_total_ge_0.5km")
    assert total.long_name == "probability that the melt thickness is at least 0.5 km"
    parsed = parse_ensemble_name("melt_probability_total_ge_0.5km")
    assert (parsed.basis, parsed.base, parsed.threshold_km) == ("total", "melt_thickness_km", 0.5)
    assert ensemble_variable("melt_probability_deep_ge_1km") is None  # no such basis
    p90 = get_variable("melt_thickness_km_p90")
    assert p90.units == "km"
    assert p90.style == "melt"
    assert p90.long_name == "melt thickness, 90th percentile of the ensemble"
    assert ensemble_variable("onset_depth_km_p2").long_name.endswith(
        "2nd percentile of the ensemble"
    )
    assert ensemble_variable("nothing_p5") is None
    assert get_variable("members_without_value_fraction").units == "1"
    for old in ("melt_probability", "melt_probability_ge_2km"):  # an earlier lidmelt's names
        assert ensemble_variable(old) is None
        with pytest.raises(InputError, match="earlier lidmelt"):
            get_variable(old)


def test_percentiles_equal_numpy_on_every_kind_of_cell():
    """Cells whose members agree are not sorted; check values: numpy's nanpercentile with
    method "linear" (Hyndman & Fan 1996 definition 7) of each cell's finite members."""
    rng = np.random.default_rng(5)
    stack = rng.random((40, 600)).astype(np.float32)
    stack[:, :100] = 0.0  # every member equal
    stack[:, 100:150] = np.nan  # no member has a value
    stack[rng.random(stack.shape) < 0.2] = np.nan  # some members without a value
    stack[:, 150:200] = np.round(stack[:, 150:200] * 3)  # ties
    stack[:, 200:210] = np.nan
    stack[0, 200:210] = 0.25  # one member with a value
    qs = (10, 50, 90)
    got = member_percentiles(stack, qs)
    with pytest.warns(RuntimeWarning):  # numpy warns of the all-NaN cells
        expected = np.nanpercentile(stack.astype(np.float64), qs, axis=0, method="linear")
    np.testing.assert_allclose(got, expected.astype(np.float32), rtol=2e-7, equal_nan=True)
    assert got.dtype == np.float32
