"""Tests of the products of an ensemble run: probability screening, probability and
percentile maps, the member histogram and the report's ensemble section.

The ensemble run directories are the tests' own invention, written as the ensemble run's
contract describes them (probability maps, percentile maps, ``ensemble_members.csv`` and the
summary's ``"ensemble"`` entry): an equal-area grid (EPSG:6933, 20 km cells, so every cell has
400 km^2 to rtol 1.5e-5, the projection's own round-off as in tests/test_regions.py) with
plume A, whose core (within 100 km of its centre) has probability 0.9 that the melt the anomaly
adds reaches 1 km (``melt_probability_anomaly_ge_1km``, the run's probability of melting) and
whose ring (100-160 km) has 0.3, and plume B (within 80 km) with 0.6. Only A's core melts in the
run's own outputs (2 km). The probability that it reaches 2 km is 0.7, 0.1 and 0.2 there. Check
values come from these constructed fields (as stored in float32), from the documented rules, or
from an analytic identity named beside them.
"""

from __future__ import annotations

import base64
import json
import math
import re
from pathlib import Path

import cartopy.crs  # noqa: F401 - required (pyproject): a missing one fails, never skips
import numpy as np
import pandas as pd
import pytest
import rasterio
from affine import Affine

from conftest import reseal
from lidmelt._errors import InputError, RunDirError
from lidmelt._variables import ordinal
from lidmelt.cli import main
from lidmelt.ensemble._drivers import NOISE
from lidmelt.products import _ensemble as ens
from lidmelt.products._maps._figure import make_map_figure
from lidmelt.products._maps._members import member_histogram
from lidmelt.products._maps._probability import draw_level_contours, fixed_limits
from lidmelt.products._maps._style import style_for
from lidmelt.products._report._ensemble import ordered_drivers
from lidmelt.products._report._write import write_report
from lidmelt.products._screening import screen

CELL_KM2 = 400.0  # 20 km x 20 km cells of an equal-area grid
T = Affine(20_000.0, 0, 0.0, 0, -20_000.0, 400_000.0)  # 40 rows x 60 columns
SHAPE = (40, 60)
CENTRE_A, CENTRE_B = (400_000.0, 0.0), (950_000.0, -150_000.0)

VARY = {
    "model.ambient_potential_temperature_c": {"distribution": "normal", "mean": 1350.0, "sd": 25.0},
    "inputs.water.constant": {"distribution": "uniform", "low": 0.005, "high": 0.03},
    "cooling.model": {"distribution": "choice", "values": ["half_space", "gdh1"]},
}
# Invented drivers, deliberately not in ranked order; the cooling model's share interval
# reaches 0: it is not a driver although its share is larger than the water's.
DRIVERS = [
    {
        "key": "inputs.water.constant",
        "rank_correlation_melt_volume": 0.21,
        "rank_correlation_interval": [0.08, 0.33],
        "variance_fraction": 0.05,
        "variance_fraction_interval": [0.01, 0.09],
        "driver": True,
        "assessment": "driver",
    },
    {
        "key": "model.ambient_potential_temperature_c",
        "rank_correlation_melt_volume": 0.93,
        "rank_correlation_interval": [0.88, 0.96],
        "variance_fraction": 0.86,
        "variance_fraction_interval": [0.8, 0.9],
        "driver": True,
        "assessment": "driver",
    },
    {
        "key": "cooling.model",
        "rank_correlation_melt_volume": -0.12,
        "rank_correlation_interval": [-0.25, 0.02],
        "variance_fraction": 0.07,
        "variance_fraction_interval": [0.0, 0.15],
        "driver": False,
        "assessment": NOISE,
    },
]
PROBABILITY = {
    "basis": "anomaly",
    "thresholds_km": [1.0, 2.0],
    "outputs": ["melt_probability_anomaly_ge_1km", "melt_probability_anomaly_ge_2km"],
    "min_melt_fraction": 0.005,
}
P1, P2 = PROBABILITY["outputs"]


def f32(x):
    return float(np.float32(x))


def masks():
    x = T.c + T.a * (np.arange(SHAPE[1]) + 0.5)
    y = T.f + T.e * (np.arange(SHAPE[0]) + 0.5)
    x, y = np.meshgrid(x, y)
    ra = np.hypot(x - CENTRE_A[0], y - CENTRE_A[1]) / 1000.0
    rb = np.hypot(x - CENTRE_B[0], y - CENTRE_B[1]) / 1000.0
    return {"core": ra < 100.0, "ring": (ra >= 100.0) & (ra < 160.0), "b": rb < 80.0}


def members_table(n=200, seed=3):
    """Invented members: melt volume rises 50 km^3 per K of ambient Tp, plus noise."""
    rng = np.random.default_rng(seed)
    tp = rng.normal(1350.0, 25.0, n)
    volume = 50.0 * (tp - 1280.0) + rng.normal(0.0, 100.0, n)
    return pd.DataFrame(
        {
            "member": np.arange(n),
            "model.ambient_potential_temperature_c": tp,
            "inputs.water.constant": rng.uniform(0.005, 0.03, n),
            "cooling.model": rng.choice(["half_space", "gdh1"], n),
            "melting_area_km2": volume * 10.0,
            "melt_volume_km3": volume,
            "anomaly_melt_volume_km3": 0.8 * volume,
        }
    )


def percentile_hf7(values, q):
    """The q-th percentile by Hyndman & Fan (1996, Am. Stat. 50, 361-365) definition 7, the one
    the runs use (lidmelt.ensemble._kernel, module notes), written out here from the definition:
    sorted x_0 <= ... <= x_(N-1), h = (N - 1) q / 100, x_floor(h) + (h - floor(h)) (x_next -
    x_floor(h)). Worked by hand: the values 1..5 give p10 = 1.4, p50 = 3, p90 = 4.6."""
    x = sorted(float(v) for v in values)
    h = (len(x) - 1) * q / 100.0
    lo = math.floor(h)
    return x[lo] + (h - lo) * (x[min(lo + 1, len(x) - 1)] - x[lo])


def test_the_percentile_definition_by_hand():
    assert [percentile_hf7([5, 1, 4, 2, 3], q) for q in (0, 10, 50, 90, 100)] == pytest.approx(
        [1.0, 1.4, 3.0, 4.6, 5.0], rel=1e-15
    )


def totals_of(members):
    out = {}
    for col in ("melting_area_km2", "melt_volume_km3", "anomaly_melt_volume_km3"):
        v = members[col].to_numpy()
        out[col] = {f"p{q}": percentile_hf7(v, q) for q in (10, 50, 90)}
        out[col]["mean"] = float(v.mean())
    return out


def set_units(run, units):
    doc = json.loads((run / "summary.json").read_text(encoding="utf-8"))
    for name, unit in units.items():
        doc["outputs"][name]["units"] = unit
        doc["outputs"][name]["long_name"] = name
    reseal(run, **doc)  # lidmelt refuses a summary edited without its manifest


@pytest.fixture
def ensemble_run(make_run_dir):
    m = masks()
    melt = np.where(m["core"], 2.0, 0.0)
    prob = np.select([m["core"], m["ring"], m["b"]], [0.9, 0.3, 0.6], 0.0)
    prob_2km = np.select([m["core"], m["ring"], m["b"]], [0.7, 0.1, 0.2], 0.0)
    members = members_table()
    ensemble = {
        "members": len(members),
        "seed": 42,
        "sampling": "latin_hypercube",
        "vary": VARY,
        "probability": PROBABILITY,
        "thresholds_km": [1.0, 2.0],
        "percentiles": [10, 50, 90],
        "tables_built": 2,
        "members_without_value": {"members": 0, "share": 0.0},
        "totals": totals_of(members),
        "drivers": DRIVERS,
        "drivers_method": {"interval": 0.9, "replicates": 1000},
    }
    run = make_run_dir(
        {
            "melt_thickness_km": melt,
            "anomaly_melt_thickness_km": melt,
            P1: prob,
            P2: prob_2km,
            "melt_thickness_km_p10": 0.5 * melt,
            "melt_thickness_km_p90": 1.5 * melt,
            "anomaly_melt_thickness_km_p10": 0.5 * melt,
            "anomaly_melt_thickness_km_p90": 1.5 * melt,
        },
        transform=T,
        crs="EPSG:6933",
        summary={"ensemble": ensemble},
        name="ensemble",
    )
    set_units(
        run,
        {
            P1: "1",
            P2: "1",
            "melt_thickness_km_p10": "km",
            "melt_thickness_km_p90": "km",
            "anomaly_melt_thickness_km_p10": "km",
            "anomaly_melt_thickness_km_p90": "km",
        },
    )
    members.to_csv(run / ens.MEMBERS_FILE, index=False)
    reseal(run)
    return run, m, members


@pytest.fixture
def single_run(make_run_dir):
    melt = np.where(masks()["core"], 2.0, 0.0)
    return make_run_dir(
        {"melt_thickness_km": melt, "anomaly_melt_thickness_km": melt},
        transform=T,
        crs="EPSG:6933",
        name="single",
    )


# ---------------------------------------------------------------------------------------
# Names of the ensemble outputs
# ---------------------------------------------------------------------------------------


def test_ensemble_names():
    """The contract's names: melt_probability_<basis>_ge_<T %g>km, <base>_p<q>."""
    assert ens.probability_name("anomaly", 1.0) == "melt_probability_anomaly_ge_1km"
    assert ens.probability_name("total", 0.5) == "melt_probability_total_ge_0.5km"
    parsed = ens.parse_ensemble_name("melt_probability_total_ge_0.5km")
    assert (parsed.kind, parsed.basis, parsed.threshold_km) == ("probability", "total", 0.5)
    p90 = ens.parse_ensemble_name("anomaly_melt_thickness_km_p90")
    assert (p90.kind, p90.base, p90.percentile) == ("percentile", "anomaly_melt_thickness_km", 90)
    assert ens.parse_ensemble_name("melt_thickness_km") is None
    assert ens.parse_ensemble_name("not_a_variable_p90") is None
    assert ens.parse_ensemble_name("melt_probability") is None  # an earlier lidmelt's name
    assert ens.variable_of(P1).units == "1"
    assert ens.variable_of("onset_depth_km_p50").units == "km"
    # English ordinals
    assert [ordinal(q) for q in (1, 2, 3, 10, 11, 12, 22, 2.5)] == [
        "1st", "2nd", "3rd", "10th", "11th", "12th", "22nd", "2.5th"
    ]  # fmt: skip


def test_run_probability_is_the_first_threshold(ensemble_run):
    from lidmelt.grids._rundir import open_run

    run = open_run(ensemble_run[0])
    assert ens.run_probability(run) == P1
    assert ens.probability_maps(run) == [P1, P2]
    assert ens.run_probability(run, "total") is None


# ---------------------------------------------------------------------------------------
# Screening by probability
# ---------------------------------------------------------------------------------------


def test_probability_screening_finds_the_likely_cells(ensemble_run):
    run, m, _ = ensemble_run
    out = screen(run, min_probability=0.5)
    assert out.attrs["lidmelt_probability"] == P1
    assert list(out["n_cells"]) == [m["core"].sum(), m["b"].sum()]  # A melts: rank 1
    assert list(out["probability_basis"]) == ["anomaly", "anomaly"]
    assert list(out["probability_threshold_km"]) == [1.0, 1.0]
    a, b = out.iloc[0], out.iloc[1]
    assert a["mean_probability"] == pytest.approx(f32(0.9), rel=1e-12)  # uniform core
    assert a["max_probability"] == f32(0.9)
    assert b["mean_probability"] == pytest.approx(f32(0.6), rel=1e-12)
    np.testing.assert_allclose(a["likely_area_km2"], CELL_KM2 * m["core"].sum(), rtol=1.5e-5)
    np.testing.assert_allclose(b["likely_area_km2"], CELL_KM2 * m["b"].sum(), rtol=1.5e-5)
    np.testing.assert_allclose(a["melt_volume_km3"], 2.0 * CELL_KM2 * m["core"].sum(), rtol=1.5e-5)
    assert b["melt_volume_km3"] == 0.0  # likely in the ensemble, dry in the run's own outputs


def test_lower_probability_takes_the_ring_and_weights_the_mean(ensemble_run):
    """P = 0.25 adds A's ring (0.3): the area-weighted mean of equal cells is the cell mean;
    only the core is likely (>= 0.5)."""
    run, m, _ = ensemble_run
    a = screen(run, min_probability=0.25).iloc[0]
    n_core, n_ring = m["core"].sum(), m["ring"].sum()
    assert a["n_cells"] == n_core + n_ring
    expected = (f32(0.9) * n_core + f32(0.3) * n_ring) / (n_core + n_ring)
    assert a["mean_probability"] == pytest.approx(expected, rel=1e-5)  # equal areas, rtol 1.5e-5
    np.testing.assert_allclose(a["likely_area_km2"], CELL_KM2 * n_core, rtol=1.5e-5)


def test_probability_of_a_thickness_and_both_thresholds(ensemble_run):
    run, m, _ = ensemble_run
    out = screen(run, min_probability=0.5, probability=2.0)
    assert out.attrs["lidmelt_probability"] == P2
    assert list(out["n_cells"]) == [m["core"].sum()]  # B: 0.2 < 0.5
    assert out.iloc[0]["mean_probability"] == pytest.approx(f32(0.7), rel=1e-12)
    assert out.iloc[0]["probability_threshold_km"] == 2.0
    same = screen(run, min_probability=0.5, probability=P2)
    assert list(same["n_cells"]) == list(out["n_cells"])
    # Both thresholds: a cell must pass both (the ring has p 0.3 but no melt).
    both = screen(run, min_probability=0.25, min_melt_thickness_km=1.0)
    assert list(both["n_cells"]) == [m["core"].sum()]


def test_melt_screening_of_an_ensemble_carries_probability_and_single_runs_do_not(
    ensemble_run, single_run
):
    run, _, _ = ensemble_run
    out = screen(run, min_melt_thickness_km=1.0)
    assert out.iloc[0]["max_probability"] == f32(0.9)
    assert out.attrs["lidmelt_probability"] == P1
    single = screen(single_run, min_melt_thickness_km=1.0)
    assert not set(ens.PROBABILITY_STATISTICS) & set(single.columns)
    assert single.attrs["lidmelt_probability"] == ""


def test_probability_screening_errors(ensemble_run, single_run):
    run, _, _ = ensemble_run
    with pytest.raises(RunDirError, match=r"not an ensemble.*docs/workflow.md, \[ensemble\]"):
        screen(single_run, min_probability=0.5)
    with pytest.raises(RunDirError, match=f"of basis 'anomaly' are {P1}, {P2}"):
        screen(run, min_probability=0.5, probability=3.0)
    # the screen's own basis: a run whose probabilities are of another basis is refused,
    # the message naming both
    with pytest.raises(RunDirError, match=r"screening basis 'total' \(all melt\).*of basis "):
        screen(run, min_probability=0.5, basis="total")
    with pytest.raises(RunDirError, match="screening basis 'total'"):
        screen(run, min_probability=0.5, basis="total", probability=P1)
    for bad in (0.0, 1.5, float("nan"), "high"):
        with pytest.raises(InputError, match=r"not a probability in \(0, 1\]"):
            screen(run, min_probability=bad)
    with pytest.raises(InputError, match="needs a threshold"):
        screen(run)
    with pytest.raises(InputError, match="no --min-probability P was given"):
        screen(run, min_melt_thickness_km=1.0, probability=1.0)
    with pytest.raises(InputError, match="not a probability map name"):
        screen(run, min_probability=0.5, probability="melt_thickness_km")
    for bad in (-1.0, 0.0):
        with pytest.raises(InputError, match="not a melt thickness"):
            screen(run, min_probability=0.5, probability=bad)


def test_a_run_of_an_earlier_lidmelt_is_refused_clearly(make_run_dir):
    """An ensemble run made before probabilities had a basis (melt_probability: any melt)."""
    melt = np.where(masks()["core"], 2.0, 0.0)
    run = make_run_dir(
        {"melt_thickness_km": melt, "anomaly_melt_thickness_km": melt, "melt_probability": melt},
        transform=T, crs="EPSG:6933", name="old", summary={"ensemble": {"members": 5}},
    )  # fmt: skip
    with pytest.raises(RunDirError, match=r"earlier lidmelt: its probability maps \(melt_prob"):
        screen(run, min_probability=0.5)
    single = screen(run, min_melt_thickness_km=1.0)  # screening its melt still works
    assert "mean_probability" not in single.columns
    with pytest.raises(InputError, match=r"earlier lidmelt.*Run 'lidmelt run'"):
        make_map_figure(run, "melt_probability", coastlines=False, dpi=60)


def test_cli_screen_min_probability(ensemble_run, single_run, tmp_path, capsys):
    import geopandas as gpd

    run, m, _ = ensemble_run
    out = tmp_path / "c.gpkg"
    assert main(["screen", str(run), "--min-probability", "0.5", "-o", str(out)]) == 0
    text = capsys.readouterr().out
    assert "mean_probability" in text
    assert "likely_area_km2" in text
    assert (
        f"2 candidate region(s) with {P1} (P(anomaly melt thickness >= 1 km)) >= 0.5 and area "
        ">= 0 km2" in text
    )
    assert "probability_basis" in text
    written = gpd.read_file(out)
    assert list(written["n_cells"]) == [m["core"].sum(), m["b"].sum()]
    assert written["max_probability"].tolist() == [f32(0.9), f32(0.6)]
    args = ["screen", str(run), "--min-probability", "0.5", "--probability-of", "2"]
    assert main([*args, "-o", str(out)]) == 0
    assert f"1 candidate region(s) with {P2} (P(" in capsys.readouterr().out
    total = ["screen", str(run), "--min-probability", "0.5", "--basis", "total", "-o", str(out)]
    assert main(total) == 1
    err = capsys.readouterr().err
    assert "screening basis 'total'" in err
    assert P1 in err
    assert main(["screen", str(single_run), "--min-probability", "0.5", "-o", str(out)]) == 1
    assert "[ensemble]" in capsys.readouterr().err
    assert main(["screen", str(run), "-o", str(out)]) == 1
    assert "--min-melt-thickness KM" in capsys.readouterr().err


# ---------------------------------------------------------------------------------------
# Maps
# ---------------------------------------------------------------------------------------


def test_probability_and_percentile_styles():
    for name in (P1, P2, "melt_probability_total_ge_0.5km"):
        style = style_for(name)
        assert (style.cmap, style.limits, style.contours) == ("magma_r", (0.0, 1.0), (0.5,))
        assert not style.zero_is_no_melt
    for base in ("melt_thickness_km", "onset_depth_km", "anomaly_melt_thickness_km"):
        pct, own = style_for(f"{base}_p90"), style_for(base)
        assert (pct.cmap, pct.zero_is_no_melt, pct.nan_is_no_melt, pct.percentiles) == (
            own.cmap,
            own.zero_is_no_melt,
            own.nan_is_no_melt,
            own.percentiles,
        )
        assert pct.title.endswith(", 90th percentile of the ensemble")


def test_fixed_limits_are_not_percentiles():
    """Limits are 0 and 1 whatever the values; arrows only for values beyond them."""
    assert fixed_limits(np.array([0.2, 0.3, np.nan]), (0.0, 1.0)) == (0.0, 1.0, "neither")
    assert fixed_limits(np.array([0.2, 1.2]), (0.0, 1.0)) == (0.0, 1.0, "max")


def test_level_contour_lies_where_the_field_equals_the_level():
    """p = 1 - r / 200 km is 0.5 on the circle r = 100 km (analytic); the traced contour,
    linear between cell centres 10 km apart, lies within 1 km of it."""
    import xarray as xr
    from matplotlib.figure import Figure

    xs = np.arange(-300.0, 301.0, 10.0)
    x, y = np.meshgrid(xs, xs)
    values = 1.0 - np.hypot(x, y) / 200.0
    da = xr.DataArray(values, coords={"y": xs, "x": xs}, dims=("y", "x"))
    ax = Figure().add_subplot()
    assert draw_level_contours(ax, da, values, ax.transData, (0.5, 2.0), fs=8.0) == (0.5,)
    black = [c for c in ax.collections if c.get_edgecolor()[0][:3].tolist() == [0.0, 0.0, 0.0]]
    vertices = np.vstack([p.vertices for p in black[0].get_paths()])
    np.testing.assert_allclose(np.hypot(vertices[:, 0], vertices[:, 1]), 100.0, atol=1.0)
    assert any(t.get_text() == "0.5" for t in ax.texts)  # the contour label


def test_level_contour_encloses_a_plateau_at_the_level():
    """A probability of exactly 0.5 (k/N members) inside r = 100 km, 0 outside, is inside the
    0.5 contour (the edge of the cells >= 0.5, as screening and the likely area count them):
    the contour lies between the last cell centre inside (r <= 100) and the first outside, and
    a field nowhere below 0.5 has none."""
    import xarray as xr
    from matplotlib.figure import Figure

    xs = np.arange(-300.0, 301.0, 10.0)
    x, y = np.meshgrid(xs, xs)
    r = np.hypot(x, y)
    values = np.where(r <= 100.0, 0.5, 0.0)
    da = xr.DataArray(values, coords={"y": xs, "x": xs}, dims=("y", "x"))
    ax = Figure().add_subplot()
    assert draw_level_contours(ax, da, values, ax.transData, (0.5,), fs=8.0) == (0.5,)
    vertices = np.vstack([p.vertices for c in ax.collections for p in c.get_paths()])
    radius = np.hypot(vertices[:, 0], vertices[:, 1])
    assert radius.min() >= 90.0
    assert radius.max() <= 100.0 + 10.0 * np.sqrt(2.0)
    flat = np.full(values.shape, 0.5)
    assert draw_level_contours(Figure().add_subplot(), da, flat, None, (0.5,), fs=8.0) == ()


def test_probability_map_has_fixed_limits_and_the_labelled_contour(ensemble_run, tmp_path):
    run, _, _ = ensemble_run
    fig, info = make_map_figure(run, P1, coastlines=False, dpi=100)
    assert (info.cmap, info.vmin, info.vmax, info.extend) == ("magma_r", 0.0, 1.0, "neither")
    assert info.contour_levels == (0.5,)
    assert "probability 0.5 (contour)" in info.legend_labels
    assert "labelled black line: the 0.5 contour (edge of the cells >= it)" in info.caption
    assert "melt fraction of at least 0.5 % at the top of melting" in info.caption
    assert any(t.get_text() == "0.5" for t in info.ax.texts)
    assert info.colorbar.lines  # the level marked on the colour bar
    # the registry's name: what the probability is of
    assert info.title == "Probability that the melt the thermal anomaly adds is at least 1 km"
    fig.savefig(tmp_path / f"{P1}.png", dpi=100)


def test_caption_says_when_no_cell_crosses_the_contour(ensemble_run):
    """The 2 km map of a run where every cell is at most 0.7 has its 0.5 contour; a map that
    never reaches 0.5 has none, and its caption says so instead of promising one."""
    run, _, _ = ensemble_run
    doc = json.loads((run / "summary.json").read_text(encoding="utf-8"))
    with rasterio.open(run / f"{P2}.tif", "r+") as dst:
        dst.write(np.minimum(dst.read(1), 0.4), 1)  # nowhere 0.5
    reseal(run, **doc)
    _, info = make_map_figure(run, P2, coastlines=False, dpi=60)
    assert info.contour_levels == ()
    assert "no 0.5 contour: no cell crosses it" in info.caption
    assert "labelled black line" not in info.caption


def test_percentile_map_uses_its_base_style(ensemble_run):
    run, _, _ = ensemble_run
    _, info = make_map_figure(run, "melt_thickness_km_p90", coastlines=False, dpi=60)
    _, base = make_map_figure(run, "melt_thickness_km", coastlines=False, dpi=60)
    assert (info.cmap, info.zero_color, info.vmin) == (base.cmap, base.zero_color, 0.0)
    # 99.5th percentile of the melting cells, all 1.5 x 2 km (constructed) = 3 km
    assert info.vmax == pytest.approx(3.0)
    assert info.contour_levels == ()


def test_overview_of_an_ensemble_shows_its_probability_and_spread(ensemble_run, tmp_path):
    """Beside the deterministic panels: the run's probability of melting and the spread of the
    melt the anomaly adds, p90 - p10 (constructed: 1.5 x 2 km - 0.5 x 2 km = 2 km in A's core,
    0 elsewhere: the colour scale runs from 0 to its 99.5th percentile of the non-zero cells)."""
    from lidmelt.products._maps._overview import make_overview_figure

    run, _, _ = ensemble_run
    fig, info = make_overview_figure(run, coastlines=False, dpi=60)
    assert info.variables[-2:] == (P1, "anomaly_melt_thickness_km_spread")
    assert info.titles[-2] == "Probability that the melt the thermal anomaly adds is at least 1 km"
    assert "(90th minus 10th percentile)" in info.titles[-1]
    assert info.limits[-2] == (0.0, 1.0)
    assert info.limits[-1] == pytest.approx((0.0, 2.0))
    assert "Ensemble panels: (" in info.caption
    last = len(info.variables) - 1
    letters = f"({chr(ord('a') + last - 1)}, {chr(ord('a') + last)})"
    assert any(t.get_text().endswith(f"and its ensemble {letters}") for t in fig.texts)
    fig.savefig(tmp_path / "overview.png", dpi=60)


# ---------------------------------------------------------------------------------------
# Member histogram and report section
# ---------------------------------------------------------------------------------------


def test_member_histogram_marks_the_percentiles():
    members = members_table()
    given = {"p10": 3000.0, "p50": 3500.0, "p90": 4000.0}
    fig = member_histogram(members, percentiles=given)
    ax = fig.axes[0]
    fig.canvas.draw()
    # readable ticks in km3: whole numbers with thousands separators, no offset or multiplier
    assert ax.xaxis.get_offset_text().get_text() == ""
    labels = [t.get_text() for t in ax.get_xticklabels() if t.get_text()]
    assert labels
    assert all(re.fullmatch(r"-?\d{1,3}(,\d{3})*", t) for t in labels)
    assert [line.get_xdata()[0] for line in ax.lines] == [3000.0, 3500.0, 4000.0]
    assert sum(p.get_height() for p in ax.patches) == len(members)  # every member counted
    # Without the summary's: the members' percentiles by the runs' definition (Hyndman & Fan 7).
    ax = member_histogram(members).axes[0]
    expected = [percentile_hf7(members["melt_volume_km3"], q) for q in (10, 50, 90)]
    np.testing.assert_allclose([line.get_xdata()[0] for line in ax.lines], expected)
    with pytest.raises(InputError, match="no finite 'melt_volume_km3'"):
        member_histogram(members.drop(columns="melt_volume_km3"))
    # members without a value are left out, and the figure says how many
    gaps = members.copy()
    gaps.loc[:19, "melt_volume_km3"] = np.nan
    fig = member_histogram(gaps)
    assert sum(p.get_height() for p in fig.axes[0].patches) == len(members) - 20
    assert any("180 of the 200 members" in t.get_text() for t in fig.texts)


def test_drivers_ranked_by_variance_fraction():
    # the drivers by share; the key not distinguishable from noise after them, whatever its share
    keys = [d["key"] for d in ordered_drivers(DRIVERS)]
    assert keys == [
        "model.ambient_potential_temperature_c",
        "inputs.water.constant",
        "cooling.model",
    ]


def _section(html, key):
    start = html.index(f'<section id="{key}">')
    return html[start : html.index("</section>", start)]


def test_report_has_the_ensemble_section(ensemble_run, tmp_path):
    run, _, members = ensemble_run
    html = write_report(run, pdf=True).read_text(encoding="utf-8")
    section = _section(html, "ensemble")
    assert '<a href="#ensemble">' in html  # in the table of contents
    assert "200 members drawn by latin_hypercube sampling with seed 42" in section
    assert "melting tables built: 2" in section
    for key, spec in VARY.items():
        assert f'<td class="mono">{key}</td><td>{spec["distribution"]}</td>' in section
    assert "mean = 1350.0; sd = 25.0" in section  # the summary's values, exactly
    # Percentiles: the summary's values (from the members) to 3 significant figures.
    p50 = percentile_hf7(members["melt_volume_km3"], 50)
    assert f"<td>{float(f'{p50:.3g}'):,.0f}</td>" in section
    # Drivers in ranked order, with their intervals; the noise key unranked.
    order = [section.index(f"<td class=\"mono\">{d['key']}</td>", section.index("Rank</th>"))
             for d in ordered_drivers(DRIVERS)]  # fmt: skip
    assert order == sorted(order)
    assert "<td>0.930 (0.880 to 0.960)</td><td>0.860 (0.800 to 0.900)</td>" in section
    assert '<td>-</td><td class="mono">cooling.model</td>' in section
    assert NOISE in section
    assert "Probability of melting: the probability that the melt the thermal anomaly adds" in (
        section
    )
    assert "Every member has a value in every cell with data." in section
    # Two figures in the section: the probability map and the histogram, as PNG.
    images = re.findall(r'<img alt="([^"]*)" src="data:image/png;base64,([^"]+)"', section)
    assert images[0][0] == f"Map of {P1}"
    assert images[1][0].startswith("Basin melt volume of each ensemble member")
    for k, (_, data) in enumerate(images):
        png = base64.b64decode(data)
        assert png.startswith(b"\x89PNG\r\n\x1a\n")  # PNG signature (PNG spec, section 5.2)
        (tmp_path / f"section_{k}.png").write_bytes(png)
    # The maps section leaves the ensemble's maps to its section.
    maps = _section(html, "maps")
    assert "Map of melt_thickness_km" in maps
    assert "melt_probability" not in maps
    assert "melt_thickness_km_p90" not in maps
    pdf = (run / "report.pdf").read_bytes()
    assert pdf.startswith(b"%PDF")


def _pdf_images(path):
    """The image objects on the pages of a PDF (read back with pypdfium2)."""
    import pypdfium2 as pdfium
    import pypdfium2.raw as pdfium_raw

    doc = pdfium.PdfDocument(str(path))
    return sum(
        obj.type == pdfium_raw.FPDF_PAGEOBJ_IMAGE for page in doc for obj in page.get_objects()
    )


def test_pdf_puts_the_section_figures_on_pages(ensemble_run):
    """The ensemble's two figures are set in the PDF (two more images on its pages than
    without the ensemble section)."""
    run, _, _ = ensemble_run
    write_report(run, pdf=True)
    with_section = _pdf_images(run / "report.pdf")
    doc = json.loads((run / "summary.json").read_text(encoding="utf-8"))
    del doc["ensemble"]
    (run / "summary.json").write_text(json.dumps(doc), encoding="utf-8")
    reseal(run)
    html = write_report(run, pdf=True).read_text(encoding="utf-8")
    assert 'id="ensemble"' not in html
    without = _pdf_images(run / "report.pdf")
    assert with_section == without + 2


@pytest.mark.slow
def test_an_ensemble_run_lists_its_layers_as_outputs(tmp_path):
    """The ensemble's layers are outputs of the run like any other (summary "outputs"), so
    every product finds them; the default maps take the probability maps, not the percentiles.
    Check values: the layer names of the ensemble contract (docs/workflow.md [ensemble])."""
    from lidmelt._engine import run_basin
    from lidmelt.ensemble import ensemble_stages
    from lidmelt.grids._rundir import open_run
    from lidmelt.products._maps._write import default_map_variables
    from lidmelt.workflow import load_workflow

    root = Path(__file__).resolve().parents[1]
    cfg = load_workflow(
        root / "workflows" / "demo_ensemble.toml",
        overrides=["ensemble.members=4", "compute.chunk_size=512"],
        output_dir=tmp_path / "ens",
    )
    result = run_basin(cfg, progress=False, extra_stages=ensemble_stages(cfg, announce=False))
    run = open_run(result.run_dir)
    assert {P1, P2, "melt_thickness_km_p50", "members_without_value_fraction"} <= set(run.outputs)
    assert run.open(P1).attrs["units"] == "1"
    mapped = default_map_variables(run)
    assert P1 in mapped
    assert "melt_thickness_km_p50" not in mapped


def test_captions_write_ordinals_in_english():
    """'2nd and 98th', not '2th' (the excess to melt has limits at those percentiles)."""
    from lidmelt.products._maps._captions import CaptionOptions, map_caption

    style = style_for("excess_to_melt_k")
    assert style.percentiles == (2.0, 98.0)
    text = map_caption(
        {},
        CaptionOptions(
            style=style,
            no_melt=False,
            extend="neither",
            proj_name="Mercator",
            age=False,
            coast_path=None,
        ),
    )
    assert "from the 2nd and 98th percentiles" in text
    melt = map_caption(
        {},
        CaptionOptions(
            style=style_for("melt_thickness_km"),
            no_melt=True,
            extend="neither",
            proj_name="Mercator",
            age=False,
            coast_path=None,
        ),
    )
    assert "to the 99.5th percentile" in melt


def test_an_ensemble_layer_is_captioned_as_an_ensemble():
    """An ensemble map says how many members were drawn, how, and what was varied; the run's
    own lid, water and ambient Tp are named as the workflow's, not every member's (values of
    this invented summary)."""
    from lidmelt.products._maps._captions import ensemble_basis

    summary = {
        "ensemble": {"members": 8, "sampling": "latin_hypercube", "seed": 12, "vary": VARY},
        "ambient_potential_temperature_c": 1350.0,
        "min_top_of_melting_km": 7.0,
    }
    text = ensemble_basis(summary)
    assert text.startswith("Ensemble of 8 members (latin hypercube sampling, seed 12) varying ")
    assert all(key in text for key in VARY)
    assert text.endswith("ambient mantle potential temperature 1350 °C in the workflow itself.")
