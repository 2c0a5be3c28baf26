"""Tests of the products of an ensemble run: probability screening, probability and
percentile maps, the member histogram and the report's ensemble section.

The ensemble run directories are the tests' own invention, written as the ensemble run's
contract describes them (probability maps, percentile maps, ``ensemble_members.csv`` and the
summary's ``"ensemble"`` entry): an equal-area grid (EPSG:6933, 20 km cells, so every cell has
400 km^2 to rtol 1.5e-5, the projection's own round-off as in tests/test_regions.py) with
plume A, whose core (within 100 km of its centre) has probability of melting 0.9 and whose ring
(100-160 km) has 0.3, and plume B (within 80 km) with 0.6. Only A's core melts in the run's own
outputs (2 km). The probability of melt >= 1 km is 0.7, 0.1 and 0.2 there. Check values come
from these constructed fields (as stored in float32), from the documented rules, or from an
analytic identity named beside them.
"""

from __future__ import annotations

import base64
import json
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from affine import Affine

from conftest import reseal
from lidmelt.variables import ordinal

pytest.importorskip("cartopy.crs")

from lidmelt.cli import main
from lidmelt.errors import InputError, RunDirError
from lidmelt.products import ensemble as ens
from lidmelt.products.maps import make_map_figure, style_for
from lidmelt.products.maps.members import member_histogram
from lidmelt.products.maps.probability import draw_level_contours, fixed_limits
from lidmelt.products.report import write_report
from lidmelt.products.report.ensemble import ordered_drivers
from lidmelt.products.screening import screen

CELL_KM2 = 400.0  # 20 km x 20 km cells of an equal-area grid
T = Affine(20_000.0, 0, 0.0, 0, -20_000.0, 400_000.0)  # 40 rows x 60 columns
SHAPE = (40, 60)
CENTRE_A, CENTRE_B = (400_000.0, 0.0), (950_000.0, -150_000.0)

VARY = {
    "model.ambient_potential_temperature_c": {"distribution": "normal", "mean": 1350.0, "sd": 25.0},
    "inputs.water.constant": {"distribution": "uniform", "low": 0.005, "high": 0.03},
    "cooling.model": {"distribution": "choice", "values": ["half_space", "gdh1"]},
}
# Invented drivers, deliberately not in ranked order.
DRIVERS = [
    {
        "key": "inputs.water.constant",
        "rank_correlation_melt_volume": 0.21,
        "variance_fraction": 0.05,
    },
    {
        "key": "model.ambient_potential_temperature_c",
        "rank_correlation_melt_volume": 0.93,
        "variance_fraction": 0.86,
    },
    {"key": "cooling.model", "rank_correlation_melt_volume": -0.12, "variance_fraction": 0.02},
]


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


def totals_of(members):
    out = {}
    for col in ("melting_area_km2", "melt_volume_km3", "anomaly_melt_volume_km3"):
        v = members[col].to_numpy()
        out[col] = {f"p{q}": float(np.percentile(v, q)) for q in (10, 50, 90)}
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
    prob_1km = np.select([m["core"], m["ring"], m["b"]], [0.7, 0.1, 0.2], 0.0)
    members = members_table()
    ensemble = {
        "members": len(members),
        "seed": 42,
        "sampling": "latin_hypercube",
        "vary": VARY,
        "thresholds_km": [1.0],
        "percentiles": [10, 50, 90],
        "tables_built": 2,
        "totals": totals_of(members),
        "drivers": DRIVERS,
    }
    run = make_run_dir(
        {
            "melt_thickness_km": melt,
            "anomaly_melt_thickness_km": melt,
            "melt_probability": prob,
            "melt_probability_ge_1km": prob_1km,
            "melt_thickness_km_p10": 0.5 * melt,
            "melt_thickness_km_p90": 1.5 * melt,
        },
        transform=T,
        crs="EPSG:6933",
        summary={"ensemble": ensemble},
        name="ensemble",
    )
    set_units(
        run,
        {
            "melt_probability": "1",
            "melt_probability_ge_1km": "1",
            "melt_thickness_km_p10": "km",
            "melt_thickness_km_p90": "km",
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
    """The contract's names: melt_probability, melt_probability_ge_<T %g>km, <base>_p<q>."""
    assert ens.probability_name() == "melt_probability"
    assert ens.probability_name(1.0) == "melt_probability_ge_1km"
    assert ens.probability_name(0.5) == "melt_probability_ge_0.5km"
    assert ens.parse_ensemble_name("melt_probability_ge_0.5km").threshold_km == 0.5
    p90 = ens.parse_ensemble_name("anomaly_melt_thickness_km_p90")
    assert (p90.kind, p90.base, p90.percentile) == ("percentile", "anomaly_melt_thickness_km", 90)
    assert ens.parse_ensemble_name("melt_thickness_km") is None
    assert ens.parse_ensemble_name("not_a_variable_p90") is None
    assert ens.variable_of("melt_probability").units == "1"
    assert ens.variable_of("onset_depth_km_p50").units == "km"
    # English ordinals
    assert [ordinal(q) for q in (1, 2, 3, 10, 11, 12, 22, 2.5)] == [
        "1st", "2nd", "3rd", "10th", "11th", "12th", "22nd", "2.5th"
    ]  # fmt: skip


# ---------------------------------------------------------------------------------------
# Screening by probability
# ---------------------------------------------------------------------------------------


def test_probability_screening_finds_the_likely_cells(ensemble_run):
    run, m, _ = ensemble_run
    out = screen(run, min_probability=0.5)
    assert out.attrs["lidmelt_probability"] == "melt_probability"
    assert list(out["n_cells"]) == [m["core"].sum(), m["b"].sum()]  # A melts: rank 1
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
    out = screen(run, min_probability=0.5, probability=1.0)
    assert out.attrs["lidmelt_probability"] == "melt_probability_ge_1km"
    assert list(out["n_cells"]) == [m["core"].sum()]  # B: 0.2 < 0.5
    assert out.iloc[0]["mean_probability"] == pytest.approx(f32(0.7), rel=1e-12)
    same = screen(run, min_probability=0.5, probability="melt_probability_ge_1km")
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
    assert out.attrs["lidmelt_probability"] == "melt_probability"
    single = screen(single_run, min_melt_thickness_km=1.0)
    assert not set(ens.PROBABILITY_STATISTICS) & set(single.columns)
    assert single.attrs["lidmelt_probability"] == ""


def test_probability_screening_errors(ensemble_run, single_run):
    run, _, _ = ensemble_run
    with pytest.raises(RunDirError, match=r"not an ensemble.*docs/workflow.md, \[ensemble\]"):
        screen(single_run, min_probability=0.5)
    with pytest.raises(RunDirError, match="its probability maps are melt_probability, "):
        screen(run, min_probability=0.5, probability=2.0)
    for bad in (0.0, 1.5, float("nan"), "high"):
        with pytest.raises(InputError, match=r"not a probability in \(0, 1\]"):
            screen(run, min_probability=bad)
    with pytest.raises(InputError, match="needs a threshold"):
        screen(run)
    with pytest.raises(InputError, match="no --min-probability P was given"):
        screen(run, min_melt_thickness_km=1.0, probability=1.0)
    with pytest.raises(InputError, match="not a probability map name"):
        screen(run, min_probability=0.5, probability="melt_thickness_km")
    with pytest.raises(InputError, match="not a melt thickness"):
        screen(run, min_probability=0.5, probability=-1.0)


def test_cli_screen_min_probability(ensemble_run, single_run, tmp_path, capsys):
    import geopandas as gpd

    run, m, _ = ensemble_run
    out = tmp_path / "c.gpkg"
    assert main(["screen", str(run), "--min-probability", "0.5", "-o", str(out)]) == 0
    text = capsys.readouterr().out
    assert "mean_probability" in text
    assert "likely_area_km2" in text
    assert "2 candidate region(s) with melt_probability >= 0.5 and area >= 0 km2" in text
    written = gpd.read_file(out)
    assert list(written["n_cells"]) == [m["core"].sum(), m["b"].sum()]
    assert written["max_probability"].tolist() == [f32(0.9), f32(0.6)]
    args = ["screen", str(run), "--min-probability", "0.5", "--probability-of", "1"]
    assert main([*args, "-o", str(out)]) == 0
    assert "1 candidate region(s) with melt_probability_ge_1km >= 0.5" in capsys.readouterr().out
    assert main(["screen", str(single_run), "--min-probability", "0.5", "-o", str(out)]) == 1
    assert "[ensemble]" in capsys.readouterr().err
    assert main(["screen", str(run), "-o", str(out)]) == 1
    assert "--min-melt-thickness KM" in capsys.readouterr().err


# ---------------------------------------------------------------------------------------
# Maps
# ---------------------------------------------------------------------------------------


def test_probability_and_percentile_styles():
    for name in ("melt_probability", "melt_probability_ge_1km"):
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


def test_probability_map_has_fixed_limits_and_the_labelled_contour(ensemble_run, tmp_path):
    run, _, _ = ensemble_run
    fig, info = make_map_figure(run, "melt_probability", coastlines=False, dpi=100)
    assert (info.cmap, info.vmin, info.vmax, info.extend) == ("magma_r", 0.0, 1.0, "neither")
    assert info.contour_levels == (0.5,)
    assert "probability 0.5 (contour)" in info.legend_labels
    assert "Colour scale fixed from 0 to 1; labelled black line: the 0.5 contour" in info.caption
    assert any(t.get_text() == "0.5" for t in info.ax.texts)
    assert info.colorbar.lines  # the level marked on the colour bar
    assert info.colorbar_label == "Probability of melting (dimensionless)"  # registry name
    fig.savefig(tmp_path / "melt_probability.png", dpi=100)


def test_percentile_map_uses_its_base_style(ensemble_run):
    run, _, _ = ensemble_run
    _, info = make_map_figure(run, "melt_thickness_km_p90", coastlines=False, dpi=60)
    _, base = make_map_figure(run, "melt_thickness_km", coastlines=False, dpi=60)
    assert (info.cmap, info.zero_color, info.vmin) == (base.cmap, base.zero_color, 0.0)
    # 99.5th percentile of the melting cells, all 1.5 x 2 km (constructed) = 3 km
    assert info.vmax == pytest.approx(3.0)
    assert info.contour_levels == ()


# ---------------------------------------------------------------------------------------
# Member histogram and report section
# ---------------------------------------------------------------------------------------


def test_member_histogram_marks_the_percentiles():
    members = members_table()
    given = {"p10": 3000.0, "p50": 3500.0, "p90": 4000.0}
    fig = member_histogram(members, percentiles=given)
    ax = fig.axes[0]
    assert [line.get_xdata()[0] for line in ax.lines] == [3000.0, 3500.0, 4000.0]
    assert sum(p.get_height() for p in ax.patches) == len(members)  # every member counted
    # Without the summary's: numpy's percentiles of the members (linear interpolation).
    ax = member_histogram(members).axes[0]
    expected = np.percentile(members["melt_volume_km3"], [10, 50, 90])
    np.testing.assert_allclose([line.get_xdata()[0] for line in ax.lines], expected)
    with pytest.raises(InputError, match="no finite 'melt_volume_km3'"):
        member_histogram(members.drop(columns="melt_volume_km3"))


def test_drivers_ranked_by_variance_fraction():
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
    p50 = np.percentile(members["melt_volume_km3"], 50)
    assert f"<td>{float(f'{p50:.3g}'):,.0f}</td>" in section
    # Drivers in ranked order.
    order = [section.index(f"<td class=\"mono\">{d['key']}</td>", section.index("Rank</th>"))
             for d in ordered_drivers(DRIVERS)]  # fmt: skip
    assert order == sorted(order)
    # Two figures in the section: the probability map and the histogram, as PNG.
    images = re.findall(r'<img alt="([^"]*)" src="data:image/png;base64,([^"]+)"', section)
    assert images[0][0] == "Map of melt_probability"
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
    from lidmelt.engine import run_basin
    from lidmelt.ensemble import ensemble_stages
    from lidmelt.grids.rundir import open_run
    from lidmelt.products.maps.write import default_map_variables
    from lidmelt.workflow import load_workflow

    root = Path(__file__).resolve().parents[1]
    cfg = load_workflow(
        root / "workflows" / "demo_ensemble.toml",
        overrides=["ensemble.members=4", "compute.chunk_size=512"],
        output_dir=tmp_path / "ens",
    )
    result = run_basin(cfg, progress=False, extra_stages=ensemble_stages(cfg, announce=False))
    run = open_run(result.run_dir)
    assert {"melt_probability", "melt_thickness_km_p50"} <= set(run.outputs)
    assert run.open("melt_probability").attrs["units"] == "1"
    mapped = default_map_variables(run)
    assert "melt_probability" in mapped
    assert "melt_thickness_km_p50" not in mapped


def test_an_ensemble_layer_is_captioned_as_an_ensemble():
    """An ensemble map says how many members were drawn, how, and what was varied; the run's
    own lid, water and ambient Tp are named as the workflow's, not every member's (values of
    this invented summary)."""
    from lidmelt.products.maps.captions import ensemble_basis

    summary = {
        "ensemble": {"members": 8, "sampling": "latin_hypercube", "seed": 12, "vary": VARY},
        "ambient_potential_temperature_c": 1350.0,
        "min_top_of_melting_km": 7.0,
    }
    text = ensemble_basis(summary)
    assert text.startswith("Ensemble of 8 members (latin hypercube sampling, seed 12) varying ")
    assert all(key in text for key in VARY)
    assert text.endswith("ambient mantle potential temperature 1350 °C in the workflow itself.")
